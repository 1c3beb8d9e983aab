//! The reader contract: every signal reader behind [`read_record`] (WFDB, EDF,
//! BDF, ISHNE Holter, CSV, HL7 aECG) passes the same invariants on what it returns and the same
//! bad-input cases, and its form for long records (`read_record_deferred`,
//! digital samples where the format allows) gives the same record bit for
//! bit and the same errors. A new format adds one entry to [`formats`] and
//! passes this file unchanged.
//!
//! Valid inputs: a small record written by the test in each format (WFDB and EDF
//! through the crate's writers, CSV and aECG as text), plus, when
//! `../shared/data` is present, QTDB sel100, LUDB 1 and the EDF files of the WFDB
//! conformance set. Invariants (common practice for a signal record, and the
//! documented [`Record`] contract of this crate): `fs` finite and > 0, at least one
//! lead, all leads the same length > 0, non-empty lead names and units, `files`
//! non-empty and existing, and the input file among them.
//!
//! Bad inputs, for each format: the main file empty, the main file truncated
//! (cut inside its data), and the file under an unknown extension. Each must be
//! an error (never a panic) whose text contains the path of the file at fault.

mod ishne_util;

use std::path::{Path, PathBuf};

use tendline_formats::deferred::Loaded;
use tendline_formats::{
    edf, read_record, read_record_deferred, wfdb, Lead, Metadata, ReadOptions, Record,
};

/// Small synthetic record: 3 leads, 500 Hz, 2 s (invented test signal).
fn synthetic() -> Record {
    let fs = 500.0;
    let n = 1000;
    let lead = |name: &str, f: f64, a: f64| Lead {
        name: name.into(),
        units: "mV".into(),
        samples: (0..n)
            .map(|i| a * (2.0 * std::f64::consts::PI * f * i as f64 / fs).sin())
            .collect(),
    };
    Record {
        name: "contract".into(),
        fs,
        leads: vec![
            lead("I", 1.0, 1.0),
            lead("II", 1.3, 0.8),
            lead("V1", 0.7, 1.5),
        ],
        meta: Metadata::default(),
        files: vec![],
        warnings: vec![],
    }
}

fn write_csv(dir: &Path, r: &Record) -> PathBuf {
    let p = dir.join("contract.csv");
    let mut s = format!("# fs={}\n", r.fs);
    let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
    s.push_str(&names.join(","));
    s.push('\n');
    for i in 0..r.n_samples() {
        let row: Vec<String> = r
            .leads
            .iter()
            .map(|l| format!("{:.6}", l.samples[i]))
            .collect();
        s.push_str(&row.join(","));
        s.push('\n');
    }
    std::fs::write(&p, s).unwrap();
    p
}

/// HL7 aECG layout (from memory of the HL7 v3 aECG standard), 1 uV per digit.
fn write_aecg(dir: &Path, r: &Record) -> PathBuf {
    let p = dir.join("contract.xml");
    let mut s = String::from(
        "<?xml version=\"1.0\"?>\n<AnnotatedECG xmlns=\"urn:hl7-org:v3\" \
         xmlns:xsi=\"http://www.w3.org/2001/XMLSchema-instance\">\
         <component><series><code code=\"RHYTHM\"/><component><sequenceSet>\n\
         <component><sequence><code code=\"TIME_ABSOLUTE\"/><value xsi:type=\"GLIST_TS\">\
         <head value=\"20200101000000\"/><increment value=\"0.002\" unit=\"s\"/></value></sequence></component>\n",
    );
    for l in &r.leads {
        s.push_str(&format!(
            "<component><sequence><code code=\"MDC_ECG_LEAD_{}\"/><value xsi:type=\"SLIST_PQ\">\
             <origin value=\"0\" unit=\"uV\"/><scale value=\"1\" unit=\"uV\"/><digits>",
            l.name
        ));
        let digits: Vec<String> = l
            .samples
            .iter()
            .map(|v| ((v * 1000.0).round() as i64).to_string())
            .collect();
        s.push_str(&digits.join(" "));
        s.push_str("</digits></value></sequence></component>\n");
    }
    s.push_str("</sequenceSet></component></series></component></AnnotatedECG>\n");
    std::fs::write(&p, s).unwrap();
    p
}

