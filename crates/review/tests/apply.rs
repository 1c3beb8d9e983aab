//! Import of corrections into a real run directory (the demo fixture): validation of
//! every kind of bad entry, all-or-nothing, and the recomputed QT/QTc of a round trip.

mod common;

use serde_json::json;
use std::path::{Path, PathBuf};
use tendline_review::{apply_corrections, ProblemKind, ReviewError};
use tendline_store::{Attr, Data, Group};

fn i64s(g: &Group, path: &str) -> Vec<i64> {
    let (dir, name) = path.rsplit_once('/').unwrap();
    let mut g = g;
    for s in dir.split('/') {
        g = &g.groups[s];
    }
    match &g.datasets[name].data {
        Data::I64(v) => v.clone(),
        d => panic!("{path}: {d:?}"),
    }
}

fn f64s(g: &Group, path: &str) -> Vec<f64> {
    let (dir, name) = path.rsplit_once('/').unwrap();
    let mut g = g;
    for s in dir.split('/') {
        g = &g.groups[s];
    }
    match &g.datasets[name].data {
        Data::F64(v) => v.clone(),
        d => panic!("{path}: {d:?}"),
    }
}

fn texts(g: &Group, path: &str) -> Vec<String> {
    let (dir, name) = path.rsplit_once('/').unwrap();
    let mut g = g;
    for s in dir.split('/') {
        g = &g.groups[s];
    }
    match &g.datasets[name].data {
        Data::Text(v) => v.clone(),
        d => panic!("{path}: {d:?}"),
    }
}

fn write_file(dir: &Path, changes: serde_json::Value) -> PathBuf {
    let p = dir.join("corrections.json");
    let doc = json!({"format": "tendline-corrections", "version": 1, "changes": changes});
    std::fs::write(&p, serde_json::to_vec_pretty(&doc).unwrap()).unwrap();
    p
}

/// Automatic median-beat mark of `lead` (index) in window 0 of s06_base.
fn auto_mark(run: &Path, fiducial: &str, lead: usize) -> i64 {
    let p = common::load_part(run, "s06_base");
    i64s(&p.group, &format!("windows/medians/000/marks/{fiducial}"))[lead]
}

fn good(run: &Path) -> serde_json::Value {
    good_lead(run, "V2", 7)
}

fn good_lead(run: &Path, lead: &str, index: usize) -> serde_json::Value {
    json!({"record": "s06_base", "window": 0, "lead": lead, "fiducial": "t_end",
           "old_sample": auto_mark(run, "t_end", index), "new_sample": auto_mark(run, "t_end", index) + 10,
           "reason": "T end too early", "who": "Dr Test", "when": "2026-12-02T08:00:00Z"})
}

fn problems(e: ReviewError) -> Vec<(usize, ProblemKind)> {
    match e {
        ReviewError::Corrections { problems, .. } => {
            problems.iter().map(|p| (p.index, p.kind)).collect()
        }
        e => panic!("expected a validation error, got {e}"),
    }
}

fn snapshot(run: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut v: Vec<(PathBuf, Vec<u8>)> = std::fs::read_dir(run.join("parts"))
        .unwrap()
        .map(|e| {
            let p = e.unwrap().path();
            let b = std::fs::read(&p).unwrap();
            (p, b)
        })
        .collect();
    v.sort();
    v
}

