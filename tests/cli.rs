//! End-to-end tests of the real `tendline` binary in temporary folders:
//! batch isolation, exit codes, resume, configuration errors, outputs.
//!
//! Records come from `../shared/data/ludb` (LUDB 1.0.1, Kalyakulina et al. 2020).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tendline"))
}

fn data() -> PathBuf {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../../shared/data");
    assert!(
        p.is_dir(),
        "reference data missing at {} (see README)",
        p.display()
    );
    p
}

fn copy_ludb(dir: &Path, rec: &str) {
    for ext in ["hea", "dat"] {
        std::fs::copy(
            data().join(format!("ludb/{rec}.{ext}")),
            dir.join(format!("{rec}.{ext}")),
        )
        .unwrap();
    }
}

/// `tendline run <inputs>... --out <out> --quiet`.
fn run_quiet(inputs: &[PathBuf], out: &Path) -> Output {
    bin()
        .arg("run")
        .args(inputs)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .output()
        .unwrap()
}

fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

#[test]
fn bad_record_fails_alone_and_sets_exit_code() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    copy_ludb(inp.path(), "2");
    // A truncated signal file: the header promises 5000 frames of 12 signals.
    std::fs::copy(data().join("ludb/3.hea"), inp.path().join("3.hea")).unwrap();
    let dat = std::fs::read(data().join("ludb/3.dat")).unwrap();
    std::fs::write(inp.path().join("3.dat"), &dat[..dat.len() / 3]).unwrap();
    // A CSV with a NaN cell.
    std::fs::write(
        inp.path().join("nan.csv"),
        "# fs=500\nI,II\n0.1,0.2\nNaN,0.3\n",
    )
    .unwrap();

    let o = bin()
        .arg("run")
        .arg(inp.path())
        .arg("--out")
        .arg(out.path())
        .output()
        .unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains("2 record(s) failed"), "{t}");
    let failures = std::fs::read_to_string(out.path().join("failures.csv")).unwrap();
    assert!(
        failures.contains("3,") && failures.contains("3.dat"),
        "{failures}"
    );
    assert!(
        failures.contains("nan,") && failures.contains("nan.csv"),
        "{failures}"
    );
    for rec in ["1", "2"] {
        assert!(out.path().join(format!("annotations/{rec}.mark")).is_file());
        assert!(out
            .path()
            .join(format!("annotations/{rec}.leadmark"))
            .is_file());
    }
    assert!(!out.path().join("annotations/3.mark").exists());
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    assert_eq!(summary.lines().count(), 3, "{summary}");
    assert!(out.path().join("results.h5").is_file());
    assert_no_temporaries(out.path());
}

#[test]
fn record_whose_output_cannot_be_put_in_place_fails_alone() {
    // The record's annotation file is made durable and renamed into place after
    // processing, off the worker threads; a failure there (here: a folder sits
    // where `2.leadmark` must go) must still fail that record alone, keep it out
    // of results.h5 and the tables, write no part file for it, and leave no
    // temporary file behind.
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    copy_ludb(inp.path(), "2");
    std::fs::create_dir_all(out.path().join("annotations/2.leadmark/blocker")).unwrap();
    let o = run_quiet(&[inp.path().into()], out.path());
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains("1 record(s) failed"), "{t}");
    let failures = std::fs::read_to_string(out.path().join("failures.csv")).unwrap();
    assert!(
        failures.contains("2,") && failures.contains("2.leadmark"),
        "{failures}"
    );
    assert!(out.path().join("parts/1.json").is_file());
    assert!(!out.path().join("parts/2.json").exists());
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    assert_eq!(summary.lines().count(), 2, "{summary}");
    assert!(
        summary.lines().nth(1).unwrap().starts_with("1,"),
        "{summary}"
    );
    assert_no_temporaries(out.path());
}

/// No temporary file (`.<name>.tmp-…`) is left anywhere below `out`.
fn assert_no_temporaries(out: &Path) {
    let leftovers: Vec<_> = walk(out)
        .into_iter()
        .filter(|p| p.to_string_lossy().contains(".tmp-"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

fn walk(d: &Path) -> Vec<PathBuf> {
    let mut v = Vec::new();
    for e in std::fs::read_dir(d).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            v.extend(walk(&p));
        } else {
            v.push(p);
        }
    }
    v
}

#[test]
fn rerun_reuses_complete_records_and_force_redoes_them() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "4");
    let run = |extra: &[&str]| {
        let o = bin()
            .arg("run")
            .arg(inp.path())
            .arg("--out")
            .arg(out.path())
            .args(extra)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", text(&o));
        std::fs::read_to_string(out.path().join("run.json")).unwrap()
    };
    let first = run(&[]);
    assert!(first.contains("\"status\": \"done\""), "{first}");
    // Time by stage: six stages, none negative, together within the record's
    // own wall time (one chunk: the stages run one after the other), and the
    // run's totals are the sum over the records processed.
    let stages = [
        "read",
        "condition",
        "detect",
        "delineate",
        "measure",
        "assemble",
    ];
    let json: serde_json::Value = serde_json::from_str(&first).unwrap();
    let rec = &json["records"][0];
    let per: Vec<f64> = stages
        .iter()
        .map(|k| rec["stage_seconds"][k].as_f64().unwrap())
        .collect();
    assert!(per.iter().all(|&v| v >= 0.0), "{rec}");
    let wall: f64 = rec["detail"]
        .as_str()
        .unwrap()
        .trim_end_matches(" s")
        .parse()
        .unwrap();
    assert!(per.iter().sum::<f64>() <= wall + 0.002, "{rec}");
    assert!(
        per[2] > 0.0 && per[3] > 0.0,
        "detection and delineation took no time: {rec}"
    );
    for (k, v) in stages.iter().zip(&per) {
        let total = json["stage_seconds"][k].as_f64().unwrap();
        assert!((total - v).abs() < 1e-9, "{k}: {total} vs {v}");
    }
    let mark = std::fs::read(out.path().join("annotations/4.mark")).unwrap();
    let second = run(&[]);
    assert!(second.contains("\"status\": \"reused\""), "{second}");
    // Nothing was processed again: no stage time.
    let json: serde_json::Value = serde_json::from_str(&second).unwrap();
    assert!(
        json["records"][0].get("stage_seconds").is_none(),
        "{second}"
    );
    assert!(stages
        .iter()
        .all(|k| json["stage_seconds"][k].as_f64() == Some(0.0)));
    assert_eq!(
        std::fs::read(out.path().join("annotations/4.mark")).unwrap(),
        mark
    );
    // A changed parameter changes the key: the record is redone.
    let changed = run(&["--set", "measure.window_s=5"]);
    assert!(changed.contains("\"status\": \"done\""), "{changed}");
    let forced = run(&["--set", "measure.window_s=5", "--force"]);
    assert!(forced.contains("\"status\": \"done\""), "{forced}");
}

