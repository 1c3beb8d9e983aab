//! Seeded random-mutation robustness test of the EDF parser: thousands of
//! corrupted versions of small EDF+ files (the wfdb-conformance
//! `test_edfann.edf` cut to size, and files from this crate's writer) go
//! through `parse_edf` and `edf_to_record`; they must return Ok or Err, never
//! panic. (Complements the cargo-fuzz target fuzz/fuzz_targets/edf.rs.)

mod mutation_util;

use mutation_util::Rng;
use std::path::{Path, PathBuf};

use tendline_formats::edf::{edf_to_record, encode_edf, parse_edf, EdfAnnotation};
use tendline_formats::{Lead, Metadata, Record, Sex};

/// Text a header field might plausibly (or implausibly) hold.
const FIELD_VALUES: [&[u8]; 12] = [
    b"-1      ",
    b"0       ",
    b"-5      ",
    b"99999999",
    b"1e308   ",
    b"nan     ",
    b"+3      ",
    b"0.000001",
    b"EDF+D   ",
    b"32767   ",
    b"-32768  ",
    b"        ",
];

fn mutate(rng: &mut Rng, seed: &[u8]) -> Vec<u8> {
    let mut b = seed.to_vec();
    for _ in 0..1 + rng.below(3) {
        match rng.below(6) {
            0 if !b.is_empty() => {
                // Header bytes are where the structure is: favour them.
                let hdr = b.len().min(256 * 4);
                let i = if rng.below(2) == 0 {
                    rng.below(hdr)
                } else {
                    rng.below(b.len())
                };
                b[i] = rng.next() as u8;
            }
            1 if b.len() > 8 => {
                // Overwrite an 8-byte-aligned header slot with a tricky value.
                let hdr = b.len().min(256 * 4) - 8;
                let i = rng.below(hdr / 4 + 1) * 4;
                let v = FIELD_VALUES[rng.below(FIELD_VALUES.len())];
                b[i..i + 8].copy_from_slice(v);
            }
            2 => {
                let n = rng.below(b.len() + 1);
                b.truncate(n);
            }
            3 if !b.is_empty() => {
                // Annotation control bytes anywhere.
                let i = rng.below(b.len());
                b[i] = [0u8, 0x14, 0x15, b'+', b'-', b'.'][rng.below(6)];
            }
            4 => {
                let n = rng.below(64);
                let at = rng.below(b.len() + 1);
                let junk: Vec<u8> = (0..n).map(|_| rng.next() as u8).collect();
                b.splice(at..at, junk);
            }
            _ => {
                let i = rng.below(b.len() + 1);
                b.insert(i, b' ');
            }
        }
    }
    b
}

fn writer_seed() -> Vec<u8> {
    let rec = Record {
        name: "s".into(),
        fs: 8.0,
        leads: (0..2)
            .map(|k| Lead {
                name: format!("ECG {k}"),
                units: "mV".into(),
                samples: (0..24).map(|i| ((i * (k + 3)) % 7) as f64 * 0.1).collect(),
            })
            .collect(),
        meta: Metadata {
            age: Some(40.0),
            sex: Some(Sex::Male),
            ..Default::default()
        },
        files: vec![],
        warnings: vec![],
    };
    let anns = [EdfAnnotation {
        onset_s: 1.5,
        duration_s: Some(0.25),
        text: "beat".into(),
    }];
    encode_edf(&rec, &anns).unwrap()
}

#[test]
fn mutated_edf_files_never_panic() {
    let mut seeds = vec![writer_seed()];
    let conf = PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/wfdb-conformance/test_edfann.edf"
    ));
    match std::fs::read(&conf) {
        // Header (512 bytes) + the first 256 bytes of its single data record,
        // with the annotation signal shrunk to 128 samples to match.
        Ok(b) => {
            let mut s = b[..512 + 256].to_vec();
            s[256 + 16 + 80 + 8 * 6..256 + 16 + 80 + 8 * 7].copy_from_slice(b"128     ");
            seeds.push(s);
        }
        Err(_) => eprintln!("note: {} not found, synthetic seed only", conf.display()),
    }
    let mut rng = Rng(0x5eed_0002);
    let (mut ok, mut err) = (0usize, 0usize);
    for i in 0..20_000 {
        let input = mutate(&mut rng, &seeds[i % seeds.len()]);
        match parse_edf(&input, Path::new("mutant.edf")) {
            Ok(file) => match edf_to_record(file, Path::new("mutant.edf")) {
                Ok(rec) => {
                    ok += 1;
                    assert!(rec.fs.is_finite() && rec.fs > 0.0);
                }
                Err(_) => err += 1,
            },
            Err(e) => {
                err += 1;
                assert!(e.to_string().contains("mutant.edf"));
            }
        }
    }
    eprintln!("EDF mutants: {ok} read as records, {err} rejected");
    assert!(ok > 0 && err > 0, "mutations should produce both outcomes");
}
