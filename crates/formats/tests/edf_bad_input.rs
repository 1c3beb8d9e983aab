//! Broken EDF files give `FormatError::Invalid` naming the file and the
//! problem, never a panic. Files are built field by field (tests/edf_util) after
//! the EDF specification's header layout.

mod edf_util;

use std::path::PathBuf;

use edf_util::{build_bdf, build_edf, build_edf_raw, Sig};
use tendline_formats::edf::{read_edf, read_edf_annotations};
use tendline_formats::FormatError;

fn tmp(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("edf_bad");
    std::fs::create_dir_all(&d).unwrap();
    d.join(name)
}

fn good_sigs() -> Vec<Sig> {
    vec![
        Sig::ecg("ECG II", 4, "mV", -5.0, 5.0, &[1, 2, 3, 4, 5, 6, 7, 8]),
        Sig::annotations_per_record(&[b"+0\x14\x14\x00", b"+1\x14\x14\x00"]),
    ]
}

fn good() -> Vec<u8> {
    build_edf(
        "X X X X",
        "Startdate X X X X",
        "EDF+C",
        2,
        "1",
        &good_sigs(),
    )
}

/// Write `bytes` as `name`, read it, expect an Invalid error naming the file and
/// containing `needle`.
fn expect_invalid(name: &str, bytes: &[u8], needle: &str) {
    let p = tmp(name);
    std::fs::write(&p, bytes).unwrap();
    match read_edf(&p) {
        Err(e @ FormatError::Invalid { .. }) => {
            let m = e.to_string();
            assert!(
                m.contains(name),
                "{name}: message does not name the file: {m}"
            );
            assert!(m.contains(needle), "{name}: expected {needle:?} in {m}");
        }
        other => panic!("{name}: expected an Invalid error, got {other:?}"),
    }
}

#[test]
fn the_good_file_reads() {
    let p = tmp("good.edf");
    std::fs::write(&p, good()).unwrap();
    let r = read_edf(&p).unwrap();
    assert_eq!(r.n_samples(), 8);
    assert_eq!(r.fs, 4.0);
}

#[test]
fn empty_and_truncated_files() {
    expect_invalid("empty.edf", &[], "empty file");
    let g = good();
    expect_invalid("short_header.edf", &g[..100], "truncated EDF header");
    expect_invalid("cut_signal_headers.edf", &g[..600], "truncated EDF header");
    expect_invalid("cut_data.edf", &g[..g.len() - 3], "truncated EDF file");
    let mut extra = g.clone();
    extra.extend_from_slice(&[0; 20]);
    expect_invalid("extra_data.edf", &extra, "inconsistent with file size");
}

#[test]
fn bad_numbers_and_counts() {
    let sigs = good_sigs();
    let b = build_edf_raw("X", "X", "EDF+C", "-5", "1", &sigs, None);
    expect_invalid("neg_records.edf", &b, "number of data records is -5");
    let b = build_edf_raw("X", "X", "EDF+C", "two", "1", &sigs, None);
    expect_invalid("word_records.edf", &b, "number of data records");
    let b = build_edf_raw("X", "X", "EDF+C", "2", "1", &sigs, Some("999"));
    expect_invalid("header_size.edf", &b, "header size field says 999");
    let b = build_edf_raw("X", "X", "EDF+C", "2", "-1", &sigs, None);
    expect_invalid("neg_duration.edf", &b, "must not be negative");
    let b = build_edf_raw("X", "X", "EDF+C", "2", "nan", &sigs, None);
    expect_invalid("nan_duration.edf", &b, "duration of a data record");

    let mut s = good_sigs();
    s[0].pmin = "abc".into();
    let b = build_edf("X", "X", "EDF+C", 2, "1", &s);
    expect_invalid(
        "bad_pmin.edf",
        &b,
        "physical minimum of signal 1 (\"ECG II\")",
    );
    let mut s = good_sigs();
    s[0].spr = "-4".into();
    let b = build_edf("X", "X", "EDF+C", 2, "1", &s);
    expect_invalid("neg_spr.edf", &b, "number of samples per data record");
    let mut s = good_sigs();
    s[0].dmax = "-32768".into();
    let b = build_edf("X", "X", "EDF+C", 2, "1", &s);
    expect_invalid("dig_range.edf", &b, "not above digital minimum");
    let mut s = good_sigs();
    s[0].dmax = "99999".into();
    let b = build_edf("X", "X", "EDF+C", 2, "1", &s);
    expect_invalid("dig_16bit.edf", &b, "exceeds 16 bits");
    let mut s = good_sigs();
    s[0].pmax = "-5".into();
    let b = build_edf("X", "X", "EDF+C", 2, "1", &s);
    expect_invalid("phys_equal.edf", &b, "physical minimum and maximum");

    // Signal count field: zero, negative.
    let mut g = good();
    g[252..256].copy_from_slice(b"0   ");
    expect_invalid("zero_signals.edf", &g, "number of signals is 0");
    g[252..256].copy_from_slice(b"-2  ");
    expect_invalid("neg_signals.edf", &g, "number of signals is -2");
    // Record count -1 is allowed and derived from the size.
    let b = build_edf_raw("X", "X", "EDF+C", "-1", "1", &good_sigs(), None);
    let p = tmp("unknown_count.edf");
    std::fs::write(&p, &b).unwrap();
    assert_eq!(read_edf(&p).unwrap().n_samples(), 8);
    // Zero records: header fine, nothing to read.
    let b = build_edf_raw(
        "X",
        "X",
        "EDF+C",
        "0",
        "1",
        &[Sig::ecg("ECG", 4, "mV", -1.0, 1.0, &[])],
        None,
    );
    expect_invalid("zero_records.edf", &b, "no data records");
}

