//! Reading what the validation needs from disk: record headers (rate and lead names),
//! annotation files, the run's `windows.csv`, and the list of records.

use crate::error::EvalError;
use std::path::{Path, PathBuf};
use tendline_formats::annotation::{read_annotations, Annotation};

/// What the validation needs from a WFDB header: the rate and the lead names.
#[derive(Debug, Clone, PartialEq)]
pub struct HeaderInfo {
    /// Sampling rate, Hz (`fs` of the record line; 250 when absent, WFDB default).
    pub fs: f64,
    /// Signal descriptions in header order (the signal index is the annotation `chan`).
    pub leads: Vec<String>,
}

/// Parse the text of a `.hea` file: record line `name nsig [fs[/counter[(base)]] ...]`
/// then one line per signal whose 9th field onwards is the description. Comments
/// (`#`) and blank lines are skipped, CR is ignored.
pub fn parse_header(text: &str, path: &Path) -> Result<HeaderInfo, EvalError> {
    let bad = |message: String| EvalError::Header {
        path: path.to_path_buf(),
        message,
    };
    let mut lines = text
        .lines()
        .map(|l| l.trim_end_matches('\r'))
        .filter(|l| !l.trim().is_empty() && !l.trim_start().starts_with('#'));
    let first = lines.next().ok_or_else(|| bad("no record line".into()))?;
    let f: Vec<&str> = first.split_whitespace().collect();
    if f.len() < 2 {
        return Err(bad(format!(
            "record line `{first}` has fewer than 2 fields"
        )));
    }
    if f[0].contains('/') {
        return Err(bad(
            "multi-segment records are not supported for validation".into(),
        ));
    }
    let nsig: usize = f[1]
        .parse()
        .map_err(|_| bad(format!("number of signals `{}` is not an integer", f[1])))?;
    let fs = match f.get(2) {
        None => 250.0,
        Some(s) => {
            let head = s.split(['/', '(']).next().unwrap_or("");
            head.parse::<f64>()
                .ok()
                .filter(|v| v.is_finite() && *v > 0.0)
                .ok_or_else(|| bad(format!("sampling frequency `{s}` is not a positive number")))?
        }
    };
    let mut leads = Vec::with_capacity(nsig);
    for k in 0..nsig {
        let l = lines
            .next()
            .ok_or_else(|| bad(format!("expected {nsig} signal lines, found {k}")))?;
        let parts: Vec<&str> = l.split_whitespace().collect();
        leads.push(parts.get(8..).map(|d| d.join(" ")).unwrap_or_default());
    }
    Ok(HeaderInfo { fs, leads })
}

/// Read and parse `<dir>/<record>.hea`.
pub fn read_header(dir: &Path, record: &str) -> Result<HeaderInfo, EvalError> {
    let path = dir.join(format!("{record}.hea"));
    let text = std::fs::read_to_string(&path).map_err(|source| EvalError::Io {
        path: path.clone(),
        source,
    })?;
    parse_header(&text, &path)
}

/// Read an annotation file, naming it in the error.
pub fn read_ann(path: &Path) -> Result<Vec<Annotation>, EvalError> {
    read_annotations(path).map_err(|source| EvalError::Annotation {
        path: path.to_path_buf(),
        source,
    })
}

/// `<dir>/<record>.<ext>` if it exists.
pub fn existing(dir: &Path, record: &str, ext: &str) -> Option<PathBuf> {
    let p = dir.join(format!("{record}.{ext}"));
    p.is_file().then_some(p)
}

/// Order record names naturally (`sel30` < `sel100`, `2` < `10`): digit runs compare
/// by value.
pub fn natural_cmp(a: &str, b: &str) -> std::cmp::Ordering {
    // Digit runs sort before text runs (`2` < `a`), like common natural sorts.
    fn key(s: &str) -> Vec<(bool, String, u128)> {
        let mut out = Vec::new();
        let mut cur = String::new();
        let mut digits = false;
        for ch in s.chars() {
            let d = ch.is_ascii_digit();
            if !cur.is_empty() && d != digits {
                out.push(part(&cur, digits));
                cur.clear();
            }
            digits = d;
            cur.push(ch);
        }
        if !cur.is_empty() {
            out.push(part(&cur, digits));
        }
        out
    }
    fn part(s: &str, digits: bool) -> (bool, String, u128) {
        if digits {
            (false, String::new(), s.parse().unwrap_or(u128::MAX))
        } else {
            (true, s.to_string(), 0)
        }
    }
    key(a).cmp(&key(b)).then_with(|| a.cmp(b))
}

