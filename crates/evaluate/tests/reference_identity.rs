//! End-to-end checks on the open databases (`../shared/data`): a run whose marks are
//! copies of the reference must score perfectly, and a run with known shifts must
//! report exactly those shifts. These exercise file reading, lead mapping, pairing
//! and the report together.

use std::path::{Path, PathBuf};
use tendline_evaluate::{
    check_floors, validate, write_report, Fiducial, Floors, ReferenceKind, ValidateOptions,
};
use tendline_formats::annotation::{read_annotations, write_annotations, Annotation};

fn data(db: &str, probe: &str) -> Option<PathBuf> {
    let p = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data")).join(db);
    if p.join(probe).is_file() {
        Some(p)
    } else {
        eprintln!("SKIP: {} not found", p.join(probe).display());
        None
    }
}

const LUDB_LEADS: [&str; 12] = [
    "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
];

/// LUDB run: `.mark` = lead II file (shifted by `shift` samples), `.leadmark` = all
/// lead files with chan = signal index (LUDB headers list the leads in this order).
fn ludb_run(data: &Path, records: &[&str], shift: i64) -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let ann = dir.path().join("annotations");
    std::fs::create_dir_all(&ann).unwrap();
    for r in records {
        let mut all: Vec<Annotation> = Vec::new();
        for (k, l) in LUDB_LEADS.iter().enumerate() {
            let mut v = read_annotations(&data.join(format!("{r}.{l}"))).unwrap();
            for a in &mut v {
                a.chan = k as u8;
                a.sample += shift;
            }
            if *l == "ii" {
                let g: Vec<Annotation> = v
                    .iter()
                    .cloned()
                    .map(|mut a| {
                        a.chan = 0;
                        a
                    })
                    .collect();
                write_annotations(&ann.join(format!("{r}.mark")), &g).unwrap();
            }
            all.extend(v);
        }
        all.sort_by_key(|a| a.sample);
        write_annotations(&ann.join(format!("{r}.leadmark")), &all).unwrap();
    }
    dir
}

#[test]
fn ludb_reference_copy_scores_perfectly_and_shift_is_measured() {
    let Some(d) = data("ludb", "1.hea") else {
        return;
    };
    let recs = ["1", "2", "3", "4", "5"];
    let run = ludb_run(&d, &recs, 0);
    let o = ValidateOptions {
        run_dir: run.path().into(),
        data_dir: d.clone(),
        ..Default::default()
    };
    let r = validate(&o).unwrap();
    assert_eq!(r.database, "ludb");
    // No .q1c: the global reference is combined from the lead files.
    let g = r.global.as_ref().unwrap();
    assert!(
        g.reference.contains("lead files combined"),
        "{}",
        g.reference
    );
    assert_eq!(g.paired_beats, g.ref_beats);
    let b = r.beats.as_ref().unwrap();
    assert_eq!(b.overall.sensitivity_pct, Some(100.0));
    assert_eq!(b.overall.ppv_pct, Some(100.0));
    let p = r.per_lead.as_ref().unwrap();
    assert_eq!(p.per_lead_name.len(), 12);
    for f in &p.fiducials {
        assert_eq!(f.sensitivity_pct, Some(100.0), "{:?}", f.fiducial);
        assert_eq!(f.fn_ + f.fp, 0, "{:?}", f.fiducial);
        assert_eq!(f.stats.mean_ms, Some(0.0));
        assert_eq!(f.stats.sd_ms, Some(0.0));
    }
    let q = r.qt.as_ref().unwrap();
    assert!(q.reference.contains("lead files combined"));
    assert_eq!(q.beat_per_lead.as_ref().unwrap().bias_ms, Some(0.0));

    // Every mark 3 samples late at 500 Hz: every error is +6 ms exactly.
    let run = ludb_run(&d, &recs, 3);
    let r = validate(&ValidateOptions {
        run_dir: run.path().into(),
        ..o.clone()
    })
    .unwrap();
    let p = r.per_lead.as_ref().unwrap();
    for f in &p.fiducials {
        assert_eq!(f.sensitivity_pct, Some(100.0));
        assert!((f.stats.mean_ms.unwrap() - 6.0).abs() < 1e-9);
        assert!(f.stats.sd_ms.unwrap().abs() < 1e-9);
    }
    // Floors: a 5 ms ceiling on |mean| of QRS onset is violated, a 10 ms one is not.
    let fl = Floors::from_toml(
        "[ludb.per_lead.qrs_on]\nmax_abs_mean_ms = 5.0\n[ludb.beats]\nmin_sensitivity_pct = 99.9\n",
        Path::new("floors.toml"),
    )
    .unwrap();
    let v = check_floors(&r, &fl);
    assert_eq!(v.len(), 1, "{v:?}");
    assert!(v[0].contains("ludb.per_lead.qrs_on"), "{v:?}");
    let fl = Floors::from_toml(
        "[ludb.per_lead.qrs_on]\nmax_abs_mean_ms = 10.0\n[ludb.qt_window_superimposed]\nmax_sd_ms = 30\n",
        Path::new("f"),
    )
    .unwrap();
    let v = check_floors(&r, &fl);
    assert_eq!(
        v.len(),
        1,
        "a missing window-QT agreement (no windows.csv) must be a violation: {v:?}"
    );
    // A constant shift is an offset with no spread: every component is 0,
    // and the tool's marks move from beat to beat exactly as the reference's.
    for c in &p.components {
        assert!(c.total_ms.abs() < 1e-9, "{c:?}");
        assert!(c.between_channels_ms.abs() < 1e-9 && c.within_channel_ms.abs() < 1e-9);
        assert!(
            (c.reference_spread_ms - c.test_spread_ms).abs() < 1e-9,
            "{c:?}"
        );
    }
    assert_eq!(p.components.len(), Fiducial::ALL.len());
    let out = tempfile::tempdir().unwrap();
    write_report(&r, out.path()).unwrap();
    let md = std::fs::read_to_string(out.path().join("report.md")).unwrap();
    assert!(md.contains("Per-lead boundaries"));
    assert!(md.contains("Error components"));
    // marks.csv: every per-lead scored mark a hit 6 ms late (the global marks
    // of this fixture are not a copy of the combined global reference).
    let csv = std::fs::read_to_string(out.path().join("marks.csv")).unwrap();
    let rows: Vec<&str> = csv.lines().filter(|l| l.starts_with("lead,")).collect();
    let tp: u64 = p.fiducials.iter().map(|f| f.tp).sum();
    assert_eq!(rows.len() as u64, tp);
    assert!(rows
        .iter()
        .all(|l| l.contains(",tp,") && l.contains(",6.000,")));
    // A later report without scored marks leaves no stale list behind.
    let mut empty = r.clone();
    empty.marks.clear();
    write_report(&empty, out.path()).unwrap();
    assert!(!out.path().join("marks.csv").exists());
}

