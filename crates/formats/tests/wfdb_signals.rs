//! WFDB signal reader: bad input (each error names the file and the problem,
//! never a panic), writer round trip, dispatch by extension, and the reference
//! records in `../shared/data`.

use std::path::{Path, PathBuf};

use tendline_formats::{read_record, wfdb, FormatError, Lead, Metadata, ReadOptions, Record, Sex};

fn data_dir() -> Option<PathBuf> {
    let d = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    if d.is_dir() {
        Some(d)
    } else {
        eprintln!("SKIP: reference data not found at {}", d.display());
        None
    }
}

/// Write `hea` text and `dat` bytes for record `r` into a fresh tempdir.
fn record_files(hea: &str, dat: Option<&[u8]>) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let h = dir.path().join("r.hea");
    std::fs::write(&h, hea).unwrap();
    if let Some(d) = dat {
        std::fs::write(dir.path().join("r.dat"), d).unwrap();
    }
    (dir, h)
}

fn err_of(hea: &str, dat: Option<&[u8]>) -> String {
    let (_d, h) = record_files(hea, dat);
    let e = wfdb::read_record(&h).unwrap_err();
    assert!(
        !matches!(e, FormatError::Io { .. }) || e.to_string().contains("r."),
        "{e}"
    );
    e.to_string()
}

#[test]
fn truncated_signal_file() {
    // 10 samples × 2 signals of format 16 need 40 bytes; give 30.
    let e = err_of("r 2 250 10\nr.dat 16\nr.dat 16\n", Some(&[0u8; 30]));
    assert!(
        e.contains("r.dat") && e.contains("truncated") && e.contains("40 bytes"),
        "{e}"
    );
    assert!(e.contains("holds 30 bytes (7 samples)"), "{e}");
}

#[test]
fn header_count_larger_than_file_by_one_byte_212() {
    // 4 samples of one format-212 signal need 6 bytes.
    let e = err_of("r 1 250 4\nr.dat 212\n", Some(&[0u8; 5]));
    assert!(e.contains("r.dat") && e.contains("says 4 samples"), "{e}");
}

#[test]
fn billions_of_samples_do_not_allocate() {
    let e = err_of("r 1 250 4000000000\nr.dat 16\n", Some(&[0u8; 20]));
    assert!(e.contains("truncated") && e.contains("4000000000"), "{e}");
    // Length times samples per frame overflows u64.
    let e = err_of(
        "r 1 250 18446744073709551615\nr.dat 16x4\n",
        Some(&[0u8; 20]),
    );
    assert!(e.contains("overflow") || e.contains("too large"), "{e}");
    // Billions of signals announced, none given.
    let e = err_of("r 4000000000 250 10\nr.dat 16\n", Some(&[0u8; 20]));
    assert!(e.contains("announces 4000000000 signals"), "{e}");
}

#[test]
fn unknown_and_unsupported_format_codes() {
    let e = err_of("r 1 250 4\nr.dat 999 200 16 0 0 0 0 II\n", Some(&[0u8; 8]));
    assert!(
        e.contains("line 2") && e.contains("unknown signal format code 999") && e.contains("`II`"),
        "{e}"
    );
    // A FLAC format whose file is not a FLAC stream: named, not decoded as raw bytes.
    let (_d, h) = record_files("r 1 250 4\nr.dat 516\n", Some(&[0u8; 8]));
    let e = wfdb::read_record(&h).unwrap_err();
    assert!(
        matches!(e, FormatError::Invalid { .. })
            && e.path().ends_with("r.dat")
            && e.to_string().contains("not a FLAC stream")
            && e.to_string().contains("format 516"),
        "{e}"
    );
}

#[test]
fn missing_signal_file() {
    let e = err_of("r 1 250 4\nr.dat 16\n", None);
    assert!(
        e.contains("r.hea") && e.contains("r.dat") && e.contains("cannot be opened"),
        "{e}"
    );
}

#[test]
fn non_numeric_fields() {
    for (hea, field) in [
        ("r 1 abc 4\nr.dat 16\n", "sampling frequency"),
        ("r 1 250 4x\nr.dat 16\n", "number of samples"),
        ("r one 250 4\nr.dat 16\n", "number of signals"),
        ("r 1 250 4\nr.dat 16 2e\n", "ADC gain"),
        ("r 1 250 4\nr.dat 16 200(z)/mV\n", "baseline"),
        ("r 1 250 4\nr.dat 16 200 12 0 x\n", "initial value"),
        ("r 1 250 4\nr.dat 16 200 12 0 0 sum\n", "checksum"),
        ("r 1 250 4\nr.dat 16:s\n", "skew"),
        ("r 1 250 4\nr.dat 16+-3\n", "byte offset"),
        ("r 1 250/x 4\nr.dat 16\n", "counter frequency"),
        ("r 1 NaN 4\nr.dat 16\n", "sampling frequency"),
    ] {
        let e = err_of(hea, Some(&[0u8; 8]));
        assert!(
            e.contains("r.hea") && e.contains(field) && e.contains("line"),
            "{hea:?}: {e}"
        );
    }
}

