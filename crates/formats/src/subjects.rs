//! The optional subjects CSV that links records to study subjects.
//!
//! Columns (header row required, order free, names case-insensitive):
//! `record` (required), `subject`, `sex` (`M`/`F`/`male`/`female`, empty = unknown),
//! `age` (years), `timepoint` (free text; the value `baseline` marks the reference
//! of serial ΔQTc), `arm` (free text: the treatment arm of a parallel-group study,
//! e.g. `drug` / `placebo`, for the time-matched ΔΔQTc). Values given here override
//! what the record's own header says.

use crate::{FormatError, Metadata, Sex};
use std::collections::BTreeMap;
use std::path::Path;

/// One row of the subjects CSV.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct SubjectRow {
    pub record: String,
    pub subject: Option<String>,
    pub sex: Option<Sex>,
    pub age: Option<f64>,
    pub timepoint: Option<String>,
    pub arm: Option<String>,
}

impl SubjectRow {
    /// Overlay this row on a record's metadata (set fields win).
    pub fn apply(&self, meta: &mut Metadata) {
        if self.subject.is_some() {
            meta.subject.clone_from(&self.subject);
        }
        if self.sex.is_some() {
            meta.sex = self.sex;
        }
        if self.age.is_some() {
            meta.age = self.age;
        }
        if self.timepoint.is_some() {
            meta.timepoint.clone_from(&self.timepoint);
        }
        if self.arm.is_some() {
            meta.arm.clone_from(&self.arm);
        }
    }
}

/// Parse a sex field; `None` for empty or unknown spellings the caller must reject.
pub fn parse_sex(s: &str) -> Result<Option<Sex>, String> {
    match s.trim().to_ascii_lowercase().as_str() {
        "" | "u" | "unknown" | "?" | "x" => Ok(None),
        "m" | "male" => Ok(Some(Sex::Male)),
        "f" | "female" => Ok(Some(Sex::Female)),
        other => Err(format!(
            "sex must be one of M, F, male, female or empty, got `{other}`"
        )),
    }
}

/// Read a subjects CSV into a map keyed by record name.
pub fn read_subjects(path: &Path) -> Result<BTreeMap<String, SubjectRow>, FormatError> {
    let text = std::fs::read_to_string(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    parse_subjects(&text).map_err(|message| FormatError::Invalid {
        path: path.to_path_buf(),
        message,
    })
}

/// Parse subjects CSV text (see the module docs for the columns).
pub fn parse_subjects(text: &str) -> Result<BTreeMap<String, SubjectRow>, String> {
    let mut lines = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty() && !l.trim_start().starts_with('#'));
    let (_, header) = lines
        .next()
        .ok_or("empty subjects file: expected a header row")?;
    let cols: Vec<String> = header
        .split(',')
        .map(|c| c.trim().trim_matches('"').to_ascii_lowercase())
        .collect();
    let find = |name: &str| cols.iter().position(|c| c == name);
    let rec_col = find("record").ok_or_else(|| {
        format!(
            "header must have a `record` column; found columns: {}",
            cols.join(", ")
        )
    })?;
    let (sub_col, sex_col, age_col, tp_col) =
        (find("subject"), find("sex"), find("age"), find("timepoint"));
    let arm_col = find("arm");
    let mut out = BTreeMap::new();
    for (i, line) in lines {
        let lineno = i + 1;
        let cells: Vec<&str> = line
            .split(',')
            .map(|c| c.trim().trim_matches('"'))
            .collect();
        if cells.len() != cols.len() {
            return Err(format!(
                "line {lineno}: expected {} fields, got {}",
                cols.len(),
                cells.len()
            ));
        }
        let get = |c: Option<usize>| {
            c.map(|c| cells[c])
                .filter(|v| !v.is_empty())
                .map(str::to_string)
        };
        let record = cells[rec_col].to_string();
        if record.is_empty() {
            return Err(format!("line {lineno}: empty `record` field"));
        }
        let sex = match sex_col {
            Some(c) => {
                parse_sex(cells[c]).map_err(|e| format!("line {lineno}, column `sex`: {e}"))?
            }
            None => None,
        };
        let age = match get(age_col) {
            Some(a) => Some(
                a.parse::<f64>()
                    .ok()
                    .filter(|v| v.is_finite() && (0.0..=150.0).contains(v))
                    .ok_or_else(|| {
                        format!(
                            "line {lineno}, column `age`: expected years from 0 to 150, got `{a}`"
                        )
                    })?,
            ),
            None => None,
        };
        let row = SubjectRow {
            record: record.clone(),
            subject: get(sub_col),
            sex,
            age,
            timepoint: get(tp_col),
            arm: get(arm_col),
        };
        if out.insert(record.clone(), row).is_some() {
            return Err(format!("line {lineno}: record `{record}` listed twice"));
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn arm_column_is_read_and_applied() {
        let t = "record,subject,timepoint,arm\nr1,S01,baseline,drug\nr2,S02,2h,\n";
        let m = parse_subjects(t).unwrap();
        assert_eq!(m["r1"].arm.as_deref(), Some("drug"));
        assert_eq!(m["r2"].arm, None);
        let mut meta = Metadata::default();
        m["r1"].apply(&mut meta);
        assert_eq!(meta.arm.as_deref(), Some("drug"));
    }

    #[test]
    fn parses_rows_and_overrides_metadata() {
        let t =
            "record,subject,sex,age,timepoint\nr1,S01,F,34,baseline\nr2,S01,female,,post-dose\n";
        let m = parse_subjects(t).unwrap();
        assert_eq!(m["r1"].sex, Some(Sex::Female));
        assert_eq!(m["r1"].age, Some(34.0));
        assert_eq!(m["r2"].age, None);
        let mut meta = Metadata {
            age: Some(50.0),
            sex: Some(Sex::Male),
            ..Default::default()
        };
        m["r2"].apply(&mut meta);
        assert_eq!(meta.sex, Some(Sex::Female));
        assert_eq!(meta.age, Some(50.0));
        assert_eq!(meta.timepoint.as_deref(), Some("post-dose"));
    }

    #[test]
    fn bad_rows_name_line_and_column() {
        let e = parse_subjects("record,sex\nr1,Z\n").unwrap_err();
        assert!(e.contains("line 2") && e.contains("sex"), "{e}");
        let e = parse_subjects("record,age\nr1,abc\n").unwrap_err();
        assert!(e.contains("age") && e.contains("abc"), "{e}");
        let e = parse_subjects("subject\nS1\n").unwrap_err();
        assert!(e.contains("record"), "{e}");
        assert!(parse_subjects("").is_err());
        let e = parse_subjects("record\nr1\nr1\n").unwrap_err();
        assert!(e.contains("twice"), "{e}");
    }
}