/// One format: its name, the path handed to `read_record` and the file holding
/// its samples (the one truncated in the bad-input cases).
struct Written {
    format: &'static str,
    input: PathBuf,
    data_file: PathBuf,
}

/// The BDF+ form of an EDF+ file: the same header with the BDF identification
/// (0xFF `BIOSEMI`, `BDF+C`, `BDF Annotations`), every 16-bit sample stored
/// sign-extended in 3 bytes, the annotation bytes copied and zero-padded (BDF
/// layout, from memory). Field offsets: EDF specification (Kemp et al. 1992).
fn edf_to_bdf(edf: &[u8]) -> Vec<u8> {
    let text = |a: usize, n: usize| String::from_utf8_lossy(&edf[a..a + n]).trim().to_string();
    let ns: usize = text(252, 4).parse().unwrap();
    let n_rec: usize = text(236, 8).parse().unwrap();
    let labels: Vec<String> = (0..ns).map(|k| text(256 + 16 * k, 16)).collect();
    let spr_at = 256 + ns * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80);
    let spr: Vec<usize> = (0..ns)
        .map(|k| text(spr_at + 8 * k, 8).parse().unwrap())
        .collect();
    let head = 256 * (ns + 1);
    let mut out = edf[..head].to_vec();
    out[0] = 0xff;
    out[1..8].copy_from_slice(b"BIOSEMI");
    let mut reserved = b"BDF+C".to_vec();
    reserved.resize(44, b' ');
    out[192..236].copy_from_slice(&reserved);
    for (k, l) in labels.iter().enumerate() {
        if l == "EDF Annotations" {
            let mut f = b"BDF Annotations".to_vec();
            f.resize(16, b' ');
            out[256 + 16 * k..256 + 16 * (k + 1)].copy_from_slice(&f);
        }
    }
    let mut at = head;
    for _ in 0..n_rec {
        for (k, &n) in spr.iter().enumerate() {
            let chunk = &edf[at..at + 2 * n];
            at += 2 * n;
            if labels[k] == "EDF Annotations" {
                let mut v = chunk.to_vec();
                v.resize(3 * n, 0);
                out.extend_from_slice(&v);
            } else {
                for p in chunk.chunks_exact(2) {
                    let d = i16::from_le_bytes([p[0], p[1]]) as i32;
                    out.extend_from_slice(&d.to_le_bytes()[..3]);
                }
            }
        }
    }
    assert_eq!(at, edf.len());
    out
}

/// The synthetic record as an ISHNE Holter file (tests/ishne_util), at 1 uV
/// per digital unit; lead codes 5, 6, 11 are I, II, V1.
fn write_ishne(dir: &Path, r: &Record) -> PathBuf {
    let p = dir.join("contract.ecg");
    let f = ishne_util::Ishne {
        fs: r.fs as i16,
        codes: vec![5, 6, 11],
        res_nv: vec![1000; 3],
        data: r
            .leads
            .iter()
            .map(|l| {
                l.samples
                    .iter()
                    .map(|v| (v * 1000.0).round() as i16)
                    .collect()
            })
            .collect(),
        sex: 0,
        birth: (0, 0, 0),
        recorded: (0, 0, 0),
        id: String::new(),
        var_block: Vec::new(),
    };
    std::fs::write(&p, f.bytes()).unwrap();
    p
}

