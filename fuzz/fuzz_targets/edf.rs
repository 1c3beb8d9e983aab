//! Fuzz target: the EDF/EDF+ parser and the conversion to a record must return
//! a value or a typed error for any bytes, never panic.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use tendline_formats::edf::{edf_to_record, parse_edf};

fuzz_target!(|data: &[u8]| {
    if let Ok(file) = parse_edf(data, Path::new("fuzz.edf")) {
        let _ = edf_to_record(file, Path::new("fuzz.edf"));
    }
});
