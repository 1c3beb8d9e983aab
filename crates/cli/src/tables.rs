//! Flat outputs of a run built from the records' store trees: `summary.csv`,
//! `windows.csv`, `subjects.csv` (per-subject correction and ΔQTc),
//! `failures.csv`, `run.json`, and the table printed at the end of a run.

use crate::pipeline::Context;
use crate::run::{Outcome, RunReport};
use anyhow::{Context as _, Result};
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;
use tendline_measure::subject::{QtRr, SubjectConfig, SubjectRecord, SubjectResult};
use tendline_measure::MeasureConfig;
use tendline_store::{write_atomic, Attr, Data, Group, Part};

pub use tendline_store::utc_now;

pub fn attr_f(g: &Group, k: &str) -> Option<f64> {
    match g.attrs.get(k) {
        Some(Attr::Float(v)) if v.is_finite() => Some(*v),
        Some(Attr::Int(v)) => Some(*v as f64),
        _ => None,
    }
}

pub fn attr_s<'a>(g: &'a Group, k: &str) -> Option<&'a str> {
    match g.attrs.get(k) {
        Some(Attr::Text(s)) => Some(s),
        _ => None,
    }
}

fn fmt_f(v: Option<f64>, digits: usize) -> String {
    v.map(|x| format!("{x:.digits$}")).unwrap_or_default()
}