/// Records of the run: stems of `<run>/annotations/*.mark` that have a header in
/// `data_dir`, in natural order.
pub fn discover_records(run_dir: &Path, data_dir: &Path) -> Result<Vec<String>, EvalError> {
    let ann_dir = run_dir.join("annotations");
    let rd = std::fs::read_dir(&ann_dir).map_err(|source| EvalError::Io {
        path: ann_dir.clone(),
        source,
    })?;
    let mut out = Vec::new();
    for e in rd.flatten() {
        let p = e.path();
        if p.extension().and_then(|s| s.to_str()) == Some("mark") {
            if let Some(stem) = p.file_stem().and_then(|s| s.to_str()) {
                if data_dir.join(format!("{stem}.hea")).is_file() {
                    out.push(stem.to_string());
                }
            }
        }
    }
    out.sort_by(|a, b| natural_cmp(a, b));
    Ok(out)
}

/// One row of the run's `windows.csv` (only the columns validation uses).
#[derive(Debug, Clone, PartialEq)]
pub struct WindowRow {
    pub record: String,
    pub window: String,
    pub start_s: f64,
    pub end_s: f64,
    /// Window QT from the single lead chosen by the measurement, ms.
    pub qt_ms: Option<f64>,
    /// Window QT from the superimposed leads, ms.
    pub qt_superimposed_ms: Option<f64>,
    /// Window QRS duration (earliest onset to latest end across leads), ms.
    pub qrs_ms: Option<f64>,
    /// Window PR interval (earliest P onset to earliest QRS onset), ms.
    pub pr_ms: Option<f64>,
    /// Window P-wave duration (earliest P onset to latest P end), ms.
    pub p_ms: Option<f64>,
    /// Window T peak to T end (on the longest-QT lead), ms.
    pub tpe_ms: Option<f64>,
    /// Name of the lead of `qt_ms` (empty when none or the column is absent).
    pub qt_lead: String,
    /// Window QT dispersion (longest minus shortest valid lead QT), ms.
    pub qt_dispersion_ms: Option<f64>,
    /// Mean RR of the window, ms.
    pub rr_ms: Option<f64>,
    /// The window's flags (`flags` column, `;`-separated; empty when absent).
    pub flags: Vec<String>,
}

impl WindowRow {
    /// Whether the window carries `flag`.
    pub fn has_flag(&self, flag: &str) -> bool {
        self.flags.iter().any(|f| f == flag)
    }
}