#[test]
fn qtdb_q1c_copy_scores_perfectly() {
    let Some(d) = data("qtdb", "sel100.q1c") else {
        return;
    };
    let recs = ["sel100", "sel102", "sel31"];
    let run = tempfile::tempdir().unwrap();
    let ann = run.path().join("annotations");
    std::fs::create_dir_all(&ann).unwrap();
    for r in recs {
        std::fs::copy(d.join(format!("{r}.q1c")), ann.join(format!("{r}.mark"))).unwrap();
    }
    let r = validate(&ValidateOptions {
        run_dir: run.path().into(),
        data_dir: d.clone(),
        reference: ReferenceKind::Global,
        records: Some(recs.iter().map(|s| s.to_string()).collect()),
        ..Default::default()
    })
    .unwrap();
    let g = r.global.as_ref().unwrap();
    for f in &g.fiducials {
        if f.tp + f.fn_ > 0 {
            assert_eq!(f.sensitivity_pct, Some(100.0), "{:?}", f.fiducial);
            assert_eq!(f.stats.mean_ms, Some(0.0));
        }
        assert_eq!(f.fp, 0);
    }
    // sel102 (paced) has no P marks in .q1c: P is scored on the other records only.
    assert!(g.fiducial(Fiducial::PPeak).unwrap().tp > 0);
    assert!(r.beats.is_none(), "reference kind global scores no beats");
    // A requested record without marks is a clear error naming the file.
    let e = validate(&ValidateOptions {
        run_dir: run.path().into(),
        data_dir: d,
        records: Some(vec!["sel103".into()]),
        ..Default::default()
    })
    .unwrap_err();
    assert!(e.to_string().contains("sel103.mark"), "{e}");
}

/// Writes `<dir>/<name>.<ext>` from (sample, symbol) pairs.
fn write_ann(dir: &Path, name: &str, ext: &str, marks: &[(i64, &str)]) {
    let v: Vec<Annotation> = marks.iter().map(|&(s, y)| Annotation::new(s, y)).collect();
    write_annotations(&dir.join(format!("{name}.{ext}")), &v).unwrap();
}