#[test]
fn empty_header_file() {
    let e = err_of("", Some(&[0u8; 8]));
    assert!(e.contains("r.hea") && e.contains("empty header"), "{e}");
    let e = err_of("# only a comment\n\r\n", None);
    assert!(e.contains("empty header"), "{e}");
}

#[test]
fn other_header_inconsistencies() {
    let e = err_of("r 2 250 4\nr.dat 16\nr.dat 212\n", Some(&[0u8; 16]));
    assert!(
        e.contains("line 3") && e.contains("differs from format 16"),
        "{e}"
    );
    let e = err_of("r 1 250 4\nr.dat 16+100\n", Some(&[0u8; 16]));
    assert!(e.contains("r.dat") && e.contains("byte offset 100"), "{e}");
    let e = err_of("r 1 250 4\n../r.dat 16\n", Some(&[0u8; 16]));
    assert!(e.contains("plain file name"), "{e}");
    let e = err_of("r/2 1 250 8\n../x 4\nr 4\n", Some(&[0u8; 16]));
    assert!(e.contains("plain record name"), "{e}");
    let e = err_of("r 1 250 4\nr.dat 16\nr.dat 16\n", Some(&[0u8; 16]));
    assert!(e.contains("more lines than the 1 announced signals"), "{e}");
}

#[test]
fn skew_offset_and_inferred_length() {
    // Two format-16 signals after a 4-byte prefix; signal 1 skewed by one frame.
    let mut dat = vec![0xAAu8; 4];
    for (a, b) in [(1i16, 10i16), (2, 20), (3, 30)] {
        dat.extend_from_slice(&a.to_le_bytes());
        dat.extend_from_slice(&b.to_le_bytes());
    }
    let (_d, h) = record_files(
        "r 2 100\nr.dat 16+4 1/mV 16 0 1 6\nr.dat 16:1+4 1/uV 16 0 20 50\n",
        Some(&dat),
    );
    let w = wfdb::read_digital(&h).unwrap();
    assert_eq!(w.n_frames, 3, "length inferred from the file size");
    assert_eq!(w.signals[0].samples, vec![1, 2, 3]);
    // Skew: frame i of signal 1 is stored in frame i + 1; past the file it is invalid.
    assert_eq!(w.signals[1].samples, vec![20, 30, -32768]);
    assert!(
        w.warnings.iter().any(|m| m.contains("invalid")),
        "{:?}",
        w.warnings
    );
    let r = wfdb::read_record(&h).unwrap();
    assert_eq!(r.leads[1].units, "mV");
    assert_eq!(r.leads[1].samples[..2], [0.02, 0.03]);
    assert!(r.leads[1].samples[2].is_nan());
}

#[test]
fn checksum_and_initial_value_mismatch_are_warnings() {
    let mut dat = Vec::new();
    for v in [5i16, 7, -3] {
        dat.extend_from_slice(&v.to_le_bytes());
    }
    let (_d, h) = record_files("r 1 250 3\nr.dat 16 200 16 0 5 9 0 II\n", Some(&dat));
    assert!(wfdb::read_record(&h).unwrap().warnings.is_empty());
    let (_d, h) = record_files("r 1 250 3\nr.dat 16 200 16 0 4 10 0 II\n", Some(&dat));
    let w = wfdb::read_record(&h).unwrap().warnings;
    assert_eq!(w.len(), 2, "{w:?}");
    assert!(
        w[0].contains("checksum mismatch: header 10, samples sum to 9") && w[0].contains("line 2")
    );
    assert!(w[1].contains("initial value mismatch: header 4, first sample 5"));
}

#[test]
fn multi_rate_read_digitally_and_as_one_rate_record() {
    let dat: Vec<u8> = (0..12i16).flat_map(|v| v.to_le_bytes()).collect();
    let (_d, h) = record_files("r 2 100 4\nr.dat 16x2\nr.dat 16\n", Some(&dat[..24]));
    let w = wfdb::read_digital(&h).unwrap();
    assert_eq!(w.signals[0].samples, vec![0, 1, 3, 4, 6, 7, 9, 10]);
    assert_eq!(w.signals[1].samples, vec![2, 5, 8, 11]);
    // As a record: 200 Hz; the 100-Hz signal keeps its samples at even indices
    // (frame starts) and is interpolated halfway between them, the last one held.
    let r = wfdb::read_record(&h).unwrap();
    assert_eq!(r.fs, 200.0);
    let mv = |v: &[f64]| v.iter().map(|x| x / 200.0).collect::<Vec<_>>();
    assert_eq!(r.leads[0].samples, mv(&[0., 1., 3., 4., 6., 7., 9., 10.]));
    assert_eq!(
        r.leads[1].samples,
        mv(&[2., 3.5, 5., 6.5, 8., 9.5, 11., 11.])
    );
    assert!(
        r.warnings.iter().any(|w| w.contains("interpolated")),
        "{:?}",
        r.warnings
    );
    // Equal samples per frame: one rate of fs × spf.
    let (_d, h) = record_files("r 2 100 3\nr.dat 16x2\nr.dat 16x2\n", Some(&dat));
    let r = wfdb::read_record(&h).unwrap();
    assert_eq!(r.fs, 200.0);
    assert_eq!(r.n_samples(), 6);
}