/// Parse `windows.csv` text: a header row naming the columns, comma-separated values
/// without quoting. Required columns: `record, start_s, end_s`; `window`, `qt_ms`,
/// `qt_superimposed_ms`, `qrs_ms`, `pr_ms`, `p_ms`, `tpe_ms`, `qt_lead`,
/// `qt_dispersion_ms`, `rr_ms` and `flags` (`;`-separated) optional. Empty, `NaN`
/// or `NA` cells are missing values.
pub fn parse_windows_csv(text: &str, path: &Path) -> Result<Vec<WindowRow>, EvalError> {
    let bad = |line: usize, message: String| EvalError::Csv {
        path: path.to_path_buf(),
        line,
        message,
    };
    let mut lines = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty());
    let (_, head) = lines
        .next()
        .ok_or_else(|| bad(1, "empty file, expected a header row".into()))?;
    let cols: Vec<&str> = head
        .trim_end_matches('\r')
        .split(',')
        .map(str::trim)
        .collect();
    let col = |name: &str| cols.iter().position(|c| *c == name);
    let (rec_c, start_c, end_c) = match (col("record"), col("start_s"), col("end_s")) {
        (Some(a), Some(b), Some(c)) => (a, b, c),
        _ => {
            return Err(bad(
                1,
                "header must name the columns `record`, `start_s` and `end_s`".into(),
            ))
        }
    };
    let (win_c, qt_c, qts_c) = (col("window"), col("qt_ms"), col("qt_superimposed_ms"));
    let (qrs_c, pr_c) = (col("qrs_ms"), col("pr_ms"));
    let (p_c, tpe_c, lead_c) = (col("p_ms"), col("tpe_ms"), col("qt_lead"));
    let (disp_c, rr_c, flags_c) = (col("qt_dispersion_ms"), col("rr_ms"), col("flags"));
    let mut rows = Vec::new();
    for (i, l) in lines {
        let line = i + 1;
        let cells: Vec<&str> = l.trim_end_matches('\r').split(',').map(str::trim).collect();
        let get = |c: usize| cells.get(c).copied().unwrap_or("");
        let num =
            |c: Option<usize>, name: &str, required: bool| -> Result<Option<f64>, EvalError> {
                let Some(c) = c else { return Ok(None) };
                let s = get(c);
                if s.is_empty() || s.eq_ignore_ascii_case("nan") || s.eq_ignore_ascii_case("na") {
                    if required {
                        return Err(bad(line, format!("column `{name}` is empty")));
                    }
                    return Ok(None);
                }
                s.parse::<f64>()
                    .map(Some)
                    .map_err(|_| bad(line, format!("column `{name}`: `{s}` is not a number")))
            };
        rows.push(WindowRow {
            record: get(rec_c).to_string(),
            window: win_c.map(|c| get(c).to_string()).unwrap_or_default(),
            start_s: num(Some(start_c), "start_s", true)?.unwrap_or(0.0),
            end_s: num(Some(end_c), "end_s", true)?.unwrap_or(0.0),
            qt_ms: num(qt_c, "qt_ms", false)?,
            qt_superimposed_ms: num(qts_c, "qt_superimposed_ms", false)?,
            qrs_ms: num(qrs_c, "qrs_ms", false)?,
            pr_ms: num(pr_c, "pr_ms", false)?,
            p_ms: num(p_c, "p_ms", false)?,
            tpe_ms: num(tpe_c, "tpe_ms", false)?,
            qt_lead: lead_c.map(|c| get(c).to_string()).unwrap_or_default(),
            qt_dispersion_ms: num(disp_c, "qt_dispersion_ms", false)?,
            rr_ms: num(rr_c, "rr_ms", false)?,
            flags: flags_c
                .map(|c| {
                    get(c)
                        .split(';')
                        .map(str::trim)
                        .filter(|f| !f.is_empty())
                        .map(String::from)
                        .collect()
                })
                .unwrap_or_default(),
        });
    }
    Ok(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_with_counter_frequency_crlf_and_comments() {
        // The record line of QTDB sel100.hea (`250/360`), with CRLF line ends.
        let t = "# c\r\nsel100 2 250/360 225000\r\nsel100.dat 212 200(0) 11 1024 945 -13873 0 MLII\r\nsel100.dat 212 200(0) 11 1024 955 14507 0 V5\r\n";
        let h = parse_header(t, Path::new("sel100.hea")).unwrap();
        assert_eq!(h.fs, 250.0);
        assert_eq!(h.leads, vec!["MLII", "V5"]);
    }

    #[test]
    fn header_errors_name_the_problem() {
        let e = parse_header("r 2 500 10\nr.dat 16\n", Path::new("r.hea")).unwrap_err();
        assert!(e.to_string().contains("r.hea"), "{e}");
        assert!(e.to_string().contains("expected 2 signal lines"), "{e}");
        let e = parse_header("r 1 abc\n", Path::new("r.hea")).unwrap_err();
        assert!(e.to_string().contains("sampling frequency"), "{e}");
        // No rate: WFDB default 250 Hz.
        let h = parse_header("r 0\n", Path::new("r.hea")).unwrap();
        assert_eq!(h.fs, 250.0);
    }

    #[test]
    fn natural_order() {
        let mut v = vec!["sel100", "sel30", "10", "2", "sel1003"];
        v.sort_by(|a, b| natural_cmp(a, b));
        assert_eq!(v, vec!["2", "10", "sel30", "sel100", "sel1003"]);
    }

    #[test]
    fn windows_csv_columns_by_name() {
        let t = "record,window,start_s,end_s,n_beats,rr_ms,hr_bpm,qt_ms,qt_lead,qt_superimposed_ms\nsel100,0,0,10,12,800,75,400.5,MLII,\nsel100,1,10,20,12,800,75,NaN,MLII,398\n";
        let r = parse_windows_csv(t, Path::new("w.csv")).unwrap();
        assert_eq!(r.len(), 2);
        assert_eq!(r[0].qt_ms, Some(400.5));
        assert_eq!(r[0].qt_superimposed_ms, None);
        assert_eq!(r[1].qt_ms, None);
        assert_eq!(r[1].qt_superimposed_ms, Some(398.0));
        assert_eq!(r[1].start_s, 10.0);
        let e =
            parse_windows_csv("record,start_s,end_s\nx,abc,1\n", Path::new("w.csv")).unwrap_err();
        assert!(e.to_string().contains("line 2"), "{e}");
        assert!(e.to_string().contains("start_s"), "{e}");
        assert!(parse_windows_csv("a,b\n", Path::new("w.csv")).is_err());
        assert_eq!(r[0].rr_ms, Some(800.0));
        assert!(r[0].flags.is_empty());
        // Flags are `;`-separated; an empty cell is no flag.
        let t =
            "record,window,start_s,end_s,flags\nr,0,0,10,irregular;qt_inconsistent\nr,1,10,20,\n";
        let r = parse_windows_csv(t, Path::new("w.csv")).unwrap();
        assert!(r[0].has_flag("qt_inconsistent") && r[0].has_flag("irregular"));
        assert!(!r[0].has_flag("qt"));
        assert!(r[1].flags.is_empty() && r[1].rr_ms.is_none());
    }
}
