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
    // No temporary files left behind.
    let leftovers: Vec<_> = walk(out.path())
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
    let mark = std::fs::read(out.path().join("annotations/4.mark")).unwrap();
    let second = run(&[]);
    assert!(second.contains("\"status\": \"reused\""), "{second}");
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
fn results_carry_version_config_and_input_checksums() {
    let inp = tempfile::tempdir().unwrap();
    let out = tempfile::tempdir().unwrap();
    copy_ludb(inp.path(), "5");
    let o = bin()
        .arg("run")
        .arg(inp.path())
        .arg("--out")
        .arg(out.path())
        .arg("--quiet")
        .output()
        .unwrap();
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
