//! CSV recordings: one column per lead, a header row with the lead names.
//!
//! Layout accepted:
//! - optional leading comment lines starting with `#`; a comment of the form
//!   `fs=500` or `fs: 500` (any case, spaces allowed) gives the sampling rate in Hz;
//! - a header row of column names, separated by `,` (or `;` or tab when the header
//!   row contains no comma); fields may be double-quoted;
//! - an optional first column named `time`, `time_s` or `t` (any case) holding the
//!   time in seconds; it is not a lead, and when no rate is given elsewhere the rate
//!   is derived from it (the spacing must be uniform within 0.1 %);
//! - units in the column name as `II [uV]` or `II (uV)`; without units the values
//!   are taken as millivolts. Voltages are converted to mV; other units are kept.
//!
//! The rate is taken, in order, from the caller's option, the `fs=` comment,
//! then the time column. Both a `fs=` comment and a time column that disagree are
//! an error. Empty cells, `NaN` and non-numeric cells are errors naming the file,
//! line and column.

use std::path::Path;

use crate::{wfdb::to_mv_factor, FormatError, Lead, Metadata, Record};

fn bad(path: &Path, msg: String) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: msg,
    }
}

fn split_fields(line: &str, sep: char) -> Vec<String> {
    line.split(sep)
        .map(|f| {
            let f = f.trim();
            f.strip_prefix('"')
                .and_then(|x| x.strip_suffix('"'))
                .unwrap_or(f)
                .trim()
                .to_string()
        })
        .collect()
}

/// Split a column name into (name, units): `II [uV]` → (`II`, `uV`).
fn name_units(h: &str) -> (String, Option<String>) {
    for (o, c) in [('[', ']'), ('(', ')')] {
        if let (Some(i), true) = (h.rfind(o), h.ends_with(c)) {
            let name = h[..i].trim();
            let units = h[i + 1..h.len() - 1].trim();
            if !name.is_empty() && !units.is_empty() {
                return (name.to_string(), Some(units.to_string()));
            }
        }
    }
    (h.to_string(), None)
}

fn fs_of_comment(c: &str) -> Option<&str> {
    let c = c.trim();
    let lower = c.to_ascii_lowercase();
    let rest = lower.strip_prefix("fs")?;
    let rest = rest.trim_start();
    let rest = rest.strip_prefix('=').or_else(|| rest.strip_prefix(':'))?;
    let off = c.len() - rest.len();
    Some(
        c[off..]
            .trim()
            .trim_end_matches("hz")
            .trim_end_matches("Hz")
            .trim(),
    )
}

/// Read a CSV recording; `fs_hz` (if given) sets the sampling rate.
pub fn read_csv(path: &Path, fs_hz: Option<f64>) -> Result<Record, FormatError> {
    let text = crate::read_utf8(path)?;
    parse_csv(&text, path, fs_hz)
}