#[test]
fn config_errors_name_key_allowed_values_and_close_match() {
    let d = tempfile::tempdir().unwrap();
    let cfg = d.path().join("p.toml");
    std::fs::write(&cfg, "[detect]\nrefractry_ms = 200\n").unwrap();
    let o = bin()
        .args(["config", "--config"])
        .arg(&cfg)
        .output()
        .unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(2), "{t}");
    assert!(
        t.contains("detect.refractry_ms") && t.contains("detect.refractory_ms"),
        "{t}"
    );
    let o = bin()
        .args(["config", "--set", "detect.refractory_ms=-5"])
        .output()
        .unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(2), "{t}");
    assert!(
        t.contains("detect.refractory_ms") && t.contains("got -5"),
        "{t}"
    );
}

#[test]
fn missing_input_and_escaping_records_list_are_rejected() {
    let d = tempfile::tempdir().unwrap();
    let o = bin()
        .args(["run", "no/such/record", "--out"])
        .arg(d.path().join("o"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(text(&o).contains("no/such/record"), "{}", text(&o));
    std::fs::write(d.path().join("RECORDS"), "../../etc/passwd\n").unwrap();
    let o = bin()
        .arg("run")
        .arg(d.path().join("RECORDS"))
        .arg("--out")
        .arg(d.path().join("o"))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(text(&o).contains("leaves"), "{}", text(&o));
}

#[test]
fn unresolvable_inputs_fail_alone_and_same_file_twice_runs_once() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    // Another file with the record name `1`: flagged, not read.
    std::fs::write(inp.path().join("1.edf"), b"not read").unwrap();
    std::fs::write(inp.path().join("RECORDS"), "1\nmissing\n../up\n").unwrap();
    let o = run_quiet(
        &[
            inp.path().join("RECORDS"),
            inp.path().join("1.hea"), // the same file again
            inp.path().join("1.edf"),
        ],
        out.path(),
    );
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains("3 record(s) failed"), "{t}");
    let failures = std::fs::read_to_string(out.path().join("failures.csv")).unwrap();
    for what in ["line 2", "line 3", "leaves", "already taken"] {
        assert!(failures.contains(what), "{what}: {failures}");
    }
    // Record 1 was processed once, and its outputs are complete.
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    assert_eq!(
        summary.lines().filter(|l| l.starts_with("1,")).count(),
        1,
        "{summary}"
    );
    assert!(out.path().join("annotations/1.leadmark").is_file());
    assert_no_temporaries(out.path());
}

#[test]
fn non_ecg_signals_and_missing_samples() {
    // v102s (PhysioNet/Computing in Cardiology Challenge 2015 record, in the
    // WFDB conformance set): II, V, PLETH, RESP at 250 Hz, with invalid
    // (missing) samples in every signal; `wfdb.rdrecord` reads 3, 2, 17 and 1
    // of them as NaN (the reader's cross-check in tests/python).
    let out = tempfile::tempdir().unwrap();
    let o = run_quiet(&[data().join("wfdb-conformance/v102s.hea")], out.path());
    assert!(o.status.success(), "{}", text(&o));
    let part = tendline_store::Part::load(&out.path().join("parts/v102s.json"))
        .unwrap()
        .unwrap();
    let floats = |k: &str| match part.group.attrs.get(k) {
        Some(tendline_store::Attr::Floats(v)) => v.clone(),
        other => panic!("{k}: {other:?}"),
    };
    assert_eq!(floats("analysed"), [1.0, 1.0, 0.0, 0.0]);
    assert_eq!(floats("missing_samples"), [3.0, 2.0, 17.0, 1.0]);
    assert_eq!(floats("lead_quality")[2..], [0.0, 0.0]);
    // QT comes from ECG leads only.
    let windows = std::fs::read_to_string(out.path().join("windows.csv")).unwrap();
    let mut with_qt = 0;
    for row in windows.lines().skip(1) {
        let lead = row.split(',').nth(8).unwrap();
        assert!(["", "II", "V"].contains(&lead), "{row}");
        with_qt += usize::from(!lead.is_empty());
    }
    assert!(with_qt > 10, "{windows}");
    // No global or per-lead mark comes from the excluded signals (channels 2, 3).
    let anns = tendline_formats::annotation::read_annotations(
        &out.path().join("annotations/v102s.leadmark"),
    )
    .unwrap();
    assert!(!anns.is_empty() && anns.iter().all(|a| a.chan < 2));
}

