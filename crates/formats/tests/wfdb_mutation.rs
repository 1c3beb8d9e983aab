//! Property-style robustness test (runs on stable, complements `fuzz/`): many
//! mutated WFDB headers, with random signal-file bytes, from a seeded RNG. The
//! property: the parser and reader return a value or a typed error — never a
//! panic — and errors name the header or signal file.

use std::path::{Path, PathBuf};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use tendline_formats::wfdb;

const SEEDS: &[&str] = &[
    "r 2 250/360 6\r\nr.dat 212 200(0) 11 1024 945 -13873 0 MLII\r\nr.dat 212 200(0) 11 1024 955 14507 0 V5\r\n# 69 M 1085 1629 x1\r\n",
    "r 3 500 4\nr.dat 16x2:1+2 100/mV 16 0 10 114 0 ECG 1\nr.dat 16 100/uV 16 0 -8 941 0 ECG 2\nr.dat 16:3 1(2)/V 16 0 1 2 0 III\n#<age>: 51\n#<sex>: F\n",
    "r 10 200\nr.dat 8 200/mV 12 0 -2047 -31143 0 a\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\nr.dat 8\n",
    "r 2 250 5\nr.dat 310 200 10 0 -5 -3426 0 c0\nr.dat 310 200 10 0 0 4385 0 c1\n",
    "r 1 360 7\nr.dat 311 200 10 0 -5 -3380 0 c1\n",
    "r 2 100 3 10:44:18.529 04/05/2704\nr.dat 24 200/mV 24 0 0 0 0 a\nr.dat 24\n",
    "r 1 100\nr.dat 32+8 200/mV 32 0 0 0 0 a\n",
    "r 2 1\nr.dat 61\nr.dat 61x3\n",
    "r 2 1 9\nr.dat 80\nr.dat 80:2\n",
    "r 1 1 9\nr.dat 160 0.5(-3)/mmHg\n",
    "r/2 2 250 8\nr 4\nr 4\n",
    "r/3 2 250 12\nq_layout 0\n~ 4\nr 4\n",
];

const TOKENS: &[&str] = &[
    "x",
    ":",
    "+",
    "(",
    ")",
    "/",
    "#",
    "\r\n",
    "\n",
    " ",
    "~",
    "4294967295",
    "18446744073709551616",
    "-1",
    "0",
    "212",
    "310",
    "311",
    "8",
    "16",
    "24",
    "32",
    "61",
    "80",
    "160",
    "508",
    "1e308",
    "NaN",
    "inf",
    "-0",
    "r.dat",
    "r",
    "/9999999999",
    "x0",
    ":99999999999",
    "+18446744073709551615",
    "µV",
    "\u{0}",
];

/// Every signal holds one sample per frame and sample-per-frame slot.
fn assert_shapes(w: &wfdb::WfdbSignals) {
    for s in &w.signals {
        assert_eq!(
            s.samples.len() as u64,
            w.n_frames * s.spec.samples_per_frame as u64
        );
    }
}

fn mutate(rng: &mut ChaCha8Rng, s: &str) -> Vec<u8> {
    let mut b = s.as_bytes().to_vec();
    for _ in 0..rng.gen_range(1..6) {
        let at = if b.is_empty() {
            0
        } else {
            rng.gen_range(0..=b.len())
        };
        match rng.gen_range(0..5) {
            0 if !b.is_empty() => {
                let i = rng.gen_range(0..b.len());
                b[i] = rng.gen();
            }
            1 => {
                let t = TOKENS[rng.gen_range(0..TOKENS.len())].as_bytes();
                b.splice(at..at, t.iter().copied());
            }
            2 if !b.is_empty() => {
                let end = (at + rng.gen_range(1..8)).min(b.len());
                b.drain(at.min(end)..end);
            }
            3 => {
                // Replace a whitespace-separated field by a random number.
                let n: i64 = match rng.gen_range(0..3) {
                    0 => rng.gen_range(-5..20),
                    1 => rng.gen(),
                    _ => rng.gen_range(0..100_000_000_000),
                };
                b.splice(at..at, format!(" {n} ").into_bytes());
            }
            _ => {
                // Duplicate a random slice.
                if !b.is_empty() {
                    let i = rng.gen_range(0..b.len());
                    let end = (i + rng.gen_range(1..40)).min(b.len());
                    let piece: Vec<u8> = b[i..end].to_vec();
                    b.splice(at..at, piece);
                }
            }
        }
    }
    b
}

fn seeds() -> Vec<String> {
    let mut v: Vec<String> = SEEDS.iter().map(|s| s.to_string()).collect();
    let conf = PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/wfdb-conformance"
    ));
    if let Ok(rd) = std::fs::read_dir(&conf) {
        let mut files: Vec<PathBuf> = rd
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|e| e == "hea"))
            .collect();
        files.sort();
        for f in files {
            if let Ok(t) = std::fs::read_to_string(&f) {
                v.push(t);
            }
        }
    } else {
        eprintln!(
            "note: {} absent; mutating built-in seeds only",
            conf.display()
        );
    }
    v
}