#[test]
fn unsupported_variants() {
    // A discontinuous file whose records overlap, or lack their time-keeping TAL.
    let overlap = vec![
        Sig::ecg("ECG II", 4, "mV", -5.0, 5.0, &[1, 2, 3, 4, 5, 6, 7, 8]),
        Sig::annotations_per_record(&[b"+0\x14\x14\x00", b"+0.5\x14\x14\x00"]),
    ];
    let b = build_edf("X", "X", "EDF+D", 2, "1", &overlap);
    expect_invalid("overlap.edf", &b, "must not overlap");
    let no_tal = vec![Sig::ecg(
        "ECG II",
        4,
        "mV",
        -5.0,
        5.0,
        &[1, 2, 3, 4, 5, 6, 7, 8],
    )];
    let b = build_edf("X", "X", "EDF+D", 2, "1", &no_tal);
    expect_invalid("no_tal.edf", &b, "no time-keeping annotation");
    // A BDF header in front of 16-bit data: the sizes no longer add up.
    let mut g = good();
    g[0] = 0xff;
    g[1..8].copy_from_slice(b"BIOSEMI");
    expect_invalid("bdf.edf", &g, "truncated BDF file");
    let mut g = good();
    g[0] = 0xff;
    g[1..8].copy_from_slice(b"BIOSEM!");
    expect_invalid("not_biosemi.bdf", &g, "expected \"BIOSEMI\"");
    let b = build_bdf(
        "X",
        "X",
        "BDF+Q",
        1,
        "1",
        &[Sig::bdf("ECG", 2, "mV", -1.0, 1.0, &[0, 0])],
    );
    expect_invalid("unknown.bdf", &b, "unknown BDF+ variant");
    // A 16-bit digital range check does not apply to BDF, a 24-bit one does.
    let mut s = Sig::bdf("ECG", 2, "mV", -1.0, 1.0, &[0, 0]);
    s.dmax = "8388608".into();
    let b = build_bdf("X", "X", "24BIT", 1, "1", &[s]);
    expect_invalid("range.bdf", &b, "exceeds 24 bits");
    let mut g = good();
    g[0] = b'7';
    expect_invalid("version.edf", &g, "version field");
}

#[test]
fn bad_annotation_lists() {
    let s = vec![
        Sig::ecg("ECG", 2, "mV", -1.0, 1.0, &[0, 0]),
        Sig::annotations(b"12\x14text\x14\x00"),
    ];
    expect_invalid(
        "unsigned_onset.edf",
        &build_edf("X", "X", "EDF+C", 1, "1", &s),
        "bad onset",
    );
    let s = vec![
        Sig::ecg("ECG", 2, "mV", -1.0, 1.0, &[0, 0]),
        Sig::annotations(b"+0\x14\x14\x00+1\x14open"),
    ];
    // 12 bytes fill the channel exactly: no 0 byte ends the second TAL.
    assert_eq!(s[1].records[0].len(), 12);
    expect_invalid(
        "unterminated.edf",
        &build_edf("X", "X", "EDF+C", 1, "1", &s),
        "not terminated",
    );
    let s = vec![
        Sig::ecg("ECG", 2, "mV", -1.0, 1.0, &[0, 0]),
        Sig::annotations(b"+0\x15x\x14t\x14\x00"),
    ];
    let p = tmp("bad_duration.edf");
    std::fs::write(&p, build_edf("X", "X", "EDF+C", 1, "1", &s)).unwrap();
    let e = read_edf_annotations(&p).unwrap_err().to_string();
    assert!(
        e.contains("bad_duration.edf") && e.contains("bad duration"),
        "{e}"
    );
}

#[test]
fn missing_file_is_an_io_error() {
    match read_edf(&tmp("does_not_exist.edf")) {
        Err(e @ FormatError::Io { .. }) => assert!(e.to_string().contains("does_not_exist.edf")),
        other => panic!("{other:?}"),
    }
}