/// Parse CSV text (see the module documentation); `path` names the file in errors
/// and gives the record name (file stem).
pub fn parse_csv(text: &str, path: &Path, fs_hz: Option<f64>) -> Result<Record, FormatError> {
    let mut comments = Vec::new();
    let mut fs_comment: Option<(usize, f64)> = None;
    let mut lines = text
        .split('\n')
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim_end_matches('\r')));
    let mut header = None;
    for (ln, l) in lines.by_ref() {
        let t = l.trim();
        if let Some(c) = t.strip_prefix('#') {
            if let Some(v) = fs_of_comment(c) {
                let fs: f64 = v.parse().map_err(|_| {
                    bad(
                        path,
                        format!(
                            "line {ln}: sampling rate `{v}` in the `fs=` comment is not a number"
                        ),
                    )
                })?;
                fs_comment = Some((ln, fs));
            } else {
                comments.push(c.trim().to_string());
            }
        } else if !t.is_empty() {
            header = Some((ln, l));
            break;
        }
    }
    let Some((hln, hline)) = header else {
        return Err(bad(
            path,
            "empty file: no header row with lead names".into(),
        ));
    };
    let sep = if hline.contains(',') {
        ','
    } else if hline.contains(';') {
        ';'
    } else if hline.contains('\t') {
        '\t'
    } else {
        ','
    };
    let names = split_fields(hline, sep);
    if let Some(i) = names.iter().position(|n| n.is_empty()) {
        return Err(bad(
            path,
            format!("line {hln}: column {} has an empty name", i + 1),
        ));
    }
    let has_time = matches!(
        names[0].to_ascii_lowercase().as_str(),
        "time" | "time_s" | "t" | "time [s]" | "time (s)"
    );
    let first_lead = usize::from(has_time);
    if names.len() <= first_lead {
        return Err(bad(
            path,
            format!("line {hln}: no lead columns in the header row"),
        ));
    }
    let mut cols: Vec<Vec<f64>> = vec![Vec::new(); names.len()];
    for (ln, l) in lines {
        if l.trim().is_empty() || l.trim_start().starts_with('#') {
            continue;
        }
        let fields = split_fields(l, sep);
        if fields.len() != names.len() {
            return Err(bad(
                path,
                format!(
                    "line {ln}: {} fields, the header row has {}",
                    fields.len(),
                    names.len()
                ),
            ));
        }
        for (c, f) in fields.iter().enumerate() {
            let what = || format!("line {ln}, column {} (`{}`)", c + 1, names[c]);
            if f.is_empty() {
                return Err(bad(path, format!("{}: empty cell", what())));
            }
            let v: f64 = f
                .parse()
                .map_err(|_| bad(path, format!("{}: `{f}` is not a number", what())))?;
            if !v.is_finite() {
                return Err(bad(
                    path,
                    format!("{}: `{f}` is not a finite number", what()),
                ));
            }
            cols[c].push(v);
        }
    }
    let n = cols[0].len();
    if n == 0 {
        return Err(bad(path, "no data rows after the header row".into()));
    }
    let fs_time = if has_time {
        let t = &cols[0];
        if n < 2 {
            None
        } else {
            let dt = (t[n - 1] - t[0]) / (n - 1) as f64;
            if dt <= 0.0 {
                return Err(bad(path, "time column does not increase".into()));
            }
            for i in 1..n {
                if ((t[i] - t[i - 1]) - dt).abs() > 1e-3 * dt {
                    return Err(bad(
                        path,
                        format!("time column: spacing between data rows {i} and {} differs from the mean {dt} s", i + 1),
                    ));
                }
            }
            Some(1.0 / dt)
        }
    } else {
        None
    };
    if let (Some((ln, a)), Some(b)) = (fs_comment, fs_time) {
        if fs_hz.is_none() && ((a - b) / a).abs() > 1e-3 {
            return Err(bad(
                path,
                format!("line {ln}: `fs={a}` disagrees with the time column ({b} Hz)"),
            ));
        }
    }
    let fs = fs_hz
        .or(fs_comment.map(|x| x.1))
        .or(fs_time)
        .ok_or_else(|| {
            bad(
                path,
                "sampling rate unknown: give it as an option, as a `# fs=<Hz>` first comment line, or as a \
                 `time` column in seconds"
                    .into(),
            )
        })?;
    if !(fs.is_finite() && fs > 0.0) {
        return Err(bad(path, format!("sampling rate {fs} Hz must be positive")));
    }
    let mut leads = Vec::new();
    for (c, col) in cols.into_iter().enumerate().skip(first_lead) {
        let (name, units) = name_units(&names[c]);
        let units = units.unwrap_or_else(|| "mV".to_string());
        let (samples, units) = match to_mv_factor(&units) {
            Some(f) => (col.into_iter().map(|v| v * f).collect(), "mV".to_string()),
            None => (col, units),
        };
        leads.push(Lead {
            name,
            units,
            samples,
        });
    }
    let meta = Metadata {
        comments,
        ..Metadata::default()
    };
    Ok(Record::from_file(path, fs, leads, meta, Vec::new()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(s: &str, fs: Option<f64>) -> Result<Record, FormatError> {
        parse_csv(s, Path::new("x.csv"), fs)
    }

    #[test]
    fn fs_comment_and_units() {
        let r = p(
            "# fs=500\n# subject 7\nI,II [uV],V1 [mmHg]\n1,1000,3\n2,2000,4\n",
            None,
        )
        .unwrap();
        assert_eq!(r.fs, 500.0);
        assert_eq!(r.leads[1].name, "II");
        assert_eq!(r.leads[1].samples, vec![1.0, 2.0]);
        assert_eq!(r.leads[2].units, "mmHg");
        assert_eq!(r.meta.comments, vec!["subject 7"]);
        assert_eq!(r.name, "x");
    }

    #[test]
    fn time_column_gives_rate() {
        let r = p("time,II\n0,1\n0.004,2\n0.008,3\n", None).unwrap();
        assert!((r.fs - 250.0).abs() < 1e-9);
        assert_eq!(r.leads.len(), 1);
        let e = p("time,II\n0,1\n0.004,2\n0.009,3\n", None)
            .unwrap_err()
            .to_string();
        assert!(e.contains("spacing"), "{e}");
        // The option overrides.
        assert_eq!(p("time,II\n0,1\n0.004,2\n", Some(100.0)).unwrap().fs, 100.0);
    }

    #[test]
    fn bad_cells_name_line_and_column() {
        let e = p("# fs=250\nI,II\n1,2\n3,\n", None)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("x.csv") && e.contains("line 4, column 2 (`II`)") && e.contains("empty"),
            "{e}"
        );
        let e = p("I,II\n1,NaN\n", Some(1.0)).unwrap_err().to_string();
        assert!(e.contains("line 2, column 2") && e.contains("NaN"), "{e}");
        let e = p("I,II\n1,abc\n", Some(1.0)).unwrap_err().to_string();
        assert!(e.contains("`abc` is not a number"), "{e}");
        let e = p("I,II\n1\n", Some(1.0)).unwrap_err().to_string();
        assert!(e.contains("line 2: 1 fields"), "{e}");
        let e = p("I,II\n1,2\n", None).unwrap_err().to_string();
        assert!(e.contains("sampling rate unknown"), "{e}");
        let e = p("", None).unwrap_err().to_string();
        assert!(e.contains("empty file"), "{e}");
    }
}