fn demo_record() -> Record {
    Record {
        name: "demo".into(),
        fs: 500.0,
        leads: vec![
            Lead {
                name: "I".into(),
                units: "mV".into(),
                samples: vec![0.0, 0.1234, -1.5, 2.0],
            },
            Lead {
                name: "aVR lead".into(),
                units: "mV".into(),
                samples: vec![0.5, f64::NAN, 0.25, -0.001],
            },
        ],
        meta: Metadata {
            age: Some(45.0),
            sex: Some(Sex::Female),
            comments: vec!["Rhythm: sinus".into()],
            ..Metadata::default()
        },
        files: vec![],
        warnings: vec![],
    }
}

#[test]
fn write_then_read_round_trip() {
    let dir = tempfile::tempdir().unwrap();
    let rec = demo_record();
    let h = wfdb::write_record(dir.path(), &rec, 1000.0).unwrap();
    let text = std::fs::read_to_string(&h).unwrap();
    assert!(
        text.contains("#<age>: 45\n#<sex>: F\n# Rhythm: sinus\n"),
        "{text}"
    );
    // Read back through the dispatcher with the extension-less record path.
    let back = read_record(&dir.path().join("demo"), &ReadOptions::default()).unwrap();
    assert_eq!(back.fs, 500.0);
    assert_eq!(back.meta.age, Some(45.0));
    assert_eq!(back.meta.sex, Some(Sex::Female));
    assert_eq!(back.leads[1].name, "aVR lead");
    assert!(
        back.warnings.iter().all(|w| w.contains("invalid")),
        "{:?}",
        back.warnings
    );
    for (a, b) in rec.leads.iter().zip(&back.leads) {
        for (x, y) in a.samples.iter().zip(&b.samples) {
            assert!(
                x.is_nan() && y.is_nan() || (x - y).abs() <= 0.5e-3 + 1e-12,
                "{x} vs {y}"
            );
        }
    }
    // Writing what was read does not duplicate the age/sex comment lines.
    let dir2 = tempfile::tempdir().unwrap();
    let h2 = wfdb::write_record(dir2.path(), &back, 1000.0).unwrap();
    let text2 = std::fs::read_to_string(h2).unwrap();
    assert_eq!(text2.matches("<age>").count(), 1, "{text2}");
}

#[test]
fn writer_rejects_bad_records() {
    let dir = tempfile::tempdir().unwrap();
    let mut rec = demo_record();
    rec.leads[0].samples[0] = 40.0; // 40 mV × 1000 does not fit 16 bits
    let e = wfdb::write_record(dir.path(), &rec, 1000.0)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("demo.hea") && e.contains("lead 0") && e.contains("sample 0"),
        "{e}"
    );
    let mut rec = demo_record();
    rec.leads[1].samples.pop();
    assert!(wfdb::write_record(dir.path(), &rec, 1000.0).is_err());
    let mut rec = demo_record();
    rec.name = "../x".into();
    assert!(wfdb::write_record(dir.path(), &rec, 1000.0).is_err());
    assert!(wfdb::write_record(dir.path(), &demo_record(), 0.0).is_err());
}

#[test]
fn dispatch_by_extension() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("a.csv");
    std::fs::write(&csv, "I,II\n1,2\n3,4\n").unwrap();
    let r = read_record(
        &csv,
        &ReadOptions {
            csv_fs: Some(250.0),
        },
    )
    .unwrap();
    assert_eq!((r.fs, r.leads.len(), r.name.as_str()), (250.0, 2, "a"));
    let e = read_record(&dir.path().join("nothing.xyz"), &ReadOptions::default()).unwrap_err();
    assert!(e.to_string().contains("unknown input type"), "{e}");
    let e = read_record(&dir.path().join("missing.hea"), &ReadOptions::default()).unwrap_err();
    assert!(
        matches!(e, FormatError::Io { .. }) && e.to_string().contains("missing.hea"),
        "{e}"
    );
    assert!(ReadOptions { csv_fs: Some(-1.0) }.validate().is_err());
    assert!(ReadOptions::default().validate().is_ok());
}