/// BDF and BDF+ files built byte by byte: 24-bit samples decode exactly,
/// negative values and both extremes included; BDF+ annotations and patient
/// field are read as for EDF+.
#[test]
fn bdf_and_bdf_plus_read_exactly() {
    // Physical range -8388608 .. 8388607 uV over the full digital range (both
    // fit the 8-character fields): one digital unit is exactly 1 uV = 1e-3 mV.
    let dig = [-8388608, -1, 0, 1, 123456, -654321, 8388607, 42];
    let ecg = Sig::bdf("ECG II", 4, "uV", -8388608.0, 8388607.0, &dig);
    let b = build_bdf("X X X X", "X", "24BIT", 2, "1", std::slice::from_ref(&ecg));
    let p = tmp("plain.bdf");
    std::fs::write(&p, &b).unwrap();
    let r = read_edf(&p).unwrap();
    assert_eq!((r.fs, r.n_samples()), (4.0, 8));
    assert_eq!(r.leads[0].units, "mV");
    for (got, d) in r.leads[0].samples.iter().zip(dig) {
        let want = d as f64 * 1e-3;
        assert!((got - want).abs() < 1e-12, "{got} vs {want}");
    }
    // BDF+: EDF+ patient field, a `BDF Annotations` channel with one event.
    let sigs = [
        ecg,
        Sig::bdf_annotations_per_record(&[
            b"+0\x14\x14\x00+0.5\x14beat\x14\x00",
            b"+1\x14\x14\x00",
        ]),
    ];
    let b = build_bdf(
        "P1 F 02-MAR-1950 X",
        "Startdate 02-MAR-2002 X X X",
        "BDF+C",
        2,
        "1",
        &sigs,
    );
    let p = tmp("plus.bdf");
    std::fs::write(&p, &b).unwrap();
    let r = read_edf(&p).unwrap();
    assert_eq!(r.leads.len(), 1);
    assert_eq!(r.meta.sex, Some(tendline_formats::Sex::Female));
    assert_eq!(r.meta.age, Some(52.0));
    let a = read_edf_annotations(&p).unwrap();
    assert_eq!(a.len(), 1);
    assert_eq!((a[0].onset_s, a[0].text.as_str()), (0.5, "beat"));
}

/// EDF+D and BDF+D: each data record is placed at the onset of its time-keeping
/// TAL, the gaps between records are NaN (EDF+ specification, Kemp & Olivan
/// 2003, from memory). Hand-built: records of 1 s at +0, +1 and +3.5 s, an ECG
/// at 4 Hz and a slower signal at 2 Hz, so the 1.5-s gap is 6 and 3 samples.
#[test]
fn discontinuous_files_place_records_at_their_onsets() {
    let tals: [&[u8]; 3] = [
        b"+0\x14\x14\x00",
        b"+1\x14\x14\x00+1.25\x14event\x14\x00",
        b"+3.5\x14\x14\x00",
    ];
    let ecg: Vec<i16> = (1..=12).collect();
    let slow: Vec<i16> = vec![10, 20, 30, 40, 50, 60];
    // Physical = digital here: range -32768..32767 on both scales.
    let sigs = [
        Sig::ecg("ECG II", 4, "mV", -32768.0, 32767.0, &ecg),
        Sig::ecg("Resp", 2, "mV", -32768.0, 32767.0, &slow),
        Sig::annotations_per_record(&tals),
    ];
    let b = build_edf("X", "X", "EDF+D", 3, "1", &sigs);
    let p = tmp("gaps.edf");
    std::fs::write(&p, &b).unwrap();
    let f = tendline_formats::edf::parse_edf(&b, &p).unwrap();
    let nan = f64::NAN;
    let want_ecg = [
        1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, nan, nan, nan, nan, nan, nan, 9.0, 10.0, 11.0, 12.0,
    ];
    let want_slow = [10.0, 20.0, 30.0, 40.0, nan, nan, nan, 50.0, 60.0];
    let same = |a: &[f64], b: &[f64]| {
        a.len() == b.len()
            && a.iter()
                .zip(b)
                .all(|(x, y)| x == y || x.is_nan() && y.is_nan())
    };
    assert!(same(&f.samples[0], &want_ecg), "{:?}", f.samples[0]);
    assert!(same(&f.samples[1], &want_slow), "{:?}", f.samples[1]);
    assert!(f
        .warnings
        .iter()
        .any(|w| w.contains("1 gap(s)") && w.contains("1.5 s")));
    // The event keeps its onset from the header start time.
    assert_eq!(f.annotations.len(), 1);
    assert_eq!(f.annotations[0].onset_s, 1.25);
    // As a record: 18 samples at 4 Hz, the slower signal interpolated to them.
    let r = read_edf(&p).unwrap();
    assert_eq!((r.fs, r.n_samples()), (4.0, 18));
    assert!(same(&r.leads[0].samples, &want_ecg));
    assert!(r.warnings.iter().any(|w| w.contains("gap")));

    // The same as BDF+D.
    let ecg24: Vec<i32> = ecg.iter().map(|&v| v as i32).collect();
    let sigs = [
        Sig::bdf("ECG II", 4, "mV", -8388608.0, 8388607.0, &ecg24),
        Sig::bdf_annotations_per_record(&tals),
    ];
    let b = build_bdf("X", "X", "BDF+D", 3, "1", &sigs);
    let p = tmp("gaps.bdf");
    std::fs::write(&p, &b).unwrap();
    let r = read_edf(&p).unwrap();
    assert!(same(&r.leads[0].samples, &want_ecg));
}