#[test]
fn each_kind_of_bad_entry_is_named_and_nothing_changes() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let before = snapshot(&run);
    let g = good(&run);
    let with = |k: &str, v: serde_json::Value| {
        let mut e = g.clone();
        e[k] = v;
        e
    };
    let old = g["old_sample"].as_i64().unwrap();
    let mut no_who = g.clone();
    no_who.as_object_mut().unwrap().remove("who");
    let cases = vec![
        (with("record", json!("nope")), ProblemKind::UnknownRecord),
        (with("window", json!(7)), ProblemKind::UnknownWindow),
        (with("window", json!(-1)), ProblemKind::UnknownWindow),
        (with("lead", json!("V7")), ProblemKind::UnknownLead),
        (
            with("fiducial", json!("u_end")),
            ProblemKind::UnknownFiducial,
        ),
        (with("kind", json!("erase")), ProblemKind::UnknownKind),
        (
            with("old_sample", json!(old + 1)),
            ProblemKind::OldSampleMismatch,
        ),
        (
            with("new_sample", json!(100_000)),
            ProblemKind::SampleOutOfRange,
        ),
        (with("new_sample", json!(-5)), ProblemKind::SampleOutOfRange),
        (with("when", json!("yesterday")), ProblemKind::BadTime),
        (no_who, ProblemKind::MissingWho),
    ];
    for (entry, kind) in cases {
        // A good entry first (another lead): a bad second entry must stop it too.
        let f = write_file(tmp.path(), json!([good_lead(&run, "V3", 8), entry.clone()]));
        let e = apply_corrections(&run, &f, None).unwrap_err();
        let msg = e.to_string();
        assert_eq!(problems(e), vec![(1, kind)], "{entry}: {msg}");
        assert!(msg.contains("entry 1"), "{msg}");
        assert_eq!(snapshot(&run), before, "{kind:?} changed the run");
        assert!(!run.join("corrections-report.md").exists());
    }
    // Duplicate: the same mark twice.
    let f = write_file(tmp.path(), json!([g.clone(), g.clone()]));
    assert_eq!(
        problems(apply_corrections(&run, &f, None).unwrap_err()),
        vec![(1, ProblemKind::Duplicate)]
    );
    // Several bad entries are all reported at once.
    let f = write_file(
        tmp.path(),
        json!([
            with("lead", json!("X")),
            g.clone(),
            with("record", json!("y"))
        ]),
    );
    assert_eq!(
        problems(apply_corrections(&run, &f, None).unwrap_err()),
        vec![
            (0, ProblemKind::UnknownLead),
            (2, ProblemKind::UnknownRecord)
        ]
    );
    // A file that is not a corrections file at all.
    let p = tmp.path().join("bad.json");
    std::fs::write(&p, br#"{"format":"other","version":1,"changes":[]}"#).unwrap();
    assert!(matches!(
        apply_corrections(&run, &p, Some("x")),
        Err(ReviewError::Invalid { .. })
    ));
    assert_eq!(snapshot(&run), before);
}