#[test]
fn csv_bad_input_from_file() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("b.csv");
    std::fs::write(&p, "# fs=500\nI,II\n0.1,0.2\n0.3,nan\n").unwrap();
    let e = read_record(&p, &ReadOptions::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("b.csv") && e.contains("line 4, column 2"), "{e}");
    std::fs::write(&p, "").unwrap();
    let e = read_record(&p, &ReadOptions::default())
        .unwrap_err()
        .to_string();
    assert!(e.contains("b.csv") && e.contains("empty file"), "{e}");
}

#[test]
fn reference_records_qtdb_and_ludb() {
    let Some(d) = data_dir() else { return };
    // QTDB sel100 (PhysioNet QT Database): 2 leads MLII, V5 at 250 Hz, 15 min; `# 69 M`.
    let r = wfdb::read_record(&d.join("qtdb/sel100")).unwrap();
    assert_eq!(r.fs, 250.0);
    assert_eq!(r.n_samples(), 225000);
    let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
    assert_eq!(names, ["MLII", "V5"]);
    assert_eq!((r.meta.age, r.meta.sex), (Some(69.0), Some(Sex::Male)));
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);
    // First sample: header initial value 945 with gain 200, baseline 0 → 4.725 mV.
    assert_eq!(r.leads[0].samples[0], 945.0 / 200.0);
    // LUDB record 1: 12 leads at 500 Hz, 10 s; `#<age>: 51`, `#<sex>: F`.
    let r = wfdb::read_record(&d.join("ludb/1.hea")).unwrap();
    assert_eq!((r.fs, r.n_samples(), r.leads.len()), (500.0, 5000, 12));
    assert_eq!(r.leads[0].name, "i");
    assert_eq!(r.leads[11].name, "v6");
    assert_eq!((r.meta.age, r.meta.sex), (Some(51.0), Some(Sex::Female)));
    // Initial value -120 with gain 1716 and baseline 6 (header line 2).
    assert_eq!(r.leads[0].samples[0], (-120.0 - 6.0) / 1716.0);
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);
}

#[test]
fn conformance_binformats_checksums_hold() {
    let Some(d) = data_dir() else { return };
    // binformats (wfdb-python sample data) stores one signal in each of the ten
    // formats; every header checksum and initial value must match what we decode.
    let w = wfdb::read_digital(Path::new(&d.join("wfdb-conformance/binformats.hea"))).unwrap();
    assert_eq!(w.signals.len(), 10);
    assert!(w.warnings.is_empty(), "{:?}", w.warnings);
}

#[test]
fn conformance_multi_segment_and_rejections() {
    let Some(d) = data_dir() else { return };
    let c = d.join("wfdb-conformance");
    // Fixed layout (wfdb-python sample data, MANIFEST.tsv: 4 signals, 225000 samples at 250 Hz).
    let r = wfdb::read_record(&c.join("multi-segment/fixed1/v102s.hea")).unwrap();
    assert_eq!((r.fs, r.n_samples(), r.leads.len()), (250.0, 225000, 4));
    assert_eq!(r.leads[0].name, "II");
    // Segments are concatenated: segment 2 repeats segment 1 here.
    let one = wfdb::read_record(&c.join("multi-segment/fixed1/v102s_1.hea")).unwrap();
    let a = &r.leads[0].samples;
    let b = &one.leads[0].samples;
    assert!(a[75000..150000]
        .iter()
        .zip(b)
        .all(|(x, y)| x == y || x.is_nan() && y.is_nan()));
    // 041s: 2 segments of 1000 frames with 4 samples per frame on 3 signals (MANIFEST.tsv: 2000).
    let w = wfdb::read_digital(&c.join("multi-segment/041s/041s.hea")).unwrap();
    assert_eq!(w.n_frames, 2000);
    assert_eq!(w.signals[0].samples.len(), 8000);
    // Variable layout: no digital form (the gains change between segments) ...
    let name = "multi-segment/s25047/s25047-2704-05-04-10-44.hea";
    let e = wfdb::read_digital(&c.join(name)).unwrap_err();
    assert!(
        matches!(e, FormatError::Unsupported { .. }) && e.to_string().contains("variable-layout"),
        "{name}: {e}"
    );
    // ... but a record in physical units. MANIFEST.tsv (what the `wfdb` package
    // reads): 3 signals, 543240 samples at 125 Hz; signal names and units from
    // the layout header 3234460_layout.hea. Sample values against the `wfdb`
    // package's p_signal: tests/python/test_formats_signals.py.
    let r = wfdb::read_record(&c.join(name)).unwrap();
    assert_eq!((r.fs, r.n_samples()), (125.0, 543240));
    let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
    let units: Vec<&str> = r.leads.iter().map(|l| l.units.as_str()).collect();
    assert_eq!(
        (names, units),
        (vec!["II", "V", "ABP"], vec!["mV", "mV", "mmHg"])
    );
    // The first segment is a 25740-sample gap (`~`): NaN in every signal.
    assert!(r
        .leads
        .iter()
        .all(|l| l.samples[..25740].iter().all(|v| v.is_nan())));
    // Segment 3234460_0017 (3525 samples, the first with ABP) starts after the
    // lengths of the master header's earlier segments; read alone, its values
    // (its own gains: II 81/mV, V 60/mV, ABP 1/mmHg) are the master's there.
    let seg = wfdb::read_record(&c.join("multi-segment/s25047/3234460_0017.hea")).unwrap();
    let at = 445_740;
    for (k, l) in seg.leads.iter().enumerate() {
        let m = &r.leads[k].samples[at..at + seg.n_samples()];
        assert!(
            m.iter()
                .zip(&l.samples)
                .all(|(a, b)| a == b || a.is_nan() && b.is_nan()),
            "signal {k}"
        );
    }
    // ABP first appears in segment 17: NaN before it.
    assert!(r.leads[2].samples[..at].iter().all(|v| v.is_nan()));
    // FLAC formats 508/516/524 were rejected here before; they are read now
    // (checked in detail in `conformance_flac_records`).
    let w = wfdb::read_digital(&c.join("flacformats.hea")).unwrap();
    assert_eq!((w.signals.len(), w.n_frames), (3, 499));
}

