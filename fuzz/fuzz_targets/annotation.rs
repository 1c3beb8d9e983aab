//! Fuzz target: the WFDB annotation parser must return annotations or a typed
//! error for any bytes, never panic; whatever it accepts and can write must
//! read back identically.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use tendline_formats::annotation::{encode_annotation_file, parse_annotation_file};

fuzz_target!(|data: &[u8]| {
    if let Ok(file) = parse_annotation_file(data, Path::new("fuzz.atr")) {
        if let Ok(bytes) = encode_annotation_file(&file) {
            let back = parse_annotation_file(&bytes, Path::new("fuzz-rewrite.atr"))
                .expect("writer output must parse");
            assert!(
                back.annotations == file.annotations,
                "round trip changed annotations"
            );
        }
    }
});