#[test]
fn moving_t_end_ten_samples_recomputes_qt_and_qtc() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let p0 = common::load_part(&run, "s06_base");
    let g0 = &p0.group;
    let fs = match g0.attrs["fs"] {
        Attr::Float(f) => f,
        _ => panic!(),
    };
    assert_eq!(fs, 500.0);
    // The fixture's window 0 QT comes from V2 (longest-lead rule).
    assert_eq!(texts(g0, "windows/qt_lead")[0], "V2");
    let qt0 = f64s(g0, "windows/qt_ms")[0];
    let lead_qt0 = f64s(g0, "windows/medians/000/qt_ms")[7];
    assert_eq!(qt0, lead_qt0);
    let rr_ms = f64s(g0, "windows/rr_ms")[0];
    let t_end0 = auto_mark(&run, "t_end", 7);

    let f = write_file(tmp.path(), json!([good(&run)]));
    let rep = apply_corrections(&run, &f, Some("Importer")).unwrap();
    assert_eq!(rep.n_changes, 1);
    assert_eq!(rep.windows.len(), 1);

    let p = common::load_part(&run, "s06_base");
    let g = &p.group;
    assert_eq!(p.key, p0.key, "the part key must not change");
    // +10 samples at 500 Hz = +20 ms (ms = samples / fs · 1000).
    let lead_qt = f64s(g, "windows/medians/000/corrected/qt_ms")[7];
    assert!(
        (lead_qt - (lead_qt0 + 20.0)).abs() < 1e-9,
        "{lead_qt} vs {lead_qt0}"
    );
    let qt = f64s(g, "windows/qt_ms")[0];
    assert!(
        (qt - (qt0 + 20.0)).abs() < 1e-9,
        "window QT {qt}, was {qt0}"
    );
    assert_eq!(texts(g, "windows/qt_lead")[0], "V2");
    // Fridericia 1920 (Acta Med Scand 53:469): QTc = QT / RR^(1/3), RR in seconds.
    let qtcf = f64s(g, "windows/qtc_fridericia_ms")[0];
    let want = qt / (rr_ms / 1000.0).powf(1.0 / 3.0);
    assert!((qtcf - want).abs() < 1e-6, "{qtcf} vs {want}");
    // Bazett 1920 (Heart 7:353): QTc = QT / RR^(1/2).
    let qtcb = f64s(g, "windows/qtc_bazett_ms")[0];
    assert!((qtcb - qt / (rr_ms / 1000.0).sqrt()).abs() < 1e-6);
    // Sagie et al. 1992 (Framingham): QT + 154·(1 − RR).
    let qtcfr = f64s(g, "windows/qtc_framingham_ms")[0];
    assert!((qtcfr - (qt + 154.0 * (1.0 - rr_ms / 1000.0))).abs() < 1e-6);
    // Hodges et al. 1983 (from memory): QT + 1.75·(HR − 60).
    let qtch = f64s(g, "windows/qtc_hodges_ms")[0];
    assert!((qtch - (qt + 1.75 * (60_000.0 / rr_ms - 60.0))).abs() < 1e-6);
    // The run prefers Fridericia.
    assert_eq!(f64s(g, "windows/qtc_ms")[0], qtcf);
    // T peak to T end lies on the QT lead (V2): the moved T end lengthens it by
    // the same 20 ms, unless the automatic T end moved a lead's QT out of the
    // dispersion's span.
    let tpe0 = f64s(g0, "windows/tpe_ms")[0];
    assert!(tpe0.is_finite() && tpe0 > 0.0, "fixture Tp-e {tpe0}");
    let tpe = f64s(g, "windows/tpe_ms")[0];
    assert!((tpe - (tpe0 + 20.0)).abs() < 1e-9, "Tp-e {tpe}, was {tpe0}");
    assert_eq!(f64s(g, "windows/auto/tpe_ms")[0], tpe0);
    // Dispersion: longest minus shortest valid lead QT, recomputed from the
    // corrected per-lead QTs.
    let lead_qts = f64s(g, "windows/medians/000/corrected/qt_ms");
    let n_valid = i64s(g, "windows/qt_valid_leads")[0];
    assert!(n_valid >= 3, "fixture has {n_valid} valid leads");
    let disp = f64s(g, "windows/qt_dispersion_ms")[0];
    let longest = f64s(g, "windows/qt_longest_ms")[0];
    let shortest = lead_qts
        .iter()
        .copied()
        .filter(|q| q.is_finite())
        .fold(f64::INFINITY, f64::min);
    assert!(
        disp <= longest - shortest + 1e-9,
        "{disp} vs {longest} - {shortest}"
    );
    // Automatic values are kept.
    assert_eq!(f64s(g, "windows/auto/qt_ms")[0], qt0);
    assert_eq!(
        f64s(g, "windows/auto/qtc_fridericia_ms")[0],
        f64s(g0, "windows/qtc_fridericia_ms")[0]
    );
    assert_eq!(i64s(g, "windows/medians/000/marks/t_end")[7], t_end0);
    assert_eq!(f64s(g, "windows/medians/000/qt_ms")[7], lead_qt0);
    assert_eq!(
        i64s(g, "windows/medians/000/corrected/marks/t_end")[7],
        t_end0 + 10
    );
    // Other leads of the corrected dataset keep their automatic marks.
    let auto_all = i64s(g, "windows/medians/000/marks/t_end");
    let corr_all = i64s(g, "windows/medians/000/corrected/marks/t_end");
    assert_eq!(
        auto_all
            .iter()
            .zip(&corr_all)
            .filter(|(a, b)| a != b)
            .count(),
        1
    );
    // Flags and classification.
    assert!(texts(g, "windows/flags")[0]
        .split(';')
        .any(|f| f == "corrected"));
    let class = texts(g, "windows/classification")[0].clone();
    assert!(class.contains(&format!("QTc {:.0} ms", qtcf)), "{class}");
    // Record summary follows the (single) window.
    match &g.attrs["qtc_ms"] {
        Attr::Float(v) => assert!((v - qtcf).abs() < 1e-9),
        a => panic!("{a:?}"),
    }
    assert!(
        matches!(&g.groups["windows"].groups["auto"].attrs["qtc_ms"], Attr::Float(v) if (v - f64s(g0, "windows/qtc_ms")[0]).abs() < 1e-9)
    );
    // Audit table.
    assert_eq!(texts(g, "corrections/record"), vec!["s06_base"]);
    assert_eq!(texts(g, "corrections/lead"), vec!["V2"]);
    assert_eq!(texts(g, "corrections/fiducial"), vec!["t_end"]);
    assert_eq!(i64s(g, "corrections/old_sample"), vec![t_end0]);
    assert_eq!(i64s(g, "corrections/new_sample"), vec![t_end0 + 10]);
    assert_eq!(texts(g, "corrections/who"), vec!["Dr Test"]);
    assert_eq!(texts(g, "corrections/when"), vec!["2026-12-02T08:00:00Z"]);
    assert_eq!(texts(g, "corrections/reason"), vec!["T end too early"]);
    assert_eq!(texts(g, "corrections/applied_by"), vec!["Importer"]);
    // The untouched record is untouched.
    let other = std::fs::read(run.join("parts/s08_post.json")).unwrap();
    assert_eq!(
        other,
        std::fs::read(Path::new(common::FIXTURE).join("parts/s08_post.json")).unwrap()
    );
    // Report.
    let md = std::fs::read_to_string(&rep.report).unwrap();
    assert!(md.contains(&format!("{:.0} ms (V2)", qt)), "{md}");
    assert!(md.contains("T end too early"));

    // A second import against the same automatic mark: the automatic copies stay those of
    // the original run, the audit table grows.
    let mut e = good(&run);
    e["new_sample"] = json!(t_end0 + 5);
    e["reason"] = json!("second look");
    let f = write_file(tmp.path(), json!([e]));
    apply_corrections(&run, &f, Some("Importer")).unwrap();
    let g = common::load_part(&run, "s06_base").group;
    assert_eq!(f64s(&g, "windows/auto/qt_ms")[0], qt0);
    assert!((f64s(&g, "windows/qt_ms")[0] - (qt0 + 10.0)).abs() < 1e-9);
    assert_eq!(
        texts(&g, "corrections/reason"),
        vec!["T end too early", "second look"]
    );
}