/// The row of `record` in `wfdb-conformance/MANIFEST.tsv` (what the `wfdb`
/// Python package 4.3 reads from each header): fs, n_sig, sig_len, formats.
fn manifest_row(conf: &Path, record: &str) -> (f64, usize, u64, String) {
    let text = std::fs::read_to_string(conf.join("MANIFEST.tsv")).unwrap();
    let mut lines = text.lines();
    let cols: Vec<&str> = lines.next().unwrap().split('\t').collect();
    let col = |name: &str| cols.iter().position(|c| *c == name).unwrap();
    let row: Vec<&str> = lines
        .map(|l| l.split('\t').collect::<Vec<_>>())
        .find(|r| r[col("record")] == record)
        .unwrap_or_else(|| panic!("{record} not in MANIFEST.tsv"));
    assert_eq!(row[col("wfdb_reads")], "yes", "{record}");
    (
        row[col("fs")].parse().unwrap(),
        row[col("n_sig")].parse().unwrap(),
        row[col("sig_len")].parse().unwrap(),
        row[col("formats")].to_string(),
    )
}

#[test]
fn conformance_flac_records() {
    let Some(d) = data_dir() else { return };
    let c = d.join("wfdb-conformance");
    // Records of the wfdb-python sample data in FLAC formats 508/516/524; their
    // lengths and rates are those MANIFEST.tsv lists for the `wfdb` package.
    for name in ["flacformats", "flac_3_constant", "mixedsignals"] {
        let w = wfdb::read_digital(&c.join(format!("{name}.hea"))).unwrap();
        let (fs, n_sig, sig_len, formats) = manifest_row(&c, name);
        assert!(
            (w.fs - fs).abs() <= 1e-5 * fs,
            "{name}: fs {} vs {fs}",
            w.fs
        ); // MANIFEST rounds fs
        assert_eq!((w.signals.len(), w.n_frames), (n_sig, sig_len), "{name}");
        let mut fmts: Vec<String> = w
            .signals
            .iter()
            .map(|s| s.spec.format.to_string())
            .collect();
        fmts.dedup();
        assert_eq!(fmts.join(","), formats, "{name}");
        for s in &w.signals {
            assert_eq!(
                s.samples.len() as u64,
                sig_len * s.spec.samples_per_frame as u64,
                "{name}"
            );
        }
        // Every header checksum holds (a wrong channel order or sample would break it).
        assert!(
            !w.warnings.iter().any(|m| m.contains("checksum")),
            "{name}: {:?}",
            w.warnings
        );
    }
    // flacformats: one signal per file, 8-, 16- and 24-bit streams; the first
    // samples are the header's initial values, near each format's minimum.
    let w = wfdb::read_digital(&c.join("flacformats.hea")).unwrap();
    assert!(w.warnings.is_empty(), "{:?}", w.warnings);
    let first: Vec<i32> = w.signals.iter().map(|s| s.samples[0]).collect();
    assert_eq!(first, [-127, -32766, -8388605]);
    // flac_3_constant: three constant columns; header initial values 25, 50, 75
    // and checksums 15104 = 5600000 × 25 mod 65536 (and 2×, 3× that) say so.
    let w = wfdb::read_digital(&c.join("flac_3_constant.hea")).unwrap();
    for (k, s) in w.signals.iter().enumerate() {
        let v = 25 * (k as i32 + 1);
        assert!(s.samples.iter().all(|&x| x == v), "column {k}");
    }
    // mixedsignals: samples per frame 4, 4, 4 | 2, 2 | 1 in three FLAC files;
    // stretches of the format-516 invalid value -32768 become NaN.
    let r = wfdb::read_record(&c.join("mixedsignals.hea")).unwrap();
    assert_eq!((r.fs, r.n_samples()), (62.4725 * 4.0, 57600));
    let w = wfdb::read_digital(&c.join("mixedsignals.hea")).unwrap();
    let n_bad = w.signals[0]
        .samples
        .iter()
        .filter(|&&v| v == -32768)
        .count();
    assert!(n_bad > 0);
    assert_eq!(
        r.leads[0].samples.iter().filter(|v| v.is_nan()).count(),
        n_bad
    );
}

