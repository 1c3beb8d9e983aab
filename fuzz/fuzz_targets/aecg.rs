//! Fuzz target: the HL7 aECG XML parser must return a record or a typed error
//! for any bytes, never panic.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use tendline_formats::aecg::parse_aecg;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = parse_aecg(text, Path::new("fuzz.xml"));
    }
});