#[test]
fn unreadable_window_has_no_qt() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let f = write_file(
        tmp.path(),
        json!([{"kind": "unreadable", "record": "s08_post", "window": 0, "lead": "global",
                "fiducial": "window", "old_sample": null, "new_sample": null, "reason": "noise"}]),
    );
    // No author anywhere: the importer's name is used.
    let rep = apply_corrections(&run, &f, Some("Dr Import")).unwrap();
    assert!(rep.windows[0].unreadable);
    let g = common::load_part(&run, "s08_post").group;
    for c in [
        "qt_ms",
        "qtc_bazett_ms",
        "qtc_fridericia_ms",
        "qtc_framingham_ms",
        "qtc_hodges_ms",
        "qtc_ms",
        "jt_ms",
        "p_ms",
        "tpe_ms",
        "qt_dispersion_ms",
    ] {
        assert!(f64s(&g, &format!("windows/{c}"))[0].is_nan(), "{c}");
    }
    assert!(f64s(&g, "windows/auto/qt_ms")[0].is_finite());
    assert!(f64s(&g, "windows/rr_ms")[0].is_finite());
    assert_eq!(texts(&g, "windows/qtc_flag")[0], "unknown");
    let flags = texts(&g, "windows/flags")[0].clone();
    assert!(
        flags.contains("unreadable_reader") && flags.contains("corrected"),
        "{flags}"
    );
    assert_eq!(texts(&g, "corrections/who"), vec!["Dr Import"]);
    assert!(matches!(&g.attrs["qtc_flag"], Attr::Text(t) if t == "unknown"));
    // An unreadable entry with a lead is refused.
    let f = write_file(
        tmp.path(),
        json!([{"kind": "unreadable", "record": "s06_base", "window": 0, "lead": "V3",
                "fiducial": "window", "old_sample": null, "new_sample": null, "who": "x"}]),
    );
    assert!(apply_corrections(&run, &f, None).is_err());
}

#[test]
fn corrected_part_still_writes_to_hdf5() {
    // The lead's CLI rebuilds results.h5 from the parts after an import: the new groups
    // (windows/auto, corrected/, corrections/) must be writable by the store.
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let f = write_file(tmp.path(), json!([good(&run)]));
    apply_corrections(&run, &f, Some("x")).unwrap();
    let p = common::load_part(&run, "s06_base");
    let mut root = Group::default();
    root.group("records")
        .groups
        .insert(p.record.clone(), p.group);
    let h5 = tmp.path().join("results.h5");
    tendline_store::write_results(&h5, &root).unwrap();
    assert!(std::fs::metadata(&h5).unwrap().len() > 10_000);
    if let Some(dir) = std::env::var_os("REVIEW_KEEP_H5") {
        std::fs::copy(&h5, std::path::Path::new(&dir).join("corrected.h5")).unwrap();
    }
}