/// Copy the FLAC record `flacformats` (header and its three signal files) into
/// a fresh tempdir, with `hea` as header text when given.
fn flac_copy(c: &Path, hea: Option<&str>) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    for f in [
        "flacformats.hea",
        "flacformats.d0",
        "flacformats.d1",
        "flacformats.d2",
    ] {
        std::fs::copy(c.join(f), dir.path().join(f)).unwrap();
    }
    let h = dir.path().join("flacformats.hea");
    if let Some(t) = hea {
        std::fs::write(&h, t).unwrap();
    }
    (dir, h)
}

#[test]
fn damaged_flac_files_are_named() {
    let Some(d) = data_dir() else { return };
    let c = d.join("wfdb-conformance");
    let whole = std::fs::read(c.join("flacformats.d1")).unwrap();
    // Cut inside the last FLAC frame.
    let (dir, h) = flac_copy(&c, None);
    let d1 = dir.path().join("flacformats.d1");
    std::fs::write(&d1, &whole[..whole.len() - 10]).unwrap();
    let e = wfdb::read_digital(&h).unwrap_err();
    assert!(
        matches!(e, FormatError::Invalid { .. })
            && e.path() == d1
            && e.to_string().contains("truncated FLAC stream"),
        "{e}"
    );
    // Cut inside the metadata.
    std::fs::write(&d1, &whole[..20]).unwrap();
    let e = wfdb::read_digital(&h).unwrap_err();
    assert!(e.path() == d1 && e.to_string().contains("truncated"), "{e}");
    // One byte of sample data changed: the frame CRC catches it.
    let mut bad = whole.clone();
    let at = bad.len() - 100;
    bad[at] ^= 0x10;
    std::fs::write(&d1, &bad).unwrap();
    let e = wfdb::read_digital(&h).unwrap_err();
    assert!(
        e.path() == d1 && e.to_string().contains("damaged FLAC stream"),
        "{e}"
    );
    // Not a FLAC file at all.
    std::fs::write(&d1, [0u8; 100]).unwrap();
    let e = wfdb::read_digital(&h).unwrap_err();
    assert!(
        e.path() == d1 && e.to_string().contains("not a FLAC stream"),
        "{e}"
    );
    // An intact stream shorter than the header's length (499 frames stored).
    let (dir, h) = flac_copy(
        &c,
        Some("flacformats 1 200 600\nflacformats.d1 516 200/mV 16 0 -32766 0 0 s\n"),
    );
    let e = wfdb::read_digital(&h).unwrap_err();
    assert!(
        e.path() == dir.path().join("flacformats.d1")
            && e.to_string().contains("truncated")
            && e.to_string().contains("holds 499"),
        "{e}"
    );
}