#[test]
fn variable_layout_record_runs_whole_and_its_segments_do_not_run_alone() {
    // s25047 (MIMIC II waveform excerpt in the WFDB conformance set): a master
    // record of 19 segments (a layout, a 25740-sample gap, 17 segments whose
    // gains change) and, beside it, a numerics record with no ECG signal. Run as
    // a folder without a RECORDS list, the master is one record, its segment
    // headers are not records of their own, and the numerics record fails alone.
    let out = tempfile::tempdir().unwrap();
    let o = run_quiet(
        &[data().join("wfdb-conformance/multi-segment/s25047")],
        out.path(),
    );
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains("1 record(s) failed"), "{t}");
    let failures = std::fs::read_to_string(out.path().join("failures.csv")).unwrap();
    assert!(failures.contains("s25047-2704-05-04-10-44n,"), "{failures}");
    let parts: Vec<String> = std::fs::read_dir(out.path().join("parts"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(parts, ["s25047-2704-05-04-10-44.json"]);
    let part = tendline_store::Part::load(&out.path().join("parts/s25047-2704-05-04-10-44.json"))
        .unwrap()
        .unwrap();
    let floats = |k: &str| match part.group.attrs.get(k) {
        Some(tendline_store::Attr::Floats(v)) => v.clone(),
        other => panic!("{k}: {other:?}"),
    };
    // NaN samples per signal as `wfdb.rdrecord` reads the record (the gap, the
    // segments without ABP, the invalid samples): 26462, 25869, 445740.
    assert_eq!(floats("missing_samples"), [26462.0, 25869.0, 445740.0]);
    assert_eq!(floats("analysed"), [1.0, 1.0, 0.0]);
    // The leading null segment (25740 samples, no ECG lead) is an unreadable
    // stretch of its own, and no beat lies in it.
    let u = &part.group.groups["unreadable"];
    let (starts, ends, reasons) = match (
        &u.datasets["start"].data,
        &u.datasets["end"].data,
        &u.datasets["reason"].data,
    ) {
        (
            tendline_store::Data::I64(s),
            tendline_store::Data::I64(e),
            tendline_store::Data::Text(r),
        ) => (s.clone(), e.clone(), r.clone()),
        other => panic!("{other:?}"),
    };
    let k = reasons.iter().position(|r| r == "missing").unwrap();
    assert_eq!((starts[k], ends[k]), (0, 25740));
    match &part.group.groups["beats"].datasets["qrs_peak"].data {
        tendline_store::Data::I64(b) => assert!(b[0] >= 25740, "first beat at {}", b[0]),
        other => panic!("{other:?}"),
    }
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    let row = summary.lines().nth(1).unwrap();
    // 543240 samples at 125 Hz.
    assert!(
        row.starts_with("s25047-2704-05-04-10-44,") && row.contains(",4345.9,"),
        "{row}"
    );
}

#[test]
fn results_carry_version_config_and_input_checksums() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "5");
    let o = run_quiet(&[inp.path().into()], out.path());
    assert!(o.status.success(), "{}", text(&o));
    let part = std::fs::read_to_string(out.path().join("parts/5.json")).unwrap();
    // SHA-256 of the input files, computed here independently with the sha2 crate.
    use sha2::Digest;
    for f in ["5.hea", "5.dat"] {
        let h = hex::encode(sha2::Sha256::digest(
            std::fs::read(inp.path().join(f)).unwrap(),
        ));
        assert!(part.contains(&h), "checksum of {f} missing");
    }
    let manifest = std::fs::read_to_string(out.path().join("run.json")).unwrap();
    assert!(manifest.contains(env!("CARGO_PKG_VERSION")) && manifest.contains("config_sha256"));
}