/// Global per-beat mark `fiducial` of beat `b` in s06_base.
fn beat_mark(run: &Path, fiducial: &str, b: usize) -> i64 {
    let p = common::load_part(run, "s06_base");
    i64s(&p.group, &format!("marks/global/{fiducial}"))[b]
}

fn annotations(path: &Path) -> Vec<(i64, String, Option<String>)> {
    tendline_formats::annotation::read_annotations(path)
        .unwrap()
        .iter()
        .map(|a| (a.sample, a.symbol().to_string(), a.aux_text()))
        .collect()
}

#[test]
fn beat_corrections_rewrite_the_annotation_files_and_keep_the_automatic_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let t_end = beat_mark(&run, "t_end", 3);
    assert!(t_end > 0, "fixture beat 3 has a T end");
    let f = write_file(
        tmp.path(),
        json!([
            {"kind": "beat_mark", "record": "s06_base", "beat": 3, "lead": "global",
             "fiducial": "t_end", "old_sample": t_end, "new_sample": t_end + 12,
             "reason": "T end early", "who": "Dr Test"},
            {"kind": "beat_unreadable", "record": "s06_base", "beat": 5, "lead": "global",
             "fiducial": "beat", "reason": "artefact", "who": "Dr Test"},
        ]),
    );
    let rep = apply_corrections(&run, &f, None).unwrap();
    assert_eq!(rep.n_changes, 2);
    assert_eq!(rep.annotations.len(), 2);
    let g = common::load_part(&run, "s06_base").group;
    // Automatic marks untouched, corrected beside them.
    assert_eq!(i64s(&g, "marks/global/t_end")[3], t_end);
    assert_eq!(i64s(&g, "marks/corrected/global/t_end")[3], t_end + 12);
    let bad = i64s(&g, "beats/unreadable_reader");
    assert_eq!(bad.iter().filter(|&&u| u != 0).count(), 1);
    assert_eq!(bad[5], 1);
    // The window holding beat 5 says so; its QT is not recomputed.
    let peak5 = i64s(&g, "beats/qrs_peak")[5] as f64 / 500.0;
    let starts = f64s(&g, "windows/start_s");
    let w = starts.iter().rposition(|&s| s <= peak5).unwrap();
    assert!(texts(&g, "windows/flags")[w]
        .split(';')
        .any(|f| f == "beat_unreadable_reader"));
    assert_eq!(
        texts(&g, "corrections/kind"),
        ["beat_mark", "beat_unreadable"]
    );
    assert_eq!(i64s(&g, "corrections/beat"), [3, 5]);

    let ann = run.join("annotations");
    let cur = annotations(&ann.join("s06_base.mark"));
    let auto = annotations(&ann.join("auto/s06_base.mark"));
    // The automatic file has the run's T end (with its method), the current one the
    // reader's value with the aux text `reader`.
    assert!(auto.iter().any(|a| a.0 == t_end && a.1 == ")"));
    assert!(cur
        .iter()
        .any(|a| a.0 == t_end + 12 && a.1 == ")" && a.2.as_deref() == Some("reader")));
    assert!(!cur.iter().any(|a| a.0 == t_end && a.1 == ")"));
    // Beat 5 keeps only its QRS mark, as `Q` (unclassifiable beat, WFDB code table).
    // (The detector may label other beats `Q` itself, without this aux text.)
    let q: Vec<_> = cur
        .iter()
        .filter(|a| a.1 == "Q" && a.2.as_deref() == Some("unreadable (reader)"))
        .collect();
    assert_eq!(q.len(), 1);
    // At the delineated QRS peak, as in the run's files.
    assert_eq!(q[0].0, beat_mark(&run, "qrs_peak", 5));
    // Beat 5's P and T waves are in the automatic file only.
    for (fid, sym) in [("p_peak", "p"), ("t_peak", "t")] {
        let k = beat_mark(&run, fid, 5);
        if k >= 0 {
            assert!(auto.iter().any(|a| a.0 == k && a.1 == sym));
            assert!(!cur.iter().any(|a| a.0 == k && a.1 == sym));
        }
    }
    assert!(auto.len() > cur.len());
    // Leads file rewritten too; channels kept.
    let leads =
        tendline_formats::annotation::read_annotations(&ann.join("s06_base.leadmark")).unwrap();
    assert!(leads.iter().any(|a| a.chan > 0));
    assert!(leads
        .iter()
        .any(|a| a.aux_text().as_deref() == Some("unreadable (reader)")));

    // A second import keeps the first automatic files.
    let auto_bytes = std::fs::read(ann.join("auto/s06_base.mark")).unwrap();
    let f2 = write_file(
        tmp.path(),
        json!([{"kind": "beat_unreadable", "record": "s06_base", "beat": 6, "lead": "global",
                "fiducial": "beat", "reason": "artefact", "who": "Dr Test"}]),
    );
    apply_corrections(&run, &f2, None).unwrap();
    assert_eq!(
        std::fs::read(ann.join("auto/s06_base.mark")).unwrap(),
        auto_bytes
    );
    let cur2 = annotations(&ann.join("s06_base.mark"));
    assert_eq!(
        cur2.iter()
            .filter(|a| a.2.as_deref() == Some("unreadable (reader)"))
            .count(),
        2
    );
}