#[test]
fn flac_header_variants_follow_wfdb() {
    let Some(d) = data_dir() else { return };
    let c = d.join("wfdb-conformance");
    let base = wfdb::read_digital(&c.join("flacformats.hea")).unwrap();
    let s0 = &base.signals[0].samples;
    // `+5` counts FLAC samples, not bytes: the record starts at sample 5
    // (wfdb-python `_rd_compressed_file`: `sf.seek(start_samp + sample_offset)`;
    // wfdb 4.3.1 reads -57, -43, ... from this header, i.e. s0[5..]).
    let (_dir, h) = flac_copy(&c, Some("flacformats 1 200 494\nflacformats.d0 508+5\n"));
    let w = wfdb::read_digital(&h).unwrap();
    assert_eq!(w.signals[0].samples, s0[5..]);
    // An 8-bit stream under format 516 keeps its values (wfdb reads it so).
    let (_dir, h) = flac_copy(&c, Some("flacformats 1 200 499\nflacformats.d0 516\n"));
    assert_eq!(&wfdb::read_digital(&h).unwrap().signals[0].samples, s0);
    // Two samples per frame: consecutive channel samples (WFDB frame layout).
    let (_dir, h) = flac_copy(&c, Some("flacformats 1 200 249\nflacformats.d0 508x2\n"));
    assert_eq!(
        wfdb::read_digital(&h).unwrap().signals[0].samples,
        s0[..498]
    );
    // What the wfdb package cannot read either is rejected, naming header or file.
    for (hea, kind, what, file) in [
        (
            "flacformats 2 200 400\nflacformats.d0 508 200 8 0 0 0 0 a\nflacformats.d0 508:2 200 8 0 0 0 0 b\n",
            "unsupported",
            "line 3 (signal 1, `b`): skew",
            "flacformats.hea",
        ),
        (
            "flacformats 1 200\nflacformats.d0 508\n",
            "unsupported",
            "no length",
            "flacformats.hea",
        ),
        (
            "flacformats 1 200 400\nflacformats.d1 508\n",
            "invalid",
            "16 bits per sample",
            "flacformats.d1",
        ),
        (
            "flacformats 2 200 400\nflacformats.d0 508\nflacformats.d0 508\n",
            "invalid",
            "1 channels",
            "flacformats.d0",
        ),
        (
            "flacformats 2 200 100\nflacformats.d0 508x2 200 8 0 0 0 0 a\nflacformats.d0 508 200 8 0 0 0 0 b\n",
            "unsupported",
            "line 3 (signal 1, `b`): the signals of the FLAC-compressed file `flacformats.d0` have different samples per frame",
            "flacformats.hea",
        ),
    ] {
        let (dir, h) = flac_copy(&c, Some(hea));
        let e = wfdb::read_digital(&h).unwrap_err();
        let got = match e {
            FormatError::Unsupported { .. } => "unsupported",
            FormatError::Invalid { .. } => "invalid",
            FormatError::Io { .. } => "io",
        };
        assert!(
            got == kind && e.to_string().contains(what) && e.path() == dir.path().join(file),
            "{hea:?}: {e}"
        );
    }
}

/// A MATLAB version 4 file as WFDB's wfdb2mat writes it: 20-byte header (type,
/// rows, columns, imaginary flag, name length), the name `val\0`, then the
/// int16 matrix column by column (MATLAB 4 MAT-file layout, from memory).
fn mat_v4(ty: u32, rows: u32, cols: u32, values: &[i16]) -> Vec<u8> {
    let mut b = Vec::new();
    for w in [ty, rows, cols, 0, 4] {
        b.extend_from_slice(&w.to_le_bytes());
    }
    b.extend_from_slice(b"val\0");
    for v in values {
        b.extend_from_slice(&v.to_le_bytes());
    }
    b
}

#[test]
fn matlab_v4_signal_files_are_read_and_a_disagreeing_header_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let h = dir.path().join("m.hea");
    let hea = "m 2 250 3\nm.mat 16+24 200/mV 16 0 1 0 0 I\nm.mat 16+24 200/mV 16 0 2 0 0 II\n";
    std::fs::write(&h, hea).unwrap();
    // 2 signals x 3 frames, column-major: frame 0 = (1, 2), frame 1 = (3, 4)...
    std::fs::write(
        dir.path().join("m.mat"),
        mat_v4(30, 2, 3, &[1, 2, 3, 4, 5, 6]),
    )
    .unwrap();
    let r = wfdb::read_record(&h).unwrap();
    assert_eq!(r.leads[0].samples, [1.0 / 200.0, 3.0 / 200.0, 5.0 / 200.0]);
    assert_eq!(r.leads[1].samples, [2.0 / 200.0, 4.0 / 200.0, 6.0 / 200.0]);
    for (bytes, what) in [
        (mat_v4(20, 2, 3, &[1, 2, 3, 4, 5, 6]), "element type"),
        (mat_v4(30, 3, 2, &[1, 2, 3, 4, 5, 6]), "rows"),
        (mat_v4(30, 2, 4, &[1, 2, 3, 4, 5, 6]), "needs"),
        (mat_v4(1030, 2, 3, &[1, 2, 3, 4, 5, 6]), "little-endian"),
        (
            b"MATLAB 5.0 MAT-file, written by hand".to_vec(),
            "version 5",
        ),
    ] {
        std::fs::write(dir.path().join("m.mat"), bytes).unwrap();
        let e = wfdb::read_record(&h).unwrap_err().to_string();
        assert!(e.contains(what) && e.contains("m.mat"), "{what}: {e}");
    }
    std::fs::write(
        dir.path().join("m.mat"),
        mat_v4(30, 2, 3, &[1, 2, 3, 4, 5, 6]),
    )
    .unwrap();
    std::fs::write(&h, hea.replace("16+24", "16+20")).unwrap();
    let e = wfdb::read_record(&h).unwrap_err().to_string();
    assert!(e.contains("byte offset is 20"), "{e}");
}

