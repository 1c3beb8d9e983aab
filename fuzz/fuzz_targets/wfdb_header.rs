//! Fuzz target: the WFDB header parser must return a value or a typed error for
//! any text, never panic. Bytes that are not UTF-8 are read as Latin-1, as
//! `wfdb::read_header` does.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = match std::str::from_utf8(data) {
        Ok(s) => s.to_string(),
        Err(_) => data.iter().map(|&b| b as char).collect(),
    };
    let _ = tendline_formats::wfdb::parse_header(&text, Path::new("fuzz.hea"));
});