/// Reference beat with QRS on at q-10, peak q, end q+10, T peak q+60, T end q+`qt`-10
/// (so QT = `qt` samples).
fn beat(q: i64, qt: i64) -> Vec<(i64, &'static str)> {
    vec![
        (q - 10, "("),
        (q, "N"),
        (q + 10, ")"),
        (q + 60, "t"),
        (q + qt - 10, ")"),
    ]
}

#[test]
fn hand_made_record_window_qt_and_beats() {
    // 250 Hz, reference beats every 200 samples (0.8 s) with QT 100 samples (400 ms),
    // 102 (408 ms), 104 (416 ms) in window 0 s..2.1 s (QRS peaks at 0.4, 1.2, 2.0 s); the tool marks QT 100 samples on
    // every beat and reports window QT 410 / 405 ms.
    let data = tempfile::tempdir().unwrap();
    let run = tempfile::tempdir().unwrap();
    std::fs::create_dir_all(run.path().join("annotations")).unwrap();
    std::fs::write(
        data.path().join("r1.hea"),
        "r1 1 250 1000\nr1.dat 16 200 16 0 0 0 0 II\n",
    )
    .unwrap();
    let mut q1c = Vec::new();
    for (k, qt) in [100, 102, 104].into_iter().enumerate() {
        q1c.extend(beat(100 + 200 * k as i64, qt));
    }
    q1c.extend(beat(700, 150)); // 2.8 s: outside the window
    write_ann(data.path(), "r1", "q1c", &q1c);
    write_ann(
        data.path(),
        "r1",
        "atr",
        &[(100, "N"), (300, "N"), (500, "N"), (700, "N")],
    );
    let mut mark = Vec::new();
    for q in [102, 300, 500, 700, 900] {
        mark.extend(beat(q, 100)); // 900: extra beat (a false positive)
    }
    write_ann(&run.path().join("annotations"), "r1", "mark", &mark);
    std::fs::write(
        run.path().join("windows.csv"),
        "record,window,start_s,end_s,qt_ms,qt_superimposed_ms,qrs_ms,pr_ms,p_ms,tpe_ms\nr1,0,0,2.1,405,410,90,150,100,130\nr1,1,2.1,4,300,300,70,150,100,90\n",
    )
    .unwrap();
    let r = validate(&ValidateOptions {
        run_dir: run.path().into(),
        data_dir: data.path().into(),
        worst_beats: 0,
        ..Default::default()
    })
    .unwrap();
    assert_eq!(r.records, vec!["r1"]);
    let b = &r.beats.as_ref().unwrap().overall;
    assert_eq!((b.tp, b.fn_, b.fp), (4, 0, 1));
    let q = r.qt.as_ref().unwrap();
    // Window 0: mean reference QT (400 + 408 + 416) / 3 = 408 ms; window 1 has one
    // reference beat (< 3) and is not scored.
    assert_eq!(q.windows_scored, 1);
    let ws = q.window_superimposed.as_ref().unwrap();
    assert!((ws.bias_ms.unwrap() - 2.0).abs() < 1e-9);
    let wq = q.window_single.as_ref().unwrap();
    assert!((wq.bias_ms.unwrap() + 3.0).abs() < 1e-9);
    // QRS duration: reference 20 samples (80 ms) on every beat; window 0 reports
    // 90 ms (window 1 again not scored). No reference P wave: no PR agreement.
    let wr = q.window_qrs.as_ref().unwrap();
    assert_eq!(wr.n, 1);
    assert!((wr.bias_ms.unwrap() - 10.0).abs() < 1e-9);
    assert!(q.window_pr.is_none());
    // T peak to T end: reference T end - T peak = QT - 70 samples = 30, 32, 34
    // samples (120, 128, 136 ms; mean 128 ms); window 0 reports 130 ms. No reference
    // P wave: no P-duration agreement; a global reference: no same-lead Tp-e.
    let wt = q.window_tpe.as_ref().unwrap();
    assert_eq!(wt.n, 1);
    assert!((wt.bias_ms.unwrap() - 2.0).abs() < 1e-9);
    assert!(q.window_p.is_none());
    assert!(q.window_tpe_lead_ref.is_none());
    // Beat QT: tool 400 ms everywhere vs 400, 408, 416, 600 → differences 0, −8, −16, −200.
    assert_eq!(q.beat.n, 4);
    assert!((q.beat.bias_ms.unwrap() + 56.0).abs() < 1e-9);
    // QRS onset of the first beat is 2 samples (8 ms) late; T end of beat 4 is 200 ms
    // early, beyond the 150 ms window: a miss and (T exhaustive) a false positive.
    let g = r.global.as_ref().unwrap();
    let te = g.fiducial(Fiducial::TEnd).unwrap();
    assert_eq!((te.tp, te.fn_, te.fp), (3, 1, 1));
    let qo = g.fiducial(Fiducial::QrsOn).unwrap();
    assert!((qo.stats.mean_ms.unwrap() - 2.0).abs() < 1e-9); // (8 + 0 + 0 + 0) / 4
                                                             // Stability over records: one record, so every resample is that record and
                                                             // the interval has no width; the default draw is recorded with it.
    let st = qo.stability.as_ref().unwrap();
    assert_eq!(
        (st.bootstrap.replicates, st.bootstrap.seed),
        (
            tendline_evaluate::stability::REPLICATES,
            tendline_evaluate::stability::SEED
        )
    );
    let [lo, hi] = st.bootstrap.mean_ci_ms.unwrap();
    assert!((lo - 2.0).abs() < 1e-9 && (hi - 2.0).abs() < 1e-9);
    assert_eq!((st.odd.records, st.even.records), (1, 0));
    // A chosen draw is used and recorded.
    let r2 = validate(&ValidateOptions {
        run_dir: run.path().into(),
        data_dir: data.path().into(),
        worst_beats: 0,
        resampling: tendline_evaluate::stability::Resampling {
            replicates: 300,
            seed: 9,
        },
        ..Default::default()
    })
    .unwrap();
    let b = &r2
        .global
        .as_ref()
        .unwrap()
        .fiducial(Fiducial::QrsOn)
        .unwrap();
    let b = &b.stability.as_ref().unwrap().bootstrap;
    assert_eq!((b.replicates, b.seed), (300, 9));
}

