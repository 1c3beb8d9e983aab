//! EDF/EDF+ reader and writer: round trips, worked examples from the EDF+
//! specification, rate selection, and the reference files of
//! `../shared/data/wfdb-conformance` (checked sample by sample against
//! `pyedflib` and `wfdb` in `tests/python/test_formats_edf.py`).

mod edf_util;

use std::path::{Path, PathBuf};

use edf_util::{build_edf, Sig};
use tendline_formats::edf::{
    encode_edf, parse_edf, read_edf, read_edf_annotations, write_edf, write_edf_with_annotations,
    EdfAnnotation,
};
use tendline_formats::{Lead, Metadata, Record, Sex};

fn tmp(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("edf_roundtrip");
    std::fs::create_dir_all(&d).unwrap();
    d.join(name)
}

fn synthetic(fs: f64, n: usize, nlead: usize) -> Record {
    let leads = (0..nlead)
        .map(|k| Lead {
            name: format!("L{k}"),
            units: "mV".into(),
            samples: (0..n)
                .map(|i| {
                    let t = i as f64 / fs;
                    (k as f64 + 1.0) * 0.7 * (std::f64::consts::TAU * 1.3 * t).sin()
                        + 0.05 * ((i * 7919 + k) % 101) as f64 / 101.0
                })
                .collect(),
        })
        .collect();
    Record {
        name: "syn".into(),
        fs,
        leads,
        meta: Metadata {
            age: Some(51.0),
            sex: Some(Sex::Female),
            subject: Some("S 01".into()),
            ..Default::default()
        },
        files: vec![],
        warnings: vec![],
    }
}

/// Decode one signal by hand from the header fields (slow, obvious oracle for
/// the reader's scaling): EDF header layout from the EDF specification.
fn oracle_signal(bytes: &[u8], sig: usize) -> Vec<f64> {
    let txt = |a: usize, b: usize| String::from_utf8_lossy(&bytes[a..b]).trim().to_string();
    let ns: usize = txt(252, 256).parse().unwrap();
    let nrec: usize = txt(236, 244).parse().unwrap();
    let field = |offset_per_sig: usize, width: usize, k: usize| {
        let a = 256 + offset_per_sig * ns + width * k;
        txt(a, a + width)
    };
    // Offsets (per-signal block starts, in units of ns): label 0, transducer 16,
    // dimension 96, pmin 104, pmax 112, dmin 120, dmax 128, prefilter 136, nsamp 216.
    let pmin: f64 = field(104, 8, sig).parse().unwrap();
    let pmax: f64 = field(112, 8, sig).parse().unwrap();
    let dmin: f64 = field(120, 8, sig).parse().unwrap();
    let dmax: f64 = field(128, 8, sig).parse().unwrap();
    let spr: Vec<usize> = (0..ns).map(|k| field(216, 8, k).parse().unwrap()).collect();
    let rec_len: usize = spr.iter().sum::<usize>() * 2;
    let before: usize = spr[..sig].iter().sum::<usize>() * 2;
    let mut out = Vec::new();
    for r in 0..nrec {
        for j in 0..spr[sig] {
            let at = 256 * (ns + 1) + r * rec_len + before + 2 * j;
            let d = i16::from_le_bytes([bytes[at], bytes[at + 1]]) as f64;
            out.push(pmin + (d - dmin) / (dmax - dmin) * (pmax - pmin));
        }
    }
    out
}

