//! Seeded random-mutation robustness test of the annotation parser: thousands
//! of corrupted versions of real annotation files (../shared/data) and of
//! writer output go through `parse_annotations`; it must return Ok or Err,
//! never panic, and whatever it accepts must re-encode and parse back equal.
//! (Complements the cargo-fuzz target fuzz/fuzz_targets/annotation.rs.)

mod mutation_util;

use mutation_util::Rng;
use std::path::{Path, PathBuf};

use tendline_formats::annotation::{
    encode_annotation_file, parse_annotation_file, parse_annotations, Annotation,
};

fn mutate(rng: &mut Rng, seed: &[u8]) -> Vec<u8> {
    let mut b = seed.to_vec();
    for _ in 0..1 + rng.below(4) {
        match rng.below(6) {
            0 if !b.is_empty() => {
                let i = rng.below(b.len());
                b[i] ^= 1 << rng.below(8);
            }
            1 if !b.is_empty() => {
                let i = rng.below(b.len());
                b[i] = rng.next() as u8;
            }
            2 => {
                let n = rng.below(b.len() + 1);
                b.truncate(n);
            }
            3 => {
                // Insert a pseudo-annotation word (SKIP/NUM/SUB/CHN/AUX) with a random value.
                let i = rng.below(b.len() + 1) & !1;
                let code = 59 + rng.below(5) as u16;
                let w = (code << 10) | (rng.next() as u16 & 0x3ff);
                b.splice(i.min(b.len())..i.min(b.len()), w.to_le_bytes());
            }
            4 if b.len() > 4 => {
                let a = rng.below(b.len());
                let n = rng.below(b.len() - a);
                let chunk = b[a..a + n].to_vec();
                let at = rng.below(b.len());
                b.splice(at..at, chunk);
            }
            _ => {
                let i = rng.below(b.len() + 1);
                b.insert(i, rng.next() as u8);
            }
        }
    }
    b
}

fn seeds() -> Vec<Vec<u8>> {
    let mut s = Vec::new();
    let data = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    for f in [
        "wfdb-conformance/100.atr",
        "wfdb-conformance/1003.atr",
        "wfdb-conformance/huge.qrs",
        "qtdb/sel100.q1c",
        "ludb/1.ii",
    ] {
        match std::fs::read(data.join(f)) {
            Ok(b) => s.push(b[..b.len().min(4000)].to_vec()),
            Err(_) => eprintln!("note: seed {f} not found, using synthetic seeds only"),
        }
    }
    let mut a = Annotation::new(5, "(");
    a.aux = Some(b"odd".to_vec());
    a.num = -3;
    a.chan = 2;
    a.subtype = 1;
    s.push(
        tendline_formats::annotation::encode_annotations(&[a, Annotation::new(3_000_000_000, "N")])
            .unwrap(),
    );
    s
}

#[test]
fn mutated_annotation_files_never_panic() {
    let mut rng = Rng(0x5eed_0001);
    let seeds = seeds();
    let (mut ok, mut err) = (0usize, 0usize);
    for i in 0..20_000 {
        let seed = &seeds[i % seeds.len()];
        let input = mutate(&mut rng, seed);
        match parse_annotation_file(&input, Path::new("mutant.atr")) {
            Ok(file) => {
                ok += 1;
                // Anything accepted and writable must survive a round trip.
                if let Ok(bytes) = encode_annotation_file(&file) {
                    let back = parse_annotation_file(&bytes, Path::new("re")).unwrap();
                    // Compare without printing the (large) values on failure.
                    assert!(
                        back.annotations == file.annotations,
                        "mutant {i}: accepted file does not survive write/read"
                    );
                }
            }
            Err(e) => {
                err += 1;
                assert!(e.to_string().contains("mutant.atr"));
            }
        }
    }
    eprintln!("annotation mutants: {ok} accepted, {err} rejected");
    assert!(ok > 0 && err > 0, "mutations should produce both outcomes");
    // Pure random bytes too.
    for _ in 0..5_000 {
        let n = rng.below(64);
        let v: Vec<u8> = (0..n).map(|_| rng.next() as u8).collect();
        let _ = parse_annotations(&v, Path::new("random.atr"));
    }
}