#[test]
fn review_site_and_corrections_round_trip_through_the_binary() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../..");
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    for ext in ["hea", "dat"] {
        std::fs::copy(
            root.join(format!("demo-signals/s01_base.{ext}")),
            inp.path().join(format!("s01_base.{ext}")),
        )
        .unwrap();
    }
    let o = run_quiet(&[inp.path().into()], out.path());
    assert!(o.status.success(), "{}", text(&o));
    let o = bin().arg("review").arg(out.path()).output().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let index = std::fs::read_to_string(out.path().join("review/index.html")).unwrap();
    assert!(index.contains("s01_base"), "index lacks the record");

    // Move the QT lead's T end of window 0 by +10 samples (20 ms at 500 Hz).
    let part: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.path().join("parts/s01_base.json")).unwrap(),
    )
    .unwrap();
    let w = &part["group"]["groups"]["windows"];
    let lead_idx = w["datasets"]["qt_lead_index"]["data"]["I64"][0]
        .as_i64()
        .unwrap() as usize;
    let lead = w["datasets"]["qt_lead"]["data"]["Text"][0]
        .as_str()
        .unwrap()
        .to_string();
    let qt_before = w["datasets"]["qt_ms"]["data"]["F64"][0].as_f64().unwrap();
    let t_end = w["groups"]["medians"]["groups"]["000"]["groups"]["marks"]["datasets"]["t_end"]
        ["data"]["I64"][lead_idx]
        .as_i64()
        .unwrap();
    let corr = serde_json::json!({
        "format": "tendline-corrections", "version": 1, "who": "test reader",
        "changes": [{"kind": "mark", "record": "s01_base", "window": 0, "lead": lead,
                     "fiducial": "t_end", "old_sample": t_end, "new_sample": t_end + 10,
                     "reason": "integration test"}]
    });
    let cpath = out.path().join("corr.json");
    std::fs::write(&cpath, corr.to_string()).unwrap();
    let ann = out.path().join("annotations");
    let run_files: Vec<Vec<u8>> = ["mark", "leadmark"]
        .iter()
        .map(|e| std::fs::read(ann.join(format!("s01_base.{e}"))).unwrap())
        .collect();
    let o = bin()
        .arg("apply")
        .arg(out.path())
        .arg(&cpath)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    // The annotation files rebuilt from the part are the run's own files, byte for
    // byte: kept as the automatic copies, and unchanged by a median-beat correction.
    for (e, bytes) in ["mark", "leadmark"].iter().zip(&run_files) {
        assert_eq!(
            &std::fs::read(ann.join(format!("auto/s01_base.{e}"))).unwrap(),
            bytes
        );
        assert_eq!(
            &std::fs::read(ann.join(format!("s01_base.{e}"))).unwrap(),
            bytes
        );
    }
    let windows = std::fs::read_to_string(out.path().join("windows.csv")).unwrap();
    let row: Vec<&str> = windows.lines().nth(1).unwrap().split(',').collect();
    let head: Vec<&str> = windows.lines().next().unwrap().split(',').collect();
    let qt_after: f64 = row[head.iter().position(|h| *h == "qt_ms").unwrap()]
        .parse()
        .unwrap();
    assert!(
        (qt_after - (qt_before + 20.0)).abs() < 0.51,
        "QT {qt_before} -> {qt_after}"
    );
    assert!(out.path().join("corrections-report.md").is_file());

    // A file naming an unknown record is refused and changes nothing.
    let bad = serde_json::json!({"format": "tendline-corrections", "version": 1, "who": "x",
        "changes": [{"record": "nope", "window": 0, "lead": lead, "fiducial": "t_end",
                     "old_sample": 1, "new_sample": 2, "reason": "r"}]});
    std::fs::write(&cpath, bad.to_string()).unwrap();
    let before = std::fs::read(out.path().join("parts/s01_base.json")).unwrap();
    let o = bin()
        .arg("apply")
        .arg(out.path())
        .arg(&cpath)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("nope"), "{}", text(&o));
    assert_eq!(
        std::fs::read(out.path().join("parts/s01_base.json")).unwrap(),
        before
    );
}