#[test]
fn write_then_read_is_within_half_a_step() {
    let rec = synthetic(500.0, 5000, 12);
    let p = tmp("rt12.edf");
    write_edf(&p, &rec).unwrap();
    let back = read_edf(&p).unwrap();
    assert_eq!(back.fs, 500.0);
    assert_eq!(back.n_samples(), 5000);
    assert_eq!(back.meta.sex, Some(Sex::Female));
    assert_eq!(back.meta.age, Some(51.0));
    assert_eq!(back.name, "rt12");
    let bytes = std::fs::read(&p).unwrap();
    let file = parse_edf(&bytes, &p).unwrap();
    assert_eq!(file.header.patient, "S_01 F 01-JAN-1934 X");
    for (k, (a, b)) in rec.leads.iter().zip(&back.leads).enumerate() {
        assert_eq!(a.name, b.name);
        assert_eq!(b.units, "mV");
        let h = &file.header.signals[k];
        let step = (h.phys_max - h.phys_min) / 65535.0;
        let max_err = a
            .samples
            .iter()
            .zip(&b.samples)
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max);
        assert!(
            max_err <= 0.5 * step * (1.0 + 1e-9),
            "{}: {max_err} > {step}/2",
            a.name
        );
        // The reader's scaling equals the hand decoding.
        let o = oracle_signal(&bytes, k);
        assert_eq!(o.len(), b.samples.len());
        for (x, y) in o.iter().zip(&b.samples) {
            assert!((x - y).abs() <= 1e-12 * (1.0 + x.abs()));
        }
    }
    assert!(read_edf_annotations(&p).unwrap().is_empty());
}

#[test]
fn record_length_divides_the_sample_count_or_pads() {
    // 1009 samples (prime) at 250 Hz: one 4.036-s data record, no padding.
    let rec = synthetic(250.0, 1009, 2);
    let p = tmp("prime.edf");
    write_edf(&p, &rec).unwrap();
    let f = parse_edf(&std::fs::read(&p).unwrap(), &p).unwrap();
    assert_eq!(f.header.record_duration_s, 4.036);
    assert_eq!(read_edf(&p).unwrap().n_samples(), 1009);
    // 100,003 samples (prime) x 12 leads cannot form one record under 61,440
    // bytes: 1-s records, the last padded with the last sample.
    let rec = synthetic(250.0, 100_003, 12);
    let p = tmp("padded.edf");
    write_edf(&p, &rec).unwrap();
    let back = read_edf(&p).unwrap();
    assert_eq!(back.n_samples(), 100_250);
    let last = back.leads[3].samples[100_002];
    assert!(back.leads[3].samples[100_003..].iter().all(|&x| x == last));
    // Non-integer rate: 360.5 Hz x 7210 samples.
    let rec = synthetic(360.5, 7210, 1);
    let p = tmp("frac.edf");
    write_edf(&p, &rec).unwrap();
    let back = read_edf(&p).unwrap();
    assert!((back.fs - 360.5).abs() < 1e-9, "{}", back.fs);
    assert_eq!(back.n_samples(), 7210);
}

#[test]
fn annotations_round_trip() {
    let rec = synthetic(250.0, 2500, 2);
    let anns = vec![
        EdfAnnotation {
            onset_s: 0.5,
            duration_s: None,
            text: "start".into(),
        },
        EdfAnnotation {
            onset_s: 3.25,
            duration_s: Some(1.5),
            text: "Lights off".into(),
        },
        EdfAnnotation {
            onset_s: 9.996,
            duration_s: Some(0.0),
            text: "ünïcode".into(),
        },
    ];
    let p = tmp("ann.edf");
    write_edf_with_annotations(&p, &rec, &anns).unwrap();
    assert_eq!(read_edf_annotations(&p).unwrap(), anns);
    assert_eq!(read_edf(&p).unwrap().leads.len(), 2);
}