#[test]
fn hand_made_per_lead_record_tpe_and_dispersion() {
    // Two lead files (I, II) at 250 Hz, three beats each in 0..2.1 s. Built with
    // `beat` (T peak q+60, T end q+qt-10): lead I with QT 100 samples (Tp-e 30
    // samples = 120 ms), lead II with QT 110, 112, 114 (Tp-e 40, 42, 44 samples =
    // 160, 168, 176 ms; mean 168 ms). The window's QT lead is II and the tool
    // reports Tp-e 170 ms: +2 ms against lead II (not the 120 ms of lead I).
    let data = tempfile::tempdir().unwrap();
    let run = tempfile::tempdir().unwrap();
    let ann = run.path().join("annotations");
    std::fs::create_dir_all(&ann).unwrap();
    std::fs::write(
        data.path().join("r2.hea"),
        "r2 2 250 1000\nr2.dat 16 200 16 0 0 0 0 I\nr2.dat 16 200 16 0 0 0 0 II\n",
    )
    .unwrap();
    let (mut l1, mut l2) = (Vec::new(), Vec::new());
    for (k, qt) in [110, 112, 114].into_iter().enumerate() {
        let q = 100 + 200 * k as i64;
        l1.extend(beat(q, 100));
        l2.extend(beat(q, qt));
    }
    write_ann(data.path(), "r2", "i", &l1);
    write_ann(data.path(), "r2", "ii", &l2);
    write_ann(&ann, "r2", "mark", &l2);
    let mut both: Vec<Annotation> = Vec::new();
    for (chan, v) in [(0u8, &l1), (1u8, &l2)] {
        for &(s, y) in v.iter() {
            let mut a = Annotation::new(s, y);
            a.chan = chan;
            both.push(a);
        }
    }
    both.sort_by_key(|a| a.sample);
    write_annotations(&ann.join("r2.leadmark"), &both).unwrap();
    std::fs::write(
        run.path().join("windows.csv"),
        "record,window,start_s,end_s,qt_ms,qt_lead,qt_superimposed_ms,tpe_ms,qt_dispersion_ms\nr2,0,0,2.1,448,II,448,170,50\n",
    )
    .unwrap();
    let r = validate(&ValidateOptions {
        run_dir: run.path().into(),
        data_dir: data.path().into(),
        worst_beats: 0,
        ..Default::default()
    })
    .unwrap();
    let q = r.qt.as_ref().unwrap();
    let lt = q.window_tpe_lead_ref.as_ref().unwrap();
    assert_eq!(lt.n, 1);
    assert!((lt.bias_ms.unwrap() - 2.0).abs() < 1e-9, "{lt:?}");
    // QT dispersion: lead means 400 ms (I) and 448 ms (II) -> 48 ms; the tool's 50.
    let d = q.window_qt_dispersion_lead_ref.as_ref().unwrap();
    assert_eq!(d.n, 1);
    assert!((d.bias_ms.unwrap() - 2.0).abs() < 1e-9, "{d:?}");
}
