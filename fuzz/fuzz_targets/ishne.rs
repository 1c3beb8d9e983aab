//! Fuzz target: the ISHNE Holter reader must return a record or a typed error
//! for any bytes, never panic or allocate more than the bytes hold.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use tendline_formats::ishne::parse_ishne;

fuzz_target!(|data: &[u8]| {
    let _ = parse_ishne(data, Path::new("fuzz.ecg"));
});