#[test]
fn edfplus_spec_examples() {
    // Patient and recording fields of the EDF+ specification's example (Kemp &
    // Olivan 2003, from memory): born 02-MAY-1951, recorded 02-MAR-2002 -> 50.
    // TALs also from that specification's examples (from memory).
    let tals: Vec<u8> = [
        &b"+0\x14\x14\x00"[..],
        b"+180\x14Lights off\x14Close door\x14\x00",
        b"+1800.2\x1525.5\x14Apnea\x14\x00",
    ]
    .concat();
    let bytes = build_edf(
        "MCH-0234567 F 02-MAY-1951 Haagse_Harry",
        "Startdate 02-MAR-2002 PSG-1234/2002 NN Telemetry03",
        "EDF+C",
        1,
        "1",
        &[
            Sig::ecg("ECG II", 4, "uV", -1000.0, 1000.0, &[-32768, -1, 0, 32767]),
            Sig::annotations(&tals),
        ],
    );
    let p = tmp("spec.edf");
    std::fs::write(&p, &bytes).unwrap();
    let rec = read_edf(&p).unwrap();
    assert_eq!(rec.meta.age, Some(50.0));
    assert_eq!(rec.meta.sex, Some(Sex::Female));
    assert_eq!(rec.leads.len(), 1);
    assert_eq!(rec.leads[0].name, "ECG II");
    assert_eq!(rec.fs, 4.0);
    // uV -> mV; digital -32768 is the physical minimum, 32767 the maximum.
    let s = &rec.leads[0].samples;
    assert!((s[0] + 1.0).abs() < 1e-12 && (s[3] - 1.0).abs() < 1e-12);
    let ann = read_edf_annotations(&p).unwrap();
    let got: Vec<(f64, Option<f64>, &str)> = ann
        .iter()
        .map(|a| (a.onset_s, a.duration_s, a.text.as_str()))
        .collect();
    assert_eq!(
        got,
        vec![
            (180.0, None, "Lights off"),
            (180.0, None, "Close door"),
            (1800.2, Some(25.5), "Apnea")
        ]
    );
}

#[test]
fn signals_at_another_rate_are_resampled_with_a_note() {
    // Physical range = digital range, so each sample reads as its digital value.
    let (lo, hi) = (-32768.0, 32767.0);
    let resp: Vec<i16> = (0..4).map(|i| 4000 * i).collect();
    let pleth: Vec<i16> = (0..32).map(|i| 100 * i).collect();
    let bytes = build_edf(
        "X X X X",
        "Startdate X X X X",
        "EDF+C",
        2,
        "1",
        &[
            Sig::ecg("ECG I", 8, "mV", lo, hi, &[10; 16]),
            Sig::ecg("Resp", 2, "mV", lo, hi, &resp),
            Sig::ecg("Pleth", 16, "mV", lo, hi, &pleth),
            Sig::ecg("ECG II", 8, "mV", lo, hi, &[20; 16]),
            Sig::annotations_per_record(&[b"+0\x14\x14\x00", b"+1\x14\x14\x00"]),
        ],
    );
    let p = tmp("rates.edf");
    std::fs::write(&p, &bytes).unwrap();
    let rec = read_edf(&p).unwrap();
    assert_eq!(rec.fs, 8.0);
    let names: Vec<&str> = rec.leads.iter().map(|l| l.name.as_str()).collect();
    // Every signal keeps its header position, so `.leadmark` channels match it.
    assert_eq!(names, ["ECG I", "Resp", "Pleth", "ECG II"]);
    assert!(rec.meta.comments.iter().any(|c| c.contains("Resp")));
    assert!(rec
        .warnings
        .iter()
        .any(|c| c.contains("Resp") && c.contains("2 Hz")));
    assert!(rec
        .warnings
        .iter()
        .any(|c| c.contains("Pleth") && c.contains("16 Hz")));
    assert!(rec.leads.iter().all(|l| l.samples.len() == 16));
    // Resp: sample i at i/2 s; record sample j at j/8 s lies at i = j/4, where the
    // straight line through the ramp 0, 4000, 8000, 12000 is 1000 j; held at
    // 12000 past the last sample (1.5 s).
    for (j, &v) in rec.leads[1].samples.iter().enumerate() {
        let want = (1000.0 * j as f64).min(12000.0);
        assert!((v - want).abs() < 1e-9, "Resp[{j}] = {v}, want {want}");
    }
    // Pleth: samples 100 i at i/16 s; record sample j averages source samples
    // 2j-1, 2j, 2j+1 (within half a record period, 1/16 s, of j/8 s): 200 j;
    // at j = 0 only samples 0 and 1 exist: 50.
    for (j, &v) in rec.leads[2].samples.iter().enumerate() {
        let want = if j == 0 { 50.0 } else { 200.0 * j as f64 };
        assert!((v - want).abs() < 1e-9, "Pleth[{j}] = {v}, want {want}");
    }
    assert!(rec.leads[0].samples.iter().all(|&v| v == 10.0));
    assert!(rec.leads[3].samples.iter().all(|&v| v == 20.0));
    // Plain EDF without ECG labels: the rate most signals share.
    let bytes = build_edf(
        "free text",
        "free text",
        "",
        1,
        "1",
        &[
            Sig::ecg("a", 2, "mV", -5.0, 5.0, &[0; 2]),
            Sig::ecg("b", 3, "mV", -5.0, 5.0, &[0; 3]),
            Sig::ecg("c", 3, "mV", -5.0, 5.0, &[0; 3]),
        ],
    );
    let p = tmp("rates2.edf");
    std::fs::write(&p, &bytes).unwrap();
    let rec = read_edf(&p).unwrap();
    assert_eq!(rec.fs, 3.0);
    assert_eq!(rec.leads.len(), 3);
    assert_eq!(rec.leads[0].samples.len(), 3);
    assert_eq!(rec.meta.age, None);
}