fn formats(dir: &Path) -> Vec<Written> {
    let r = synthetic();
    let wdir = dir.join("wfdb");
    std::fs::create_dir_all(&wdir).unwrap();
    let hea = wfdb::write_record(&wdir, &r, 1000.0).unwrap();
    let edf_p = dir.join("contract.edf");
    edf::write_edf(&edf_p, &r).unwrap();
    let bdf_p = dir.join("contract.bdf");
    std::fs::write(&bdf_p, edf_to_bdf(&std::fs::read(&edf_p).unwrap())).unwrap();
    let ecg_p = write_ishne(dir, &r);
    let csv_p = write_csv(dir, &r);
    let xml_p = write_aecg(dir, &r);
    vec![
        Written {
            format: "WFDB",
            data_file: wdir.join("contract.dat"),
            input: hea,
        },
        Written {
            format: "EDF",
            input: edf_p.clone(),
            data_file: edf_p,
        },
        Written {
            format: "BDF",
            input: bdf_p.clone(),
            data_file: bdf_p,
        },
        Written {
            format: "ISHNE",
            input: ecg_p.clone(),
            data_file: ecg_p,
        },
        Written {
            format: "CSV",
            input: csv_p.clone(),
            data_file: csv_p,
        },
        Written {
            format: "aECG",
            input: xml_p.clone(),
            data_file: xml_p,
        },
    ]
}

fn check_contract(input: &Path, r: &Record) {
    let what = input.display();
    assert!(r.fs.is_finite() && r.fs > 0.0, "{what}: fs {}", r.fs);
    assert!(!r.leads.is_empty(), "{what}: no leads");
    let n = r.leads[0].samples.len();
    assert!(n > 0, "{what}: empty leads");
    for l in &r.leads {
        assert_eq!(l.samples.len(), n, "{what}: lead {} length", l.name);
        assert!(!l.name.trim().is_empty(), "{what}: empty lead name");
        assert!(
            !l.units.trim().is_empty(),
            "{what}: lead {} has no units",
            l.name
        );
    }
    assert_eq!(r.n_samples(), n);
    assert!(!r.files.is_empty(), "{what}: no files");
    for f in &r.files {
        assert!(
            f.is_file(),
            "{what}: listed file {} does not exist",
            f.display()
        );
    }
    assert!(
        r.files.iter().any(|f| f == input),
        "{what}: input not in files {:?}",
        r.files
    );
    assert!(!r.name.is_empty(), "{what}: empty record name");
}

#[test]
fn every_reader_satisfies_the_contract_on_written_files() {
    let d = tempfile::tempdir().unwrap();
    let want = synthetic();
    for w in formats(d.path()) {
        let r = read_record(&w.input, &ReadOptions::default())
            .unwrap_or_else(|e| panic!("{}: {e}", w.format));
        check_contract(&w.input, &r);
        same_when_deferred(&w.input, &r, w.format);
        // The same signal comes back from every format: names, rate, length, and
        // values within each format's quantisation (WFDB/aECG 1 uV, CSV 1e-6 mV,
        // EDF 16-bit over the signal's range: < 1e-4 mV here).
        assert_eq!(r.fs, want.fs, "{}", w.format);
        let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
        assert_eq!(names, ["I", "II", "V1"], "{}", w.format);
        assert_eq!(r.n_samples(), want.n_samples(), "{}", w.format);
        for (a, b) in r.leads.iter().zip(&want.leads) {
            assert_eq!(a.units, "mV", "{}", w.format);
            let err = a
                .samples
                .iter()
                .zip(&b.samples)
                .map(|(x, y)| (x - y).abs())
                .fold(0.0, f64::max);
            assert!(
                err < 1e-3,
                "{} lead {}: max error {err} mV",
                w.format,
                a.name
            );
        }
    }
}

#[test]
fn every_reader_satisfies_the_contract_on_reference_data() {
    let data = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    if !data.is_dir() {
        eprintln!("skipped: reference data not found at {}", data.display());
        return;
    }
    // QTDB sel100 and LUDB 1 (WFDB), and the EDF files of the WFDB conformance set.
    let inputs = [
        data.join("qtdb/sel100.hea"),
        data.join("ludb/1.hea"),
        data.join("wfdb-conformance/test_edfann.edf"),
        data.join("wfdb-conformance/test_generator_2.edf"),
    ];
    let mut read = 0;
    for p in inputs.iter().filter(|p| p.is_file()) {
        match read_record(p, &ReadOptions::default()) {
            Ok(r) => {
                check_contract(p, &r);
                read += 1;
            }
            // A documented rejection must still name the file.
            Err(e) => assert!(e.to_string().contains(&p.display().to_string()), "{e}"),
        }
    }
    assert!(read >= 2, "expected at least the two WFDB records to read");
}