pub(crate) fn csv_cell(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

const SUMMARY_NUM: [&str; 13] = [
    "duration_s",
    "rr_ms",
    "hr_bpm",
    "qt_ms",
    "qt_superimposed_ms",
    "qrs_ms",
    "pr_ms",
    "jt_ms",
    "qtc_bazett_ms",
    "qtc_fridericia_ms",
    "qtc_framingham_ms",
    "qtc_hodges_ms",
    "qtc_ms",
];

/// `summary.csv` numeric columns after `flags` (added later; appended so that the
/// earlier columns keep their places).
const SUMMARY_NUM_LATER: [&str; 3] = ["p_ms", "tpe_ms", "qt_dispersion_ms"];

const WINDOW_COLS: [&str; 17] = [
    "start_s",
    "end_s",
    "n_beats",
    "rr_ms",
    "hr_bpm",
    "qt_ms",
    "qt_lead",
    "qt_longest_ms",
    "qt_superimposed_ms",
    "qrs_ms",
    "pr_ms",
    "jt_ms",
    "qtc_bazett_ms",
    "qtc_fridericia_ms",
    "qtc_framingham_ms",
    "qtc_hodges_ms",
    "qtc_flag",
];

/// `windows.csv` columns after `flags` (added later; appended so that the earlier
/// columns keep their places).
const WINDOW_COLS_LATER: [&str; 4] = ["p_ms", "tpe_ms", "qt_dispersion_ms", "qt_valid_leads"];

fn cell_of(d: &Data, i: usize) -> String {
    match d {
        Data::I64(v) => v.get(i).map(|x| x.to_string()).unwrap_or_default(),
        Data::F64(v) => v
            .get(i)
            .filter(|x| x.is_finite())
            .map(|x| format!("{x:.1}"))
            .unwrap_or_default(),
        Data::F32(v) => v
            .get(i)
            .filter(|x| x.is_finite())
            .map(|x| format!("{x:.3}"))
            .unwrap_or_default(),
        Data::Text(v) => v.get(i).map(|s| csv_cell(s)).unwrap_or_default(),
        Data::F32Matrix { .. }
        | Data::I64Nd { .. }
        | Data::F64Nd { .. }
        | Data::F32Nd { .. }
        | Data::F32Stack { .. } => String::new(),
    }
}

/// `summary.csv` (one row per record) and `windows.csv` (one row per window), built
/// one record at a time.
pub struct CsvWriter {
    summary: String,
    windows: String,
}

impl Default for CsvWriter {
    fn default() -> Self {
        let mut s = String::from("record,subject,timepoint,sex,age,fs,n_leads,n_beats,n_windows");
        for k in SUMMARY_NUM {
            s.push(',');
            s.push_str(k);
        }
        s.push_str(",qt_rule,qtc_formula,qtc_flag,flags");
        for k in SUMMARY_NUM_LATER {
            s.push(',');
            s.push_str(k);
        }
        s.push_str(",pacing_spikes,amplitude_mv,n_windows_inconsistent");
        s.push('\n');
        let mut w = String::from("record,window");
        for k in WINDOW_COLS {
            w.push(',');
            w.push_str(k);
        }
        w.push_str(",flags");
        for k in WINDOW_COLS_LATER {
            w.push(',');
            w.push_str(k);
        }
        w.push('\n');
        CsvWriter {
            summary: s,
            windows: w,
        }
    }
}

impl CsvWriter {
    /// One record's rows of `summary.csv` and `windows.csv`, without headers,
    /// for [`CsvWriter::push_rows`] (records finish out of order in a batch).
    pub fn rows(p: &Part) -> Result<(String, String)> {
        let mut w = CsvWriter {
            summary: String::new(),
            windows: String::new(),
        };
        w.add(p)?;
        Ok((w.summary, w.windows))
    }

    /// Append rows made by [`CsvWriter::rows`].
    pub fn push_rows(&mut self, rows: &(String, String)) {
        self.summary.push_str(&rows.0);
        self.windows.push_str(&rows.1);
    }

    /// Append one record's rows.
    pub fn add(&mut self, p: &Part) -> Result<()> {
        let (s, w) = (&mut self.summary, &mut self.windows);
        let g = &p.group;
        let n_leads = match g.attrs.get("leads") {
            Some(Attr::Texts(v)) => v.len(),
            _ => 0,
        };
        write!(
            s,
            "{},{},{},{},{},{},{},{},{}",
            csv_cell(&p.record),
            csv_cell(attr_s(g, "subject").unwrap_or("")),
            csv_cell(attr_s(g, "timepoint").unwrap_or("")),
            attr_s(g, "sex").unwrap_or(""),
            fmt_f(attr_f(g, "age"), 0),
            fmt_f(attr_f(g, "fs"), 3),
            n_leads,
            fmt_f(attr_f(g, "n_beats"), 0),
            fmt_f(attr_f(g, "n_windows"), 0),
        )?;
        for k in SUMMARY_NUM {
            write!(s, ",{}", fmt_f(attr_f(g, k), 1))?;
        }
        write!(
            s,
            ",{},{},{},{}",
            attr_s(g, "qt_rule").unwrap_or(""),
            attr_s(g, "qtc_formula").unwrap_or(""),
            attr_s(g, "qtc_flag").unwrap_or(""),
            csv_cell(attr_s(g, "flags").unwrap_or(""))
        )?;
        for k in SUMMARY_NUM_LATER {
            write!(s, ",{}", fmt_f(attr_f(g, k), 1))?;
        }
        // Pacing stimulus artifacts removed (an integer count; empty in parts
        // written before the column existed).
        write!(s, ",{}", fmt_f(attr_f(g, "pacing_spikes"), 0))?;
        // The record's typical peak-to-peak range (empty in parts written
        // before the column existed, or with every lead flat).
        write!(s, ",{}", fmt_f(attr_f(g, "amplitude_mv"), 4))?;
        // Windows flagged `qt_inconsistent` (empty in parts written before
        // the column existed).
        write!(s, ",{}", fmt_f(attr_f(g, "n_windows_inconsistent"), 0))?;
        s.push('\n');
        if let Some(wg) = g.groups.get("windows") {
            let n = wg.datasets.get("start_s").map_or(0, |d| d.data.rows());
            for i in 0..n {
                write!(w, "{},{i}", csv_cell(&p.record))?;
                for k in WINDOW_COLS
                    .iter()
                    .chain(std::iter::once(&"flags"))
                    .chain(WINDOW_COLS_LATER.iter())
                {
                    let c = wg
                        .datasets
                        .get(*k)
                        .map(|d| cell_of(&d.data, i))
                        .unwrap_or_default();
                    write!(w, ",{c}")?;
                }
                w.push('\n');
            }
        }
        Ok(())
    }

    /// Write both files atomically into `out`.
    pub fn write(&self, out: &Path) -> Result<()> {
        write_atomic(&out.join("summary.csv"), self.summary.as_bytes())?;
        write_atomic(&out.join("windows.csv"), self.windows.as_bytes())?;
        Ok(())
    }
}

/// `failures.csv`: one row per record that failed (header only when none did).
pub fn write_failures(out: &Path, failures: &[(&crate::inputs::RecordInput, &str)]) -> Result<()> {
    let mut s = String::from("record,path,error\n");
    for (r, e) in failures {
        writeln!(
            s,
            "{},{},{}",
            csv_cell(&r.name),
            csv_cell(&r.path.display().to_string()),
            csv_cell(e)
        )?;
    }
    write_atomic(&out.join("failures.csv"), s.as_bytes())?;
    Ok(())
}

/// `run.json`: what ran, under which config, with which outcome per record.
pub fn write_manifest(
    out: &Path,
    ctx: &Context,
    report: &RunReport,
    subjects_file: Option<&Path>,
) -> Result<()> {
    let stage_json = |st: &crate::pipeline::StageSeconds| {
        serde_json::Value::Object(
            st.named()
                .iter()
                .map(|(k, v)| (k.to_string(), serde_json::json!((v * 1e4).round() / 1e4)))
                .collect(),
        )
    };
    let records: Vec<serde_json::Value> = report
        .outcomes
        .iter()
        .map(|(r, o)| {
            let (status, detail) = match o {
                Outcome::Done { seconds, .. } => ("done", format!("{seconds:.3} s")),
                Outcome::Reused => ("reused", String::new()),
                Outcome::Failed { error } => ("failed", error.clone()),
            };
            let mut v = serde_json::json!({"record": r.name, "path": r.path.display().to_string(), "status": status, "detail": detail});
            if let Outcome::Done { stages, .. } = o {
                v["stage_seconds"] = stage_json(stages);
            }
            v
        })
        .collect();
    let v = serde_json::json!({
        "tool": "tendline",
        "tool_version": env!("CARGO_PKG_VERSION"),
        "finished_utc": utc_now(),
        "config_sha256": ctx.config_sha256,
        "config_toml": ctx.config_toml,
        "seconds": report.seconds,
        // Summed over the records processed in this run (not those reused),
        // on whichever thread ran each: with several jobs the sum exceeds
        // `seconds`, the run's wall time.
        "stage_seconds": stage_json(&report.stage_totals().0),
        "subjects_file": subjects_file.map(|p| p.display().to_string()),
        "records": records,
    });
    write_atomic(
        &out.join("run.json"),
        serde_json::to_string_pretty(&v)?.as_bytes(),
    )?;
    Ok(())
}

fn windows_qt_rr(g: &Group) -> Vec<QtRr> {
    let Some(wg) = g.groups.get("windows") else {
        return Vec::new();
    };
    let col = |k: &str| match wg.datasets.get(k).map(|d| &d.data) {
        Some(Data::F64(v)) => v.clone(),
        _ => Vec::new(),
    };
    col("qt_ms")
        .into_iter()
        .zip(col("rr_ms"))
        .filter(|(q, r)| q.is_finite() && r.is_finite())
        .map(|(qt_ms, rr_ms)| QtRr { qt_ms, rr_ms })
        .collect()
}

/// Per-subject correction and ΔQTc over the records that have a subject.
pub fn subject_results(parts: &[Part], cfg: &SubjectConfig) -> Vec<SubjectResult> {
    let recs: Vec<SubjectRecord> = parts
        .iter()
        .filter_map(|p| {
            let g = &p.group;
            Some(SubjectRecord {
                subject: attr_s(g, "subject")?.to_string(),
                record: p.record.clone(),
                timepoint: attr_s(g, "timepoint").map(str::to_string),
                arm: attr_s(g, "arm").map(str::to_string),
                windows: windows_qt_rr(g),
                qtc_ms: attr_f(g, "qtc_ms"),
            })
        })
        .collect();
    tendline_measure::subject::analyse(&recs, cfg)
}

/// `subjects.csv` in the output: per subject and record, fit, corrected QTc and deltas.
pub fn write_subjects(out: &Path, results: &[SubjectResult]) -> Result<()> {
    let mut s = String::from(
        "subject,record,timepoint,baseline_record,qt_ms,rr_ms,qtc_ms,delta_qtc_ms,linear_slope_ms_per_s,loglog_exponent,qtci_linear_ms,qtci_loglog_ms,delta_qtci_linear_ms,delta_qtci_loglog_ms,note\n",
    );
    for r in results {
        for rec in &r.records {
            writeln!(
                s,
                "{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}",
                csv_cell(&r.subject),
                csv_cell(&rec.record),
                csv_cell(rec.timepoint.as_deref().unwrap_or("")),
                csv_cell(r.baseline_record.as_deref().unwrap_or("")),
                fmt_f(rec.qt_ms, 1),
                fmt_f(rec.rr_ms, 1),
                fmt_f(rec.qtc_ms, 1),
                fmt_f(rec.delta_qtc_ms, 1),
                fmt_f(r.fit.linear.map(|f| f.slope), 1),
                fmt_f(r.fit.loglog.map(|f| f.slope), 3),
                fmt_f(rec.qtci_linear_ms, 1),
                fmt_f(rec.qtci_loglog_ms, 1),
                fmt_f(rec.delta_qtci_linear_ms, 1),
                fmt_f(rec.delta_qtci_loglog_ms, 1),
                csv_cell(r.fit.note.as_deref().unwrap_or("")),
            )?;
        }
    }
    write_atomic(&out.join("subjects.csv"), s.as_bytes())?;
    Ok(())
}

/// `study.csv` in the output when subjects carry a treatment arm: per timepoint
/// and arm the mean ΔQTc (preferred formula), and for the arms other than
/// `reference_arm` the time-matched ΔΔQTc with its Welch 90 % interval
/// (`tendline_measure::study`). Without arms a stale `study.csv` is removed.
pub fn write_study(out: &Path, results: &[SubjectResult], cfg: &MeasureConfig) -> Result<()> {
    let path = out.join("study.csv");
    let st = tendline_measure::study::study(
        results,
        &cfg.subject.reference_arm,
        &cfg.subject.baseline_timepoint,
    );
    if st.means.is_empty() {
        if path.exists() {
            std::fs::remove_file(&path)
                .with_context(|| format!("removing the stale {}", path.display()))?;
        }
        return Ok(());
    }
    let mut s = String::from(
        "timepoint,arm,qtc_formula,n_subjects,mean_delta_qtc_ms,sd_delta_qtc_ms,reference_arm,ddqtc_ms,se_ms,df,ci90_low_ms,ci90_high_ms\n",
    );
    for m in &st.means {
        let c = st
            .contrasts
            .iter()
            .find(|c| c.timepoint == m.timepoint && c.arm == m.arm);
        writeln!(
            s,
            "{},{},{},{},{},{},{},{},{},{},{},{}",
            csv_cell(&m.timepoint),
            csv_cell(&m.arm),
            cfg.preferred_formula.as_str(),
            m.n,
            fmt_f(Some(m.mean_ms), 2),
            fmt_f(m.sd_ms, 2),
            csv_cell(c.map_or("", |c| c.reference_arm.as_str())),
            fmt_f(c.map(|c| c.ddqtc_ms), 2),
            fmt_f(c.and_then(|c| c.se_ms), 3),
            fmt_f(c.and_then(|c| c.df), 3),
            fmt_f(c.and_then(|c| c.ci90_low_ms), 2),
            fmt_f(c.and_then(|c| c.ci90_high_ms), 2),
        )?;
    }
    write_atomic(&path, s.as_bytes())?;
    Ok(())
}

/// The table printed at the end of a run: per subject and timepoint when subjects
/// are known, otherwise per record; always followed by the caution.
pub fn print_table(parts: &[Part], subjects: &[SubjectResult], formula: &str) -> String {
    let by_name: BTreeMap<&str, &Group> = parts
        .iter()
        .map(|p| (p.record.as_str(), &p.group))
        .collect();
    let mut s = String::new();
    let qtc = format!("QTc{}", formula_letter(formula));
    if subjects.is_empty() {
        let _ = writeln!(
            s,
            "{:<16} {:>6} {:>7} {:>7} {:>8}  flags",
            "record", "HR", "QT", qtc, "QRS"
        );
        for p in parts {
            let g = &p.group;
            let _ = writeln!(
                s,
                "{:<16} {:>6} {:>7} {:>7} {:>8}  {}",
                p.record,
                fmt_f(attr_f(g, "hr_bpm"), 0),
                fmt_f(attr_f(g, "qt_ms"), 0),
                fmt_f(attr_f(g, "qtc_ms"), 0),
                fmt_f(attr_f(g, "qrs_ms"), 0),
                attr_s(g, "flags").unwrap_or("")
            );
        }
    } else {
        let _ = writeln!(
            s,
            "{:<8} {:<3} {:<14} {:>6} {:>7} {:>7} {:>7} {:>7}  flags",
            "subject",
            "sex",
            "timepoint",
            "HR",
            "QT",
            "QTcB",
            qtc,
            &format!("Δ{qtc}")
        );
        for r in subjects {
            for rec in &r.records {
                let g = by_name.get(rec.record.as_str());
                let sex = g.and_then(|g| attr_s(g, "sex")).unwrap_or("?");
                let hr = g.and_then(|g| attr_f(g, "hr_bpm"));
                let flags = g.and_then(|g| attr_s(g, "flags")).unwrap_or("");
                let qtcb = g.and_then(|g| attr_f(g, "qtc_bazett_ms"));
                let _ = writeln!(
                    s,
                    "{:<8} {:<3} {:<14} {:>6} {:>7} {:>7} {:>7} {:>7}  {}",
                    r.subject,
                    sex,
                    rec.timepoint.as_deref().unwrap_or("-"),
                    fmt_f(hr, 0),
                    fmt_f(rec.qt_ms, 0),
                    fmt_f(qtcb, 0),
                    fmt_f(rec.qtc_ms, 0),
                    rec.delta_qtc_ms
                        .map(|d| format!("{d:+.0}"))
                        .unwrap_or_default(),
                    flags
                );
            }
        }
    }
    let _ = writeln!(s, "\nCaution: {}", tendline_measure::classify::CAUTION);
    s
}

/// One line per record whose samples look like the wrong unit (the
/// `amplitude_warning` attribute of its part): printed after a run even with
/// `--quiet`, since every number of such a record is suspect.
pub fn amplitude_warnings(parts: &[Part]) -> Vec<String> {
    parts
        .iter()
        .filter_map(|p| {
            attr_s(&p.group, "amplitude_warning")
                .map(|w| format!("warning: record `{}`: {w}", p.record))
        })
        .collect()
}

fn formula_letter(f: &str) -> &'static str {
    match f {
        "bazett" => "B",
        "fridericia" => "F",
        "framingham" => "Fram",
        "hodges" => "H",
        _ => "",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_cells_are_quoted_when_needed() {
        assert_eq!(csv_cell("a,b"), "\"a,b\"");
        assert_eq!(csv_cell("say \"x\""), "\"say \"\"x\"\"\"");
        assert_eq!(csv_cell("plain"), "plain");
    }
}
