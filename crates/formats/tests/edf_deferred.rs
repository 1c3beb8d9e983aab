//! EDF and BDF files read with their samples kept digital
//! (`read_edf_deferred`) against the whole-file reader `read_edf` as the
//! oracle: the same record, the same physical values bit for bit over the
//! whole record and stretches of it, the same errors; and the files that
//! cannot be deferred (discontinuous, several rates) read whole.

mod edf_util;

use std::path::{Path, PathBuf};

use edf_util::{build_bdf, build_edf, Sig};
use tendline_formats::deferred::Loaded;
use tendline_formats::edf::{read_edf, read_edf_deferred, read_edf_header};
use tendline_formats::Record;

fn tmp(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("edf_deferred");
    std::fs::create_dir_all(&d).unwrap();
    d.join(name)
}

fn write(name: &str, bytes: &[u8]) -> PathBuf {
    let p = tmp(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn same_bits(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
}

/// Equal records, NaN samples included.
fn same_record(a: &Record, b: &Record) {
    let strip = |r: &Record| {
        let mut r = r.clone();
        r.leads.iter_mut().for_each(|l| l.samples.clear());
        r
    };
    assert_eq!(strip(a), strip(b));
    for (x, y) in a.leads.iter().zip(&b.leads) {
        assert!(same_bits(&x.samples, &y.samples), "{}", x.name);
    }
}

/// Pseudo-random digital values spread over the whole 16-bit range.
fn values16(n: usize, seed: u64) -> Vec<i16> {
    let mut x = seed.wrapping_mul(6364136223846793005).wrapping_add(1);
    (0..n)
        .map(|_| {
            x = x
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (x >> 48) as u16 as i16
        })
        .collect()
}

/// Deferred when asked, with values equal to `read_edf`'s bit for bit; the
/// number of (rate, samples, leads) the deferral was asked about.
fn check_deferred(p: &Path) -> (f64, usize, usize) {
    let whole = read_edf(p).unwrap();
    let asked = std::cell::Cell::new(None);
    let loaded = read_edf_deferred(p, &|fs, n, l| {
        asked.set(Some((fs, n, l)));
        true
    })
    .unwrap();
    let Loaded::Deferred(d) = loaded else {
        panic!("{}: not deferred", p.display());
    };
    let what = p.display();
    assert_eq!(d.first_difference(&whole), None, "{what}");
    let back = d.into_record();
    for (x, y) in back.leads.iter().zip(&whole.leads) {
        assert_eq!((&x.name, &x.units), (&y.name, &y.units), "{what}");
        assert!(same_bits(&x.samples, &y.samples), "{what}");
    }
    // Not asked to defer: the whole record, and the header alone announces
    // the same question.
    let Loaded::Physical(r) = read_edf_deferred(p, &|_, _, _| false).unwrap() else {
        panic!("{what}: deferred when not asked");
    };
    same_record(&r, &whole);
    let asked = asked.get().unwrap();
    assert_eq!(read_edf_header(p).unwrap().1, Some(asked), "{what}");
    asked
}

/// Files the deferral cannot take are read whole, without asking.
fn check_physical(p: &Path) {
    let whole = read_edf(p).unwrap();
    let loaded = read_edf_deferred(p, &|_, _, _| panic!("asked for {}", p.display())).unwrap();
    let Loaded::Physical(r) = loaded else {
        panic!("{}: deferred", p.display());
    };
    same_record(&r, &whole);
    assert_eq!(read_edf_header(p).unwrap().1, None, "{}", p.display());
}

/// Both readers fail with the same message.
fn check_same_error(p: &Path) {
    let a = read_edf(p).unwrap_err().to_string();
    let b = read_edf_deferred(p, &|_, _, _| true)
        .unwrap_err()
        .to_string();
    assert_eq!(a, b, "{}", p.display());
    assert!(a.contains(&p.display().to_string()), "{a}");
}

#[test]
fn edf_plus_with_annotations_over_many_blocks() {
    // 40 000 data records of 36 bytes: more than one 1-MiB block, so the
    // block boundary falls inside the file.
    let n_rec = 40_000;
    let a = values16(n_rec * 5, 1);
    let b = values16(n_rec * 5, 2);
    let tals: Vec<Vec<u8>> = (0..n_rec)
        .map(|r| format!("+{}\x14\x14\0", r as f64 * 0.02).into_bytes())
        .collect();
    let refs: Vec<&[u8]> = tals.iter().map(|t| t.as_slice()).collect();
    let bytes = build_edf(
        "X F 01-JAN-1960 X",
        "Startdate 02-MAR-2002 X X X",
        "EDF+C",
        n_rec,
        "0.02",
        &[
            Sig::ecg("ECG II", 5, "uV", -3276.8, 3276.7, &a),
            Sig::annotations_per_record(&refs),
            Sig::ecg("V1", 5, "mV", -5.0, 5.0, &b),
        ],
    );
    let p = write("plus_many.edf", &bytes);
    assert_eq!(check_deferred(&p), (250.0, n_rec * 5, 2));
}

#[test]
fn plain_edf_and_bdf_with_every_unit() {
    let n_rec = 30;
    let a = values16(n_rec * 50, 3);
    let b = values16(n_rec * 50, 4);
    let bytes = build_edf(
        "patient",
        "recording",
        "",
        n_rec,
        "0.1",
        &[
            Sig::ecg("I", 50, "V", -0.004, 0.004, &a),
            Sig::ecg("Resp", 50, "Ohm", 0.0, 100.0, &b),
        ],
    );
    check_deferred(&write("plain.edf", &bytes));
    // BDF: 24-bit values, negative ones included.
    let w: Vec<i32> = values16(n_rec * 50, 5)
        .iter()
        .map(|&v| v as i32 * 256 - 77)
        .collect();
    let bytes = build_bdf(
        "X M 05-MAY-1970 X",
        "Startdate 02-MAR-2002 X X X",
        "BDF+C",
        n_rec,
        "0.1",
        &[
            Sig::bdf("ECG", 50, "uV", -262144.0, 262143.0, &w),
            Sig::bdf_annotations_per_record(&vec![b"+0\x14\x14\0".as_slice(); n_rec]),
        ],
    );
    assert_eq!(
        check_deferred(&write("plus.bdf", &bytes)),
        (500.0, n_rec * 50, 1)
    );
}

#[test]
fn files_that_need_resampling_or_placing_are_read_whole() {
    let a = values16(40, 6);
    let b = values16(20, 7);
    let two_rates = build_edf(
        "p",
        "r",
        "",
        4,
        "1",
        &[
            Sig::ecg("II", 10, "mV", -5.0, 5.0, &a),
            Sig::ecg("V1", 5, "mV", -5.0, 5.0, &b),
        ],
    );
    check_physical(&write("two_rates.edf", &two_rates));
    let tals: Vec<Vec<u8>> = [0.0, 1.0, 3.0, 4.0]
        .iter()
        .map(|t| format!("+{t}\x14\x14\0").into_bytes())
        .collect();
    let refs: Vec<&[u8]> = tals.iter().map(|t| t.as_slice()).collect();
    let gaps = build_edf(
        "X X X X",
        "Startdate X X X X",
        "EDF+D",
        4,
        "1",
        &[
            Sig::ecg("II", 10, "mV", -5.0, 5.0, &a),
            Sig::annotations_per_record(&refs),
        ],
    );
    check_physical(&write("gaps.edf", &gaps));
}

#[test]
fn damaged_files_give_the_same_errors() {
    let n_rec = 20;
    let a = values16(n_rec * 10, 8);
    let mut tals: Vec<Vec<u8>> = (0..n_rec)
        .map(|r| format!("+{r}\x14\x14\0").into_bytes())
        .collect();
    tals[13] = b"+1x3\x14\x14\0".to_vec();
    let refs: Vec<&[u8]> = tals.iter().map(|t| t.as_slice()).collect();
    let sigs = [
        Sig::ecg("II", 10, "mV", -5.0, 5.0, &a),
        Sig::annotations_per_record(&refs),
    ];
    let bytes = build_edf("X X X X", "Startdate X X X X", "EDF+C", n_rec, "1", &sigs);
    check_same_error(&write("bad_tal.edf", &bytes));
    tals[13] = b"+13\x14\x14\0".to_vec();
    let refs: Vec<&[u8]> = tals.iter().map(|t| t.as_slice()).collect();
    let sigs = [
        Sig::ecg("II", 10, "mV", -5.0, 5.0, &a),
        Sig::annotations_per_record(&refs),
    ];
    let good = build_edf("X X X X", "Startdate X X X X", "EDF+C", n_rec, "1", &sigs);
    check_deferred(&write("good_tal.edf", &good));
    // Cut in the data, in the signal headers, in the fixed header; empty.
    for (name, len) in [
        ("cut_data.edf", good.len() - 3),
        ("cut_signals.edf", 256 + 100),
        ("cut_fixed.edf", 100),
        ("empty.edf", 0),
    ] {
        check_same_error(&write(name, &good[..len]));
    }
    // A header whose number of signals does not parse.
    let mut bad = good.clone();
    bad[252..256].copy_from_slice(b"x2  ");
    check_same_error(&write("bad_ns.edf", &bad));
    // No data record at all, and a missing file.
    let none = build_edf("X X X X", "Startdate X X X X", "EDF+C", 0, "1", &[]);
    check_same_error(&write("no_signals.edf", &none));
    check_same_error(&tmp("does_not_exist.edf"));
}

/// `rel` from the repository root.
fn at(rel: &str) -> Option<PathBuf> {
    let p = Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../..")).join(rel);
    if p.is_file() {
        Some(p)
    } else {
        eprintln!("SKIP: {} not found", p.display());
        None
    }
}

/// The EDF files at hand from elsewhere: the conformance recording of
/// ../shared/data (edflib's test generator: 11 signals at 200 Hz, one rate)
/// and its annotation-only sibling (no signal: the same error), and the
/// demo's EDF+ record.
#[test]
fn reference_files() {
    if let Some(p) = at("../shared/data/wfdb-conformance/test_generator_2.edf") {
        assert_eq!(check_deferred(&p), (200.0, 120_000, 11));
    }
    if let Some(p) = at("../shared/data/wfdb-conformance/test_edfann.edf") {
        check_same_error(&p);
    }
    if let Some(p) = at("demo-signals/s03_base.edf") {
        check_deferred(&p);
    }
}