fn latin1(b: &[u8]) -> String {
    match std::str::from_utf8(b) {
        Ok(s) => s.to_string(),
        Err(_) => b.iter().map(|&c| c as char).collect(),
    }
}

#[test]
fn mutated_headers_never_panic() {
    let mut rng = ChaCha8Rng::seed_from_u64(20261202);
    let seeds = seeds();
    let path = Path::new("m.hea");
    let mut ok = 0;
    for _ in 0..40_000 {
        let s = &seeds[rng.gen_range(0..seeds.len())];
        let text = latin1(&mutate(&mut rng, s));
        match wfdb::parse_header(&text, path) {
            Ok(_) => ok += 1,
            Err(e) => assert!(e.to_string().starts_with("m.hea: "), "{e}"),
        }
    }
    // The mutations must leave a share of valid headers, or the test explores nothing.
    assert!(ok > 1000, "only {ok} mutated headers parsed");
}

#[test]
fn mutated_records_never_panic() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let dir = tempfile::tempdir().unwrap();
    let hea = dir.path().join("r.hea");
    let (mut read, mut tried) = (0, 0);
    for _ in 0..3_000 {
        // Built-in seeds reference `r.dat`; the conformance headers are not used here.
        let s = SEEDS[rng.gen_range(0..SEEDS.len())];
        std::fs::write(&hea, mutate(&mut rng, s)).unwrap();
        let n: usize = rng.gen_range(0..120);
        let dat: Vec<u8> = (0..n).map(|_| rng.gen()).collect();
        std::fs::write(dir.path().join("r.dat"), &dat).unwrap();
        tried += 1;
        match wfdb::read_digital(&hea) {
            Ok(w) => {
                read += 1;
                assert_shapes(&w);
            }
            Err(e) => {
                let m = e.to_string();
                assert!(
                    m.contains("r.hea") || m.contains("r.dat") || m.contains(".hea"),
                    "{m}"
                );
            }
        }
        let _ = wfdb::read_record(&hea);
    }
    assert!(read > 100, "only {read} of {tried} mutated records read");
}

/// Damaged FLAC signal files (formats 508/516/524): bytes of the conformance
/// records' FLAC streams changed, cut or repeated at random. The FLAC decoder
/// (a dependency) sees the bytes; the property is the same as above: samples of
/// the right count or a typed error naming the signal file, never a panic.
#[test]
fn mutated_flac_files_never_panic() {
    let conf = PathBuf::from(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/wfdb-conformance"
    ));
    // Header line per file, from the conformance headers (mixedsignals_p is a
    // 2-channel stream, which FLAC may code as mid/side stereo).
    let cases = [
        (
            "flacformats.d2",
            "r 1 200 499\nf.dat 524 200/mV 24 0 -8388605 8721 0 s\n",
        ),
        (
            "mixedsignals_p.dat",
            "r 2 62.4725 14400\nf.dat 516x2\nf.dat 516x2\n",
        ),
        (
            "mixedsignals_e.dat",
            "r 3 62.4725 14400\nf.dat 516x4\nf.dat 516x4\nf.dat 516x4\n",
        ),
    ];
    let Ok(originals) = cases
        .iter()
        .map(|(f, _)| std::fs::read(conf.join(f)))
        .collect::<Result<Vec<_>, _>>()
    else {
        eprintln!("SKIP: {} absent", conf.display());
        return;
    };
    let mut rng = ChaCha8Rng::seed_from_u64(508);
    let dir = tempfile::tempdir().unwrap();
    let hea = dir.path().join("r.hea");
    let dat = dir.path().join("f.dat");
    let (mut read, mut failed) = (0, 0);
    for _ in 0..1_500 {
        let k = rng.gen_range(0..cases.len());
        let mut b = originals[k].clone();
        for _ in 0..rng.gen_range(1..4) {
            let at = rng.gen_range(0..b.len());
            match rng.gen_range(0..4) {
                0 => b[at] ^= 1 << rng.gen_range(0..8),
                1 => b[at] = rng.gen(),
                2 => b.truncate(at.max(1)),
                _ => {
                    let end = (at + rng.gen_range(1..64)).min(b.len());
                    let piece = b[at..end].to_vec();
                    let to = rng.gen_range(0..=b.len());
                    b.splice(to..to, piece);
                }
            }
        }
        std::fs::write(&hea, cases[k].1).unwrap();
        std::fs::write(&dat, &b).unwrap();
        match wfdb::read_digital(&hea) {
            Ok(w) => {
                read += 1;
                assert_shapes(&w);
            }
            Err(e) => {
                failed += 1;
                assert_eq!(e.path(), dat, "{e}");
            }
        }
    }
    // Both outcomes must occur: damage past the samples the header asks for
    // (or in padding) is harmless, damage in the frames is caught.
    assert!(read > 0 && failed > 1000, "{read} read, {failed} failed");
}