#[test]
fn bad_beat_entries_are_named_and_nothing_changes() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let before = snapshot(&run);
    let t_end = beat_mark(&run, "t_end", 3);
    let n_beats = i64s(&common::load_part(&run, "s06_base").group, "beats/qrs_peak").len();
    let e = |beat: serde_json::Value, lead: &str, old: i64, new: i64| {
        json!({"kind": "beat_mark", "record": "s06_base", "beat": beat, "lead": lead,
               "fiducial": "t_end", "old_sample": old, "new_sample": new, "who": "Dr Test"})
    };
    let f = write_file(
        tmp.path(),
        json!([
            e(json!(n_beats), "global", t_end, t_end),
            e(json!(null), "global", t_end, t_end),
            e(json!(3), "V9", t_end, t_end),
            e(json!(3), "global", t_end + 1, t_end),
            e(json!(2), "global", beat_mark(&run, "t_end", 2), 10_000_000),
            {"kind": "beat_unreadable", "record": "s06_base", "beat": 2, "lead": "I",
             "fiducial": "beat", "who": "Dr Test"},
            e(json!(4), "global", beat_mark(&run, "t_end", 4), 5),
        ]),
    );
    let err = apply_corrections(&run, &f, None).unwrap_err();
    assert_eq!(
        problems(err),
        vec![
            (0, ProblemKind::UnknownBeat),
            (1, ProblemKind::UnknownBeat),
            (2, ProblemKind::UnknownLead),
            (3, ProblemKind::OldSampleMismatch),
            (4, ProblemKind::SampleOutOfRange),
            (5, ProblemKind::UnknownLead),
        ]
    );
    assert_eq!(snapshot(&run), before);
    assert!(!run.join("annotations").exists());
}

#[test]
fn csv_corrections_apply_like_json() {
    let tmp = tempfile::tempdir().unwrap();
    let run = common::run_dir(tmp.path());
    let old = auto_mark(&run, "t_end", 8);
    let t_end = beat_mark(&run, "t_end", 3);
    let csv = tmp.path().join("corrections.csv");
    std::fs::write(
        &csv,
        format!(
            "record,window,beat,lead,fiducial,old_sample,new_sample,reason,who,kind\n\
             s06_base,0,,V3,t_end,{old},{},\"late, on the U wave\",Dr Csv,mark\n\
             s06_base,,3,global,t_end,{t_end},{},,Dr Csv,beat_mark\n",
            old + 10,
            t_end - 4
        ),
    )
    .unwrap();
    let rep = apply_corrections(&run, &csv, None).unwrap();
    assert_eq!(rep.n_changes, 2);
    let g = common::load_part(&run, "s06_base").group;
    assert_eq!(
        i64s(&g, "windows/medians/000/corrected/marks/t_end")[8],
        old + 10
    );
    assert_eq!(i64s(&g, "marks/corrected/global/t_end")[3], t_end - 4);
    assert_eq!(texts(&g, "corrections/reason")[0], "late, on the U wave");
    assert_eq!(texts(&g, "corrections/who"), ["Dr Csv", "Dr Csv"]);
    // A bad CSV names the column and changes nothing.
    let before = snapshot(&run);
    std::fs::write(&csv, "record,lead,fiducial,colour\ns06_base,V3,t_end,red\n").unwrap();
    let e = apply_corrections(&run, &csv, None).unwrap_err().to_string();
    assert!(e.contains("colour") && e.contains("corrections.csv"), "{e}");
    assert_eq!(snapshot(&run), before);
}