/// Read with every record deferred that its format allows
/// (`read_record_deferred`, the path of long records): the same record as
/// `read_record` gives, bit for bit, whether it comes back digital (WFDB,
/// EDF, BDF, ISHNE) or read whole (CSV, aECG); or the same error.
fn same_when_deferred(input: &Path, whole: &Record, format: &str) {
    match read_record_deferred(input, &ReadOptions::default(), &|_, _, _| true).unwrap() {
        Loaded::Deferred(d) => assert_eq!(d.first_difference(whole), None, "{format}"),
        Loaded::Physical(r) => {
            assert!(matches!(format, "CSV" | "aECG"), "{format} not deferred");
            assert_eq!(&r, whole, "{format}");
        }
    }
}

/// The deferred read of a bad input fails with `read_record`'s message.
fn same_error_when_deferred(input: &Path, format: &str) {
    let opts = ReadOptions::default();
    let a = read_record(input, &opts).unwrap_err().to_string();
    let b = read_record_deferred(input, &opts, &|_, _, _| true)
        .unwrap_err()
        .to_string();
    assert_eq!(a, b, "{format}");
}

fn expect_error_naming(
    path: &Path,
    res: Result<Record, tendline_formats::FormatError>,
    case: &str,
    format: &str,
) {
    match res {
        Ok(_) => panic!("{format} {case}: read without error"),
        Err(e) => {
            let msg = e.to_string();
            assert!(
                msg.contains(&path.display().to_string()),
                "{format} {case}: error does not name {}: {msg}",
                path.display()
            );
        }
    }
}

#[test]
fn every_reader_rejects_the_same_bad_inputs() {
    let d = tempfile::tempdir().unwrap();
    let opts = ReadOptions::default();
    for w in formats(d.path()) {
        let orig = std::fs::read(&w.data_file).unwrap();

        // Truncated: cut in the middle of the data (a third of the way in, then
        // back to just after a separator for text formats so that the last row or
        // digit list is incomplete rather than a shorter valid file).
        let cut = match w.format {
            // Text: cut after the first field of a row in the middle.
            "CSV" => {
                let mid = orig.len() / 3;
                mid + orig[mid..].iter().position(|&b| b == b'\n').unwrap() + 1 + 4
            }
            _ => orig.len() / 3 + 1,
        };
        std::fs::write(&w.data_file, &orig[..cut]).unwrap();
        expect_error_naming(
            &w.data_file,
            read_record(&w.input, &opts),
            "truncated",
            w.format,
        );
        same_error_when_deferred(&w.input, w.format);

        // Empty: the file handed to the reader holds no bytes.
        std::fs::write(&w.data_file, &orig).unwrap();
        let kept = std::fs::read(&w.input).unwrap();
        std::fs::write(&w.input, b"").unwrap();
        expect_error_naming(&w.input, read_record(&w.input, &opts), "empty", w.format);
        same_error_when_deferred(&w.input, w.format);
        std::fs::write(&w.input, &kept).unwrap();

        // Unknown extension: the same bytes under a name no reader claims.
        let odd = w.input.with_extension("sig");
        std::fs::copy(&w.input, &odd).unwrap();
        expect_error_naming(
            &odd,
            read_record(&odd, &opts),
            "unknown extension",
            w.format,
        );
        std::fs::remove_file(&odd).unwrap();

        // Restored, the file reads again (the cases above changed only what they meant to).
        check_contract(&w.input, &read_record(&w.input, &opts).unwrap());
    }
}