fn conformance(name: &str) -> Option<PathBuf> {
    let p = Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/wfdb-conformance"
    ))
    .join(name);
    if p.is_file() {
        Some(p)
    } else {
        eprintln!("SKIP: reference file {} not found", p.display());
        None
    }
}

#[test]
fn conformance_files() {
    // Facts checked against pyedflib (test_formats_edf.py): 11 signals at 200 Hz,
    // 600 one-second records, annotations RECORD START at 0 s and REC STOP at 600 s.
    let Some(p) = conformance("test_generator_2.edf") else {
        return;
    };
    let rec = read_edf(&p).unwrap();
    assert_eq!(rec.fs, 200.0);
    assert_eq!(rec.leads.len(), 11);
    assert_eq!(rec.n_samples(), 120_000);
    let ecg = rec.leads.iter().find(|l| l.name == "ECG").unwrap();
    assert_eq!(ecg.units, "mV");
    let ann = read_edf_annotations(&p).unwrap();
    assert_eq!(ann.len(), 2);
    assert_eq!(ann[1].text, "REC STOP");
    // Rewrite and reread: same leads within our quantisation.
    let q = tmp("tg2_copy.edf");
    write_edf(&q, &rec).unwrap();
    let back = read_edf(&q).unwrap();
    assert_eq!(back.leads.len(), 11);
    assert_eq!(back.n_samples(), 120_000);
    // test_edfann.edf: 856 annotations (pyedflib count), no signal.
    let Some(p) = conformance("test_edfann.edf") else {
        return;
    };
    assert_eq!(read_edf_annotations(&p).unwrap().len(), 856);
    assert!(read_edf(&p).is_err());
}

#[test]
fn writer_rejects_unwritable_records() {
    let mut rec = synthetic(250.0, 100, 2);
    rec.leads[1].samples.pop();
    assert!(encode_edf(&rec, &[]).unwrap_err().contains("samples"));
    let mut rec = synthetic(250.0, 100, 2);
    rec.leads[0].samples[5] = f64::NAN;
    assert!(encode_edf(&rec, &[]).unwrap_err().contains("not finite"));
    let mut rec = synthetic(250.0, 100, 1);
    rec.leads[0].name = "a label longer than sixteen".into();
    assert!(encode_edf(&rec, &[]).is_err());
    let mut rec = synthetic(250.0, 100, 1);
    rec.fs = 0.0;
    assert!(encode_edf(&rec, &[]).is_err());
    let mut rec = synthetic(250.0, 100, 1);
    rec.leads[0].samples[0] = 1e12;
    assert!(encode_edf(&rec, &[]).unwrap_err().contains("8 characters"));
    let p = tmp("never.edf");
    let rec = Record {
        leads: vec![],
        ..synthetic(250.0, 1, 1)
    };
    assert!(write_edf(&p, &rec).is_err());
    assert!(!p.exists());
}
