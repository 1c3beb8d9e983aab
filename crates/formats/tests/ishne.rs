//! ISHNE Holter reader: values, header fields and errors on files built byte by
//! byte (tests/ishne_util), and the CRC against its published check value.

mod ishne_util;

use std::path::Path;

use ishne_util::{crc_table, Ishne};
use tendline_formats::ishne::{crc_ccitt, parse_ishne};
use tendline_formats::{FormatError, Sex};

fn sample() -> Ishne {
    Ishne {
        fs: 200,
        codes: vec![6, 11, 99],
        res_nv: vec![2500, 1000, 5000],
        data: vec![
            vec![0, 400, -400, 32767],
            vec![1, -1, 1000, -32768],
            vec![7, 8, 9, 10],
        ],
        sex: 2,
        birth: (15, 6, 1950),
        recorded: (14, 6, 2020),
        id: "S-007".into(),
        var_block: b"free text".to_vec(),
    }
}

#[test]
fn crc_matches_the_published_check_value() {
    // CRC-16/CCITT-FALSE of the ASCII digits "123456789" is 0x29B1 (the check
    // value of CRC catalogues, from memory); the test's table-driven CRC agrees.
    assert_eq!(crc_ccitt(b"123456789"), 0x29b1);
    assert_eq!(crc_table(b"123456789"), 0x29b1);
    let bytes: Vec<u8> = (0..=255u8).cycle().take(3000).collect();
    assert_eq!(crc_ccitt(&bytes), crc_table(&bytes));
}

#[test]
fn hand_built_file_reads_exactly() {
    let b = sample().bytes();
    let r = parse_ishne(&b, Path::new("h.ecg")).unwrap();
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);
    assert_eq!((r.name.as_str(), r.fs, r.n_samples()), ("h", 200.0, 4));
    let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
    assert_eq!(names, ["II", "V1", "lead3"]);
    // digital × resolution (nV) in mV: 400 × 2500 nV = 1 mV.
    let want = [
        [0.0, 1.0, -1.0, 32767.0 * 2.5e-3],
        [1e-3, -1e-3, 1.0, -32768.0 * 1e-3],
        [0.035, 0.040, 0.045, 0.050],
    ];
    for (l, w) in r.leads.iter().zip(want) {
        assert_eq!(l.units, "mV");
        for (x, y) in l.samples.iter().zip(w) {
            assert!((x - y).abs() < 1e-12, "{}: {x} vs {y}", l.name);
        }
    }
    assert_eq!(r.meta.sex, Some(Sex::Female));
    // Born 15 June 1950, recorded 14 June 2020: 69 completed years.
    assert_eq!(r.meta.age, Some(69.0));
    assert_eq!(r.meta.subject.as_deref(), Some("S-007"));
}

fn invalid_with(b: &[u8], needle: &str) {
    match parse_ishne(b, Path::new("bad.ecg")) {
        Err(e @ FormatError::Invalid { .. }) => {
            let m = e.to_string();
            assert!(m.contains("bad.ecg") && m.contains(needle), "{m}");
        }
        other => panic!("expected an error with {needle:?}, got {other:?}"),
    }
}

#[test]
fn bad_files_are_named_errors_and_a_bad_crc_a_warning() {
    let good = sample().bytes();
    invalid_with(&good[..good.len() - 1], "truncated ISHNE file");
    invalid_with(&good[..300], "truncated ISHNE header");
    invalid_with(b"", "magic number");
    let mut ann = good.clone();
    ann[..8].copy_from_slice(b"ANN  1.0");
    invalid_with(&ann, "annotation file");
    let mut b = good.clone();
    b[156..158].copy_from_slice(&13i16.to_le_bytes());
    invalid_with(&b, "number of leads is 13");
    let mut b = good.clone();
    b[272..274].copy_from_slice(&0i16.to_le_bytes());
    invalid_with(&b, "sampling rate is 0");
    let mut b = good.clone();
    b[206..208].copy_from_slice(&0i16.to_le_bytes());
    invalid_with(&b, "lead 1: amplitude resolution is 0");
    let mut b = good.clone();
    b[22..26].copy_from_slice(&500i32.to_le_bytes());
    invalid_with(&b, "ECG block offset 500");
    // A changed header byte: the CRC no longer matches, the samples still read.
    let mut b = good.clone();
    b[240] ^= 1;
    let r = parse_ishne(&b, Path::new("crc.ecg")).unwrap();
    assert!(
        r.warnings.iter().any(|w| w.contains("CRC")),
        "{:?}",
        r.warnings
    );
    // Bytes past the announced samples: read, with a warning.
    let mut b = good;
    b.extend_from_slice(&[0, 0, 0]);
    let r = parse_ishne(&b, Path::new("long.ecg")).unwrap();
    assert_eq!(r.n_samples(), 4);
    assert!(
        r.warnings.iter().any(|w| w.contains("3 bytes")),
        "{:?}",
        r.warnings
    );
}