/// A variable-layout record built by hand (structure: WFDB `header(5)`, from
/// memory): a layout segment naming `II` (mV) and `PLETH` (NU), a 2-sample
/// null segment, a segment holding II at gain 100 plus a signal the layout does
/// not name, and a segment holding PLETH and II (in uV) at other gains. Every
/// expected value is computed by hand from the digital samples written.
#[test]
fn variable_layout_by_hand() {
    let dir = tempfile::tempdir().unwrap();
    let w = |name: &str, text: &str| std::fs::write(dir.path().join(name), text).unwrap();
    let dat = |name: &str, v: &[i16]| {
        let b: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
        std::fs::write(dir.path().join(name), b).unwrap()
    };
    w(
        "m.hea",
        "m/4 2 100 7\nm_layout 0\n~ 2\nm_1 3\nm_2 2\n# 61 F\n",
    );
    w(
        "m_layout.hea",
        "m_layout 2 100 0\n~ 0 200/mV 16 0 0 0 0 II\n~ 0 1/NU 16 0 0 0 0 PLETH\n",
    );
    // m_1: II (gain 100, baseline 10) and RESP, frame-interleaved.
    w(
        "m_1.hea",
        "m_1 2 100 3\nm_1.dat 16 100(10)/mV 16 0 0 0 0 II\nm_1.dat 16 5/Ohm 16 0 0 0 0 RESP\n",
    );
    dat("m_1.dat", &[110, 1, 60, 2, -90, 3]);
    // m_2: PLETH (gain 2) then II in uV (gain 1 per uV).
    w(
        "m_2.hea",
        "m_2 2 100 2\nm_2.dat 16 2/NU 16 0 0 0 0 PLETH\nm_2.dat 16 1/uV 16 0 0 0 0 II\n",
    );
    dat("m_2.dat", &[7, 250, -4, -500]);
    let r = wfdb::read_record(&dir.path().join("m.hea")).unwrap();
    assert_eq!((r.name.as_str(), r.fs, r.n_samples()), ("m", 100.0, 7));
    assert_eq!(r.leads[0].name, "II");
    assert_eq!(r.leads[1].name, "PLETH");
    assert_eq!(
        (r.leads[0].units.as_str(), r.leads[1].units.as_str()),
        ("mV", "NU")
    );
    let nan = f64::NAN;
    // II: gap, (110-10)/100, (60-10)/100, (-90-10)/100, then 250 uV, -500 uV.
    let ii = [nan, nan, 1.0, 0.5, -1.0, 0.25, -0.5];
    // PLETH: absent until m_2, then 7/2 and -4/2.
    let pleth = [nan, nan, nan, nan, nan, 3.5, -2.0];
    for (got, want) in [(&r.leads[0].samples, &ii), (&r.leads[1].samples, &pleth)] {
        for (g, w) in got.iter().zip(want.iter()) {
            assert!(g == w || g.is_nan() && w.is_nan(), "{got:?} vs {want:?}");
        }
    }
    assert_eq!(r.meta.sex, Some(Sex::Female));
    assert!(r
        .warnings
        .iter()
        .any(|w| w.contains("`RESP`") && w.contains("not in the layout")));
    assert!(r.warnings.iter().any(|w| w.contains("`PLETH`: 5 of 7")));

    // A segment whose units cannot join the layout's is named in the error.
    w(
        "m_2.hea",
        "m_2 2 100 2\nm_2.dat 16 2/% 16 0 0 0 0 PLETH\nm_2.dat 16 1/uV 16 0 0 0 0 II\n",
    );
    let e = wfdb::read_record(&dir.path().join("m.hea"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("m_2.hea") && e.contains("`%`") && e.contains("`NU`"),
        "{e}"
    );
    // Segment lengths that do not add up to the record line's length.
    w(
        "m_2.hea",
        "m_2 2 100 2\nm_2.dat 16 2/NU 16 0 0 0 0 PLETH\nm_2.dat 16 1/uV 16 0 0 0 0 II\n",
    );
    w("m.hea", "m/4 2 100 9\nm_layout 0\n~ 2\nm_1 3\nm_2 2\n");
    let e = wfdb::read_record(&dir.path().join("m.hea"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("m.hea") && e.contains("7 samples") && e.contains("says 9"),
        "{e}"
    );
    // A segment at another rate.
    w("m.hea", "m/4 2 100 7\nm_layout 0\n~ 2\nm_1 3\nm_2 2\n");
    w(
        "m_1.hea",
        "m_1 2 200 3\nm_1.dat 16 100(10)/mV 16 0 0 0 0 II\nm_1.dat 16 5/Ohm 16 0 0 0 0 RESP\n",
    );
    let e = wfdb::read_record(&dir.path().join("m.hea"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("`m_1` is at 200 Hz") && e.contains("100 Hz"),
        "{e}"
    );
}