/// `tendline tune` on four QT Database records (Laguna et al. 1997, `.q1c`
/// annotator 1 as reference) from a bad `delineate.t_gamma`: every output is
/// written, the tuned `pipeline.toml` loads like a hand-written one, and the
/// scores of the base configuration equal `tendline validate` on a
/// `tendline run` of the same records (same scoring code, same marks).
#[test]
fn tune_writes_a_loadable_config_and_scores_like_validate() {
    let q = data().join("qtdb");
    let recs = ["sel100", "sel103", "sel16265", "sele0106"];
    let inputs: Vec<PathBuf> = recs.iter().map(|r| q.join(r)).collect();
    let dir = tempfile::tempdir().unwrap();
    let space = dir.path().join("space.toml");
    std::fs::write(
        &space,
        "[search]\nstrategy = 'grid'\nsteps = 4\nfolds = 2\n[params.delineate]\nt_gamma = { min = 0.05, max = 0.6 }\n",
    )
    .unwrap();
    let out = dir.path().join("tune");
    let o = bin()
        .arg("tune")
        .args(&inputs)
        .arg("--space")
        .arg(&space)
        .arg("--out")
        .arg(&out)
        .args(["--set", "delineate.t_gamma=0.6", "--jobs", "2"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    for f in [
        "pipeline.toml",
        "cv.csv",
        "cv.md",
        "candidates.csv",
        "tune.html",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let cv = std::fs::read_to_string(out.join("cv.csv")).unwrap();
    let firsts: Vec<&str> = cv
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap())
        .collect();
    assert_eq!(firsts, ["1", "2", "mean", "all", "base"], "{cv}");
    let html = std::fs::read_to_string(out.join("tune.html")).unwrap();
    assert!(html.contains("<svg") && html.contains("delineate.t_gamma"));
    // The tuned config loads through the normal path and carries the tuned value.
    let o = bin()
        .arg("config")
        .arg("--config")
        .arg(out.join("pipeline.toml"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let effective = String::from_utf8_lossy(&o.stdout).to_string();
    let tuned: toml::Table = toml::from_str(&effective).unwrap();
    let g = tuned["delineate"]["t_gamma"].as_float().unwrap();
    assert!(g < 0.6, "t_gamma stayed at the bad start: {g}");

    // Base configuration (t_gamma 0.6) through run + validate.
    let cands = std::fs::read_to_string(out.join("candidates.csv")).unwrap();
    assert_scores_equal_validate(
        &cands,
        "0.6",
        &inputs,
        &q,
        &["--set", "delineate.t_gamma=0.6"],
        dir.path(),
    );

    // A typo in the space names the key and a close match; exit code 2.
    std::fs::write(
        &space,
        "[params.delineate]\nt_gama = { min = 0.05, max = 0.6 }\n",
    )
    .unwrap();
    let o = bin()
        .arg("tune")
        .args(&inputs)
        .arg("--space")
        .arg(&space)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let t = text(&o);
    assert!(
        t.contains("delineate.t_gama") && t.contains("did you mean `delineate.t_gamma`"),
        "{t}"
    );
}

/// The candidate whose tuned value is `value` in `candidates.csv` scores like
/// `tendline run` + `tendline validate --reference global` on the same records.
fn assert_scores_equal_validate(
    cands: &str,
    value: &str,
    inputs: &[PathBuf],
    data_dir: &Path,
    set: &[&str],
    tmp: &Path,
) {
    let run_dir = tmp.join("run");
    let o = bin()
        .arg("run")
        .args(inputs)
        .arg("--out")
        .arg(&run_dir)
        .args(set)
        .arg("--quiet")
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let o = bin()
        .arg("validate")
        .arg(&run_dir)
        .arg("--data")
        .arg(data_dir)
        .args(["--reference", "global", "--quiet"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let rep: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(run_dir.join("validation/report.json")).unwrap(),
    )
    .unwrap();
    let head: Vec<&str> = cands.lines().next().unwrap().split(',').collect();
    let base_row: Vec<&str> = cands
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect::<Vec<_>>())
        .find(|r| r[1] == value)
        .expect("candidate scored");
    let col = |name: &str| base_row[head.iter().position(|h| *h == name).unwrap()];
    let fids = rep["global"]["fiducials"]
        .as_array()
        .expect("report.json layout");
    let mut compared = 0;
    for fid in ["p_on", "p_end", "qrs_on", "qrs_end", "t_peak", "t_end"] {
        let f = fids.iter().find(|x| x["fiducial"] == fid).unwrap();
        let (Some(sd), Some(se), Some(ppv)) = (
            f["stats"]["sd_ms"].as_f64(),
            f["sensitivity_pct"].as_f64(),
            f["ppv_pct"].as_f64(),
        ) else {
            continue;
        };
        let got = |c: &str| -> f64 { col(&format!("{fid}_{c}")).parse().unwrap() };
        assert!(
            (got("sd_ms") - sd).abs() < 0.006,
            "{fid}: tune SD {} vs validate {sd}",
            got("sd_ms")
        );
        assert!(
            (got("se_pct") - se).abs() < 0.006,
            "{fid}: tune Se {} vs validate {se}",
            got("se_pct")
        );
        assert!(
            (got("ppv_pct") - ppv).abs() < 0.006,
            "{fid}: tune +P {} vs validate {ppv}",
            got("ppv_pct")
        );
        compared += 1;
    }
    assert!(compared >= 5, "only {compared} fiducials compared");
    // marks.csv beside the report: one `tp` row per counted pair.
    let marks = std::fs::read_to_string(run_dir.join("validation/marks.csv")).unwrap();
    let mut lines = marks.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let (fc, oc) = (
        head.iter().position(|h| *h == "fiducial").unwrap(),
        head.iter().position(|h| *h == "outcome").unwrap(),
    );
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    for f in fids {
        let key = f["fiducial"].as_str().unwrap();
        let tp = rows
            .iter()
            .filter(|r| r[fc] == key && r[oc] == "tp")
            .count();
        assert_eq!(
            tp as u64,
            f["tp"].as_u64().unwrap(),
            "{key}: marks.csv tp rows"
        );
    }
}

/// LUDB (Kalyakulina et al. 2020) per-lead references, combined across leads
/// (`--reference-ext leads`), score like `tendline validate`'s global section.
#[test]
fn tune_with_ludb_lead_references_scores_like_validate() {
    let l = data().join("ludb");
    let inputs: Vec<PathBuf> = ["1", "2", "3", "4"].iter().map(|r| l.join(r)).collect();
    let dir = tempfile::tempdir().unwrap();
    let space = dir.path().join("space.toml");
    std::fs::write(
        &space,
        "[search]\nstrategy = 'grid'\nfolds = 2\n[params.delineate]\nt_xi_end = { values = [0.3, 0.4] }\n",
    )
    .unwrap();
    let out = dir.path().join("tune");
    let o = bin()
        .arg("tune")
        .args(&inputs)
        .args(["--reference-ext", "leads", "--quiet", "--space"])
        .arg(&space)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let cands = std::fs::read_to_string(out.join("candidates.csv")).unwrap();
    // 0.4 is the default `t_xi_end`: that candidate must score like a default run.
    assert_scores_equal_validate(&cands, "0.4", &inputs, &l, &[], dir.path());
}

/// Beat sensitivity and positive predictivity (%) of `ours` against the beat
/// annotations of `reference`, pairing each reference beat with an unused
/// detection within `tol` samples (ANSI/AAMI EC57 practice: 150 ms).
fn beat_se_ppv(
    reference: &[tendline_formats::Annotation],
    ours: &[tendline_formats::Annotation],
    tol: i64,
) -> (f64, f64) {
    use tendline_formats::annotation::is_beat_code;
    let r: Vec<i64> = reference
        .iter()
        .filter(|a| is_beat_code(a.code))
        .map(|a| a.sample)
        .collect();
    let d: Vec<i64> = ours
        .iter()
        .filter(|a| is_beat_code(a.code))
        .map(|a| a.sample)
        .collect();
    let mut used = vec![false; d.len()];
    let mut tp = 0usize;
    for &x in &r {
        let best = d
            .iter()
            .enumerate()
            .filter(|(j, &y)| !used[*j] && (y - x).abs() <= tol)
            .min_by_key(|(_, &y)| (y - x).abs())
            .map(|(j, _)| j);
        if let Some(j) = best {
            used[j] = true;
            tp += 1;
        }
    }
    (
        100.0 * tp as f64 / r.len() as f64,
        100.0 * tp as f64 / d.len() as f64,
    )
}

/// `tendline run` on MIT-BIH record 100 of the WFDB conformance set into
/// `out`, with `measure.chunk_mega_samples` = `chunk` and `args` before the
/// record; the run must succeed.
fn run_mit100(out: &std::path::Path, chunk: &str, args: &[&str]) -> std::process::Output {
    let o = bin()
        .arg("run")
        .args(args)
        .arg("--set")
        .arg(format!("measure.chunk_mega_samples={chunk}"))
        .arg(data().join("wfdb-conformance/100.hea"))
        .arg("--out")
        .arg(out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    o
}

#[test]
fn a_long_records_chunks_on_two_threads_give_the_same_results_as_on_one() {
    // MIT-BIH 100 in 3 chunks (as in the test below): the chunks run side by
    // side on the worker threads, each on its own samples, so the marks and
    // windows must not depend on how many run at once.
    let outs: Vec<tempfile::TempDir> = ["1", "2"]
        .iter()
        .map(|jobs| {
            let out = tempfile::tempdir().unwrap();
            run_mit100(out.path(), "0.5", &["--quiet", "--jobs", jobs]);
            out
        })
        .collect();
    for file in [
        "annotations/100.mark",
        "annotations/100.leadmark",
        "windows.csv",
    ] {
        let read = |d: &tempfile::TempDir| std::fs::read(d.path().join(file)).unwrap();
        assert!(read(&outs[0]) == read(&outs[1]), "{file} differs");
    }
}

#[test]
fn long_record_in_chunks_matches_the_whole_record_run() {
    // MIT-BIH record 100 (30 min, 2 leads at 360 Hz, in the WFDB conformance
    // set with its reference beat annotations 100.atr): processed whole, and in
    // 3 chunks of 690 s (budget 0.5 M samples over 2 leads). The chunks see
    // their own signal for the record-level statistics (noise levels, lead
    // quality), so marks may move by a sample or two, but the beats, windows and
    // record QT must agree, and both runs must find the reference beats.
    let whole = tempfile::tempdir().unwrap();
    let parts = tempfile::tempdir().unwrap();
    for (out, budget) in [(&whole, "0"), (&parts, "0.5")] {
        let o = run_mit100(out.path(), budget, &[]);
        // Progress inside a long record (stderr is not a terminal here, so
        // lines): after each tenth passed, 690 s and 1380 s of 1805.6 s.
        let err = String::from_utf8_lossy(&o.stderr);
        let progress: Vec<&str> = err.lines().filter(|l| l.starts_with("[100] ")).collect();
        if budget == "0" {
            assert!(progress.is_empty(), "{progress:?}");
        } else {
            assert_eq!(
                progress,
                ["[100] 38 % (11:30 of 30:06)", "[100] 76 % (23:00 of 30:06)"],
                "{err}"
            );
        }
    }
    let part = tendline_store::Part::load(&parts.path().join("parts/100.json"))
        .unwrap()
        .unwrap();
    match part.group.attrs.get("input_warnings") {
        Some(tendline_store::Attr::Texts(w)) => {
            assert!(w.iter().any(|w| w.contains("3 chunks of 690 s")), "{w:?}")
        }
        other => panic!("{other:?}"),
    }
    // The chunked run moves the samples out of the record as it goes; the
    // record's length still comes from the input (650 000 samples in the
    // header of MIT-BIH 100).
    assert!(
        matches!(
            part.group.attrs.get("n_samples"),
            Some(tendline_store::Attr::Int(650_000))
        ),
        "{:?}",
        part.group.attrs.get("n_samples")
    );
    let reference =
        tendline_formats::annotation::read_annotations(&data().join("wfdb-conformance/100.atr"))
            .unwrap();
    let marks = |d: &tempfile::TempDir| {
        tendline_formats::annotation::read_annotations(&d.path().join("annotations/100.mark"))
            .unwrap()
    };
    let tol = (0.150f64 * 360.0).round() as i64;
    let (se_w, ppv_w) = beat_se_ppv(&reference, &marks(&whole), tol);
    let (se_c, ppv_c) = beat_se_ppv(&reference, &marks(&parts), tol);
    assert!(
        se_c >= 99.5 && ppv_c >= 99.5,
        "chunked: Se {se_c:.2} +P {ppv_c:.2}"
    );
    assert!(
        (se_c - se_w).abs() <= 0.1 && (ppv_c - ppv_w).abs() <= 0.1,
        "whole Se {se_w:.2} +P {ppv_w:.2}, chunked Se {se_c:.2} +P {ppv_c:.2}"
    );
    let windows = |d: &tempfile::TempDir| -> Vec<(String, String)> {
        std::fs::read_to_string(d.path().join("windows.csv"))
            .unwrap()
            .lines()
            .skip(1)
            .map(|l| {
                let f: Vec<&str> = l.split(',').collect();
                (f[2].to_string(), f[3].to_string())
            })
            .collect()
    };
    assert_eq!(windows(&whole), windows(&parts));
    let qt = |d: &tempfile::TempDir| -> f64 {
        let s = std::fs::read_to_string(d.path().join("summary.csv")).unwrap();
        let mut lines = s.lines();
        let head: Vec<&str> = lines.next().unwrap().split(',').collect();
        let row: Vec<&str> = lines.next().unwrap().split(',').collect();
        row[head.iter().position(|h| *h == "qt_ms").unwrap()]
            .parse()
            .unwrap()
    };
    assert!(
        (qt(&whole) - qt(&parts)).abs() <= 10.0,
        "{} vs {}",
        qt(&whole),
        qt(&parts)
    );
}

#[test]
fn pacing_spikes_are_counted_for_a_paced_record_only() {
    // LUDB 34 (header: "UNIpolar ventricular pacing") against LUDB 1 (sinus
    // rhythm, no pacing): the paced record's stimulus artifacts are removed and
    // counted in summary.csv; turning the option off leaves the column at 0.
    let inp = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    copy_ludb(inp.path(), "34");
    let count = |out: &Path| -> Vec<(String, i64)> {
        let s = std::fs::read_to_string(out.join("summary.csv")).unwrap();
        let mut lines = s.lines();
        let head: Vec<&str> = lines.next().unwrap().split(',').collect();
        let col = head.iter().position(|h| *h == "pacing_spikes").unwrap();
        let mut v: Vec<(String, i64)> = lines
            .map(|l| {
                let c: Vec<&str> = l.split(',').collect();
                (c[0].to_string(), c[col].parse().unwrap())
            })
            .collect();
        v.sort();
        v
    };
    let on = tempfile::tempdir().unwrap();
    let o = run_quiet(&[inp.path().into()], on.path());
    assert!(o.status.success(), "{}", text(&o));
    let c = count(on.path());
    assert_eq!(c[0], ("1".to_string(), 0), "{c:?}");
    assert_eq!(c[1].0, "34");
    // One stimulus per beat of the 10-s record (70 beats per minute or so).
    assert!((8..=12).contains(&c[1].1), "{c:?}");
    // The record's flags name it paced; the other's do not.
    let summary = std::fs::read_to_string(on.path().join("summary.csv")).unwrap();
    for line in summary.lines().skip(1) {
        let paced = line.contains("paced");
        assert_eq!(paced, line.starts_with("34,"), "{line}");
    }
    // The over-read site marks the stimuli on the rhythm strip and ranks the
    // paced record with a reason.
    let o = bin().arg("review").arg(on.path()).output().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let page = std::fs::read_to_string(on.path().join("review/34.html")).unwrap();
    assert!(page.contains("pacing stimulus at sample"), "no pacing tick");
    let plain = std::fs::read_to_string(on.path().join("review/1.html")).unwrap();
    assert!(!plain.contains("pacing stimulus at sample"));
    let index = std::fs::read_to_string(on.path().join("review/index.html")).unwrap();
    assert!(
        index.contains("pacing stimulus artifact(s) removed"),
        "no reason"
    );
    let off = tempfile::tempdir().unwrap();
    let o = bin()
        .arg("run")
        .arg(inp.path())
        .arg("--out")
        .arg(off.path())
        .args(["--quiet", "--set", "filter.pacing_blank=false"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert_eq!(
        count(off.path()),
        vec![("1".to_string(), 0), ("34".to_string(), 0)]
    );
}

#[test]
fn inspect_reads_without_writing_and_sets_exit_codes() {
    let inp = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    let before = walk(inp.path());
    let o = bin().arg("inspect").arg(inp.path()).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(0), "{t}");
    // LUDB 1: 12 leads at 500 Hz for 10 s (its header, LUDB 1.0.1).
    let line = t
        .lines()
        .find(|l| l.starts_with("1 "))
        .expect("row of record 1");
    let cols: Vec<&str> = line.split_whitespace().collect();
    assert_eq!(&cols[1..6], ["WFDB", "500", "12", "10.0", "s"], "{t}");
    assert!(t.contains("1 record(s): 1 read, 0 failed"), "{t}");
    assert_eq!(walk(inp.path()), before, "inspect wrote beside its inputs");
    assert!(!t.contains("identical signals"), "{t}");

    // The same samples under another name: reported as a possible duplicate.
    let hea = std::fs::read_to_string(inp.path().join("1.hea")).unwrap();
    let dup: String = hea
        .lines()
        .enumerate()
        .map(|(i, l)| {
            let l = if i == 0 {
                l.replacen('1', "dup", 1)
            } else {
                l.replacen("1.dat", "dup.dat", 1)
            };
            l + "\n"
        })
        .collect();
    std::fs::write(inp.path().join("dup.hea"), dup).unwrap();
    std::fs::copy(inp.path().join("1.dat"), inp.path().join("dup.dat")).unwrap();
    let o = bin().arg("inspect").arg(inp.path()).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(0), "{t}");
    assert!(
        t.contains("identical signals (a record delivered twice?): 1, dup"),
        "{t}"
    );
    for f in ["dup.hea", "dup.dat"] {
        std::fs::remove_file(inp.path().join(f)).unwrap();
    }

    // A second record that does not read: listed, exit code 1.
    std::fs::write(
        inp.path().join("2.hea"),
        "2 1 500 5000\n2.dat 16 200 16 0 0 0 0 I\n",
    )
    .unwrap();
    let o = bin().arg("inspect").arg(inp.path()).output().unwrap();
    let t = text(&o);
    assert_eq!(o.status.code(), Some(1), "{t}");
    assert!(t.contains("2.dat"), "the error names the missing file: {t}");

    // Nothing to inspect: a usage error.
    let empty = tempfile::tempdir().unwrap();
    let o = bin().arg("inspect").arg(empty.path()).output().unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("no records found"), "{}", text(&o));
}

#[test]
fn memory_budget_orders_records_and_never_refuses_one() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "1");
    copy_ludb(inp.path(), "2");
    let run = |args: &[&str]| {
        let o = bin()
            .arg("run")
            .args(args)
            .arg("--out")
            .arg(out.path())
            .arg(inp.path())
            .output()
            .unwrap();
        (o.status.code(), text(&o))
    };
    // 1 MiB is less than either record needs: each runs alone, both complete.
    let (code, t) = run(&["--jobs", "2", "--max-memory", "1"]);
    assert_eq!(code, Some(0), "{t}");
    assert!(t.contains("memory budget 1 MiB"), "{t}");
    assert!(t.contains("2 of 2 records complete"), "{t}");
    // With a record in chunks among them, whose chunks run on the worker
    // threads while the other records wait for the budget: all complete (a
    // record must never wait for the budget on a thread that holds a
    // suspended record beneath it, or the run would hang).
    let mit = data().join("wfdb-conformance");
    for ext in ["hea", "dat"] {
        std::fs::copy(
            mit.join(format!("100.{ext}")),
            inp.path().join(format!("100.{ext}")),
        )
        .unwrap();
    }
    copy_ludb(inp.path(), "3");
    let chunked = ["--set", "measure.chunk_mega_samples=0.2", "--force"];
    let (code, t) = run(&[&["--jobs", "2", "--max-memory", "1"][..], &chunked].concat());
    assert_eq!(code, Some(0), "{t}");
    assert!(t.contains("4 of 4 records complete"), "{t}");
    let (code, t) = run(&["--max-memory", "0"]);
    assert_eq!(code, Some(2), "{t}");
    assert!(
        t.contains("--max-memory: allowed 1 MiB or more, got 0"),
        "{t}"
    );
}

#[test]
fn samples_in_the_wrong_unit_are_named_and_do_not_pass_as_pacing() {
    // LUDB 1, leads I and II (sinus rhythm, no pacemaker), written as CSV four
    // ways: millivolts; microvolts with the unit in the header (`I [uV]`);
    // microvolts without it; volts without it. Only the unlabelled ones are
    // in the wrong unit as read (mV is the CSV default): each gets a warning
    // naming the likely cause, even with --quiet, and the microvolt record is
    // not searched for pacing spikes (before the check its noise passed the
    // spike rule's 0.1-mV threshold: 7 "stimuli" blanked).
    let rec = tendline_formats::read_record(
        &data().join("ludb/1.hea"),
        &tendline_formats::ReadOptions::default(),
    )
    .unwrap();
    let inp = tempfile::tempdir().unwrap();
    let write = |name: &str, header: [&str; 2], scale: f64| {
        let mut s = format!("{},{}\n", header[0], header[1]);
        for i in 0..rec.n_samples() {
            let (a, b) = (rec.leads[0].samples[i], rec.leads[1].samples[i]);
            s.push_str(&format!("{},{}\n", a * scale, b * scale));
        }
        std::fs::write(inp.path().join(format!("{name}.csv")), s).unwrap();
    };
    write("mv", ["I", "II"], 1.0);
    write("uv_labelled", ["I [uV]", "II [uV]"], 1000.0);
    write("uv_bare", ["I", "II"], 1000.0);
    write("v_bare", ["I", "II"], 0.001);
    let out = tempfile::tempdir().unwrap();
    let o = bin()
        .arg("run")
        .arg(inp.path())
        .args(["--csv-fs", "500", "--quiet", "--out"])
        .arg(out.path())
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", text(&o));
    let err = String::from_utf8_lossy(&o.stderr);
    let warned: Vec<&str> = err
        .lines()
        .filter(|l| l.starts_with("warning: record"))
        .collect();
    assert_eq!(warned.len(), 2, "{err}");
    assert!(
        warned
            .iter()
            .any(|l| l.contains("`uv_bare`") && l.contains("microvolts read as millivolts")),
        "{err}"
    );
    assert!(
        warned
            .iter()
            .any(|l| l.contains("`v_bare`") && l.contains("volts read as millivolts")),
        "{err}"
    );
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    let mut lines = summary.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let col = |k: &str| head.iter().position(|h| *h == k).unwrap();
    let rows: std::collections::BTreeMap<String, Vec<String>> = lines
        .map(|l| {
            let c: Vec<String> = l.split(',').map(str::to_string).collect();
            (c[0].clone(), c)
        })
        .collect();
    let amp = |r: &str| rows[r][col("amplitude_mv")].parse::<f64>().unwrap();
    // The typical range scales with the samples (exactly, up to the decimal
    // text of the CSV and the 4 decimals of the column).
    assert!((0.3..5.0).contains(&amp("mv")), "{}", amp("mv"));
    assert!((amp("uv_labelled") - amp("mv")).abs() < 1e-3);
    assert!((amp("uv_bare") / amp("mv") - 1000.0).abs() < 1.0);
    assert!(amp("v_bare") < 0.01);
    for r in ["mv", "uv_labelled", "uv_bare"] {
        assert_eq!(rows[r][col("pacing_spikes")], "0", "{r}");
        assert!(!rows[r][col("flags")].contains("paced"), "{r}");
    }
    // The warning is kept with the record's results.
    let part = std::fs::read_to_string(out.path().join("parts/uv_bare.json")).unwrap();
    assert!(part.contains("amplitude_warning"));
}

#[test]
fn windows_whose_qt_jumps_are_flagged_and_counted_per_record() {
    // QTDB sel100 (MLII's median beat is read with the T end on different
    // waves from window to window, see `measure.lead_consistency_ms`): the
    // windows flagged `qt_inconsistent` in windows.csv are the record's count
    // in summary.csv, and the record's flags name it.
    let inp = tempfile::tempdir().unwrap();
    for ext in ["hea", "dat"] {
        std::fs::copy(
            data().join(format!("qtdb/sel100.{ext}")),
            inp.path().join(format!("sel100.{ext}")),
        )
        .unwrap();
    }
    let out = tempfile::tempdir().unwrap();
    let o = run_quiet(&[inp.path().into()], out.path());
    assert!(o.status.success(), "{}", text(&o));
    let windows = std::fs::read_to_string(out.path().join("windows.csv")).unwrap();
    let mut lines = windows.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let fcol = head.iter().position(|h| *h == "flags").unwrap();
    let flagged = lines
        .filter(|l| {
            l.split(',')
                .nth(fcol)
                .is_some_and(|f| f.split(';').any(|x| x == "qt_inconsistent"))
        })
        .count();
    assert!(flagged > 0, "no window of sel100 flagged");
    let summary = std::fs::read_to_string(out.path().join("summary.csv")).unwrap();
    let mut lines = summary.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let row: Vec<&str> = lines.next().unwrap().split(',').collect();
    let col = |name: &str| head.iter().position(|h| *h == name).unwrap();
    assert_eq!(row[col("n_windows_inconsistent")], flagged.to_string());
    assert!(row[col("flags")].contains("qt_inconsistent"));
}
