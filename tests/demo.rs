//! The demo run against the demo's exact ground truth (issue "demo signals"):
//! QT within ±10 ms in every clean record, ΔQTcF within ±5 ms, the prolonged
//! case flagged, the noisy record within ±20 ms or marked unreadable.
//!
//! Truth comes from `demo-signals/truth.csv`, written by the generator from the
//! Gaussian wave definitions (invented scenario, see demo-signals/README.md).

use std::collections::BTreeMap;
use std::path::Path;
use std::process::Command;

type Table = BTreeMap<String, BTreeMap<String, String>>;

fn read_csv(p: &Path) -> Table {
    let t = std::fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
    let mut lines = t.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    lines
        .map(|l| {
            let cells: Vec<&str> = l.split(',').collect();
            let row: BTreeMap<String, String> = head
                .iter()
                .zip(cells.iter())
                .map(|(h, c)| (h.to_string(), c.to_string()))
                .collect();
            (row["record"].clone(), row)
        })
        .collect()
}

fn num(t: &Table, rec: &str, col: &str) -> Option<f64> {
    t.get(rec)?.get(col)?.parse().ok()
}

#[test]
fn demo_run_recovers_ground_truth() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("../..");
    let out = tempfile::tempdir().unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_tendline"))
        .arg("run")
        .arg(root.join("demo-signals"))
        .arg("--out")
        .arg(out.path())
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        o.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&o.stderr)
    );
    assert!(
        stdout.contains("over-read by a qualified clinician"),
        "caution missing:\n{stdout}"
    );
    // The printed table's header and rows have the same number of columns (S01 has no flags).
    let head = stdout
        .lines()
        .find(|l| l.starts_with("subject"))
        .expect("table header");
    let row = stdout
        .lines()
        .find(|l| l.starts_with("S01"))
        .expect("a subject row");
    assert_eq!(
        head.split_whitespace().count() - 1,
        row.split_whitespace().count(),
        "{head}\n{row}"
    );

    let truth = read_csv(&root.join("demo-signals/truth.csv"));
    let got = read_csv(&out.path().join("summary.csv"));
    let mut problems = Vec::new();
    for (rec, row) in &truth {
        let noisy = row["noisy"] == "yes";
        let t_qt = num(&truth, rec, "mean_qt_ms").unwrap();
        let qt = num(&got, rec, "qt_ms");
        let flags = got.get(rec).map(|r| r["flags"].clone()).unwrap_or_default();
        match (qt, noisy) {
            (Some(qt), false) if (qt - t_qt).abs() > 10.0 => problems.push(format!(
                "{rec}: QT {qt:.1} vs truth {t_qt:.1} ms (limit ±10)"
            )),
            (None, false) => problems.push(format!("{rec}: no QT measured in a clean record")),
            (Some(qt), true) if (qt - t_qt).abs() > 20.0 && !flags.contains("unreadable") => {
                problems.push(format!(
                    "{rec}: noisy record QT {qt:.1} vs truth {t_qt:.1} ms, not marked unreadable"
                ))
            }
            _ => {}
        }
        if row["expected_flag"] == "prolonged" {
            let flag = got
                .get(rec)
                .map(|r| r["qtc_flag"].clone())
                .unwrap_or_default();
            if flag != "prolonged" {
                problems.push(format!(
                    "{rec}: expected a prolonged QTc flag, got `{flag}`"
                ));
            }
        }
        if let Some(t_delta) = num(&truth, rec, "delta_qtcf_ms") {
            let subject = &row["subject"];
            let base = truth
                .iter()
                .find(|(_, r)| &r["subject"] == subject && r["timepoint"] == "baseline")
                .map(|(k, _)| k.clone())
                .unwrap();
            let noisy_pair = [rec, &base].iter().any(|r| truth[*r]["noisy"] == "yes");
            match (
                num(&got, rec, "qtc_fridericia_ms"),
                num(&got, &base, "qtc_fridericia_ms"),
            ) {
                (Some(a), Some(b)) if !noisy_pair && ((a - b) - t_delta).abs() > 5.0 => problems
                    .push(format!(
                        "{rec}: ΔQTcF {:.1} vs truth {t_delta:.1} ms (limit ±5)",
                        a - b
                    )),
                (None, _) | (_, None) if !noisy_pair => {
                    problems.push(format!("{rec}: ΔQTcF not measurable"))
                }
                _ => {}
            }
        }
    }
    assert!(
        problems.is_empty(),
        "demo checks failed:\n{}",
        problems.join("\n")
    );
}
