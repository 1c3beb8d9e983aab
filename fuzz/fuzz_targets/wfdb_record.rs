//! Fuzz target: a whole WFDB record (header text, a 0 byte, signal-file bytes
//! stored as `r.dat`) must read or fail with a typed error, never panic.
#![no_main]

use std::path::PathBuf;
use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;

fn dir() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = std::env::temp_dir().join(format!("tendline-fuzz-wfdb-{}", std::process::id()));
        std::fs::create_dir_all(&d).expect("temp dir");
        d
    })
}

fuzz_target!(|data: &[u8]| {
    let split = data.iter().position(|&b| b == 0).unwrap_or(data.len());
    let (hea, dat) = (&data[..split], data.get(split + 1..).unwrap_or(&[]));
    let d = dir();
    std::fs::write(d.join("r.hea"), hea).expect("write header");
    std::fs::write(d.join("r.dat"), dat).expect("write signal file");
    let _ = tendline_formats::wfdb::read_digital(&d.join("r.hea"));
    let _ = tendline_formats::wfdb::read_record(&d.join("r"));
});
