//! Fuzz target: a multi-segment WFDB record must read or fail with a typed
//! error, never panic. Input: master header text, a 0 byte, a segment header
//! text, a 0 byte, signal-file bytes. They are stored as `m.hea`, `s.hea` and
//! `s.dat`, so a master header naming segment `s` reaches the code that reads
//! and joins segments (`wfdb_record` has a single header and cannot).
#![no_main]

use std::path::PathBuf;
use std::sync::OnceLock;

use libfuzzer_sys::fuzz_target;

fn dir() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = std::env::temp_dir().join(format!("tendline-fuzz-mseg-{}", std::process::id()));
        std::fs::create_dir_all(&d).expect("temp dir");
        d
    })
}

fn split0(b: &[u8]) -> (&[u8], &[u8]) {
    let i = b.iter().position(|&c| c == 0).unwrap_or(b.len());
    (&b[..i], b.get(i + 1..).unwrap_or(&[]))
}

fuzz_target!(|data: &[u8]| {
    let (master, rest) = split0(data);
    let (seg, dat) = split0(rest);
    let d = dir();
    std::fs::write(d.join("m.hea"), master).expect("write master header");
    std::fs::write(d.join("s.hea"), seg).expect("write segment header");
    std::fs::write(d.join("s.dat"), dat).expect("write signal file");
    let _ = tendline_formats::wfdb::read_digital(&d.join("m.hea"));
    let _ = tendline_formats::wfdb::read_record(&d.join("m"));
});
