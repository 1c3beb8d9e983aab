//! Whether the confidence the tool gives each mark tells good marks from bad:
//! the scored marks of a fiducial split into four equal groups by confidence
//! (quartiles), with the error of each group.
//!
//! A user who reads only the low-confidence marks first (an over-read queue)
//! needs the confidence to rank the errors: the mean absolute error should
//! fall from the lowest quartile to the highest. The confidences come from the
//! run's part files (`parts/<record>.json`, the same values as the
//! `*_confidence` datasets of `results.h5`); a mark is looked up by record,
//! channel (global, or the lead's signal index), fiducial and sample.

use crate::score::RecordScore;
use crate::waves::Fiducial;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashMap};
use std::path::Path;
use tendline_store::{Data, Group};

/// Which marks of a record a score channel refers to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Marks {
    /// `marks/global` (channel 0 of the global score).
    Global,
    /// `marks/leads/<NN>` with NN the score channel (the signal index).
    Leads,
}

/// Confidence of every mark of one record: (channel, fiducial, sample) ->
/// confidence; the global marks use channel 0 in their own map.
#[derive(Debug, Clone, Default)]
pub struct RecordConfidence {
    global: HashMap<(Fiducial, i64), f32>,
    leads: HashMap<(u8, Fiducial, i64), f32>,
}

impl RecordConfidence {
    /// The confidence of the mark at `sample`, if the run has one there.
    pub fn get(&self, marks: Marks, chan: u8, f: Fiducial, sample: i64) -> Option<f32> {
        match marks {
            Marks::Global => self.global.get(&(f, sample)).copied(),
            Marks::Leads => self.leads.get(&(chan, f, sample)).copied(),
        }
    }

    /// Collect the marks of a record's group tree (`marks/global`,
    /// `marks/leads/<NN>`). Marks without a finite confidence are left out.
    pub fn from_group(g: &Group) -> Self {
        let mut out = RecordConfidence::default();
        let Some(marks) = g.groups.get("marks") else {
            return out;
        };
        let pairs = |g: &Group, f: Fiducial| -> Vec<(i64, f32)> {
            let (Some(s), Some(c)) = (
                g.datasets.get(f.key()),
                g.datasets.get(&format!("{}_confidence", f.key())),
            ) else {
                return Vec::new();
            };
            match (&s.data, &c.data) {
                (Data::I64(s), Data::F32(c)) => s
                    .iter()
                    .zip(c)
                    .filter(|(s, c)| **s >= 0 && c.is_finite())
                    .map(|(s, c)| (*s, *c))
                    .collect(),
                _ => Vec::new(),
            }
        };
        if let Some(gl) = marks.groups.get("global") {
            for f in Fiducial::ALL {
                for (s, c) in pairs(gl, f) {
                    out.global.insert((f, s), c);
                }
            }
        }
        if let Some(leads) = marks.groups.get("leads") {
            for (name, lg) in &leads.groups {
                let Ok(chan) = name.parse::<u8>() else {
                    continue;
                };
                for f in Fiducial::ALL {
                    for (s, c) in pairs(lg, f) {
                        out.leads.insert((chan, f, s), c);
                    }
                }
            }
        }
        out
    }
}

/// Only the part of a part file the calibration reads (the rest is skipped
/// without being built).
#[derive(Deserialize)]
struct PartMarks {
    group: PartGroup,
}

#[derive(Deserialize)]
struct PartGroup {
    #[serde(default)]
    groups: PartGroups,
}

#[derive(Deserialize, Default)]
struct PartGroups {
    marks: Option<Group>,
}

/// Read the confidences of `record` from `<run_dir>/parts/<record>.json`.
/// `Err` names the file and the problem (missing or unreadable).
pub fn load(run_dir: &Path, record: &str) -> Result<RecordConfidence, String> {
    let path = run_dir.join("parts").join(format!("{record}.json"));
    let bytes = std::fs::read(&path).map_err(|e| format!("{}: {e}", path.display()))?;
    let p: PartMarks = serde_json::from_slice(&bytes)
        .map_err(|e| format!("{}: not a part file: {e}", path.display()))?;
    let mut g = Group::default();
    if let Some(m) = p.group.groups.marks {
        g.groups.insert("marks".into(), m);
    }
    Ok(RecordConfidence::from_group(&g))
}

/// One confidence quartile of one fiducial.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationRow {
    pub fiducial: Fiducial,
    /// 1 = lowest confidence.
    pub quartile: u8,
    pub confidence_min: f64,
    pub confidence_max: f64,
    pub n: usize,
    /// Mean absolute error, ms.
    pub mean_abs_ms: f64,
    /// SD of the error, ms (n − 1 denominator; 0 for one mark).
    pub sd_ms: f64,
}

/// The calibration rows of `fiducials` over the scored (matched) marks of
/// `scores`: each mark's confidence is looked up with `conf(record, chan,
/// fiducial, sample)`; marks without one are left out. The marks are sorted
/// by confidence (ties by error, so the split does not depend on input
/// order) and cut into four groups of sizes as equal as possible (the first
/// `n mod 4` groups one larger). Fewer than 8 marks: no rows.
pub fn rows(
    scores: &[RecordScore],
    fiducials: &[Fiducial],
    conf: &dyn Fn(&str, u8, Fiducial, i64) -> Option<f32>,
) -> Vec<CalibrationRow> {
    let mut out = Vec::new();
    for &f in fiducials {
        let mut pts: Vec<(f64, f64)> = Vec::new();
        for s in scores {
            for e in s.errors.get(&f).map(Vec::as_slice).unwrap_or_default() {
                let sample = s
                    .beats
                    .get(&e.chan)
                    .and_then(|(_, test)| test.get(e.test_index))
                    .and_then(|b| b.get(f));
                if let Some(c) = sample.and_then(|x| conf(&s.record, e.chan, f, x)) {
                    pts.push((c as f64, e.error_ms));
                }
            }
        }
        out.extend(quartile_rows(f, pts));
    }
    out
}

/// [`rows`] for one fiducial's (confidence, error ms) points.
pub fn quartile_rows(f: Fiducial, mut pts: Vec<(f64, f64)>) -> Vec<CalibrationRow> {
    let n = pts.len();
    if n < 8 {
        return Vec::new();
    }
    pts.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    let mut rows = Vec::with_capacity(4);
    let mut start = 0;
    for q in 0..4 {
        let len = n / 4 + usize::from(q < n % 4);
        let g = &pts[start..start + len];
        start += len;
        let m = g.len() as f64;
        let mean = g.iter().map(|p| p.1).sum::<f64>() / m;
        let ss: f64 = g.iter().map(|p| (p.1 - mean).powi(2)).sum();
        rows.push(CalibrationRow {
            fiducial: f,
            quartile: q as u8 + 1,
            confidence_min: g[0].0,
            confidence_max: g[g.len() - 1].0,
            n: g.len(),
            mean_abs_ms: g.iter().map(|p| p.1.abs()).sum::<f64>() / m,
            sd_ms: if g.len() > 1 {
                (ss / (m - 1.0)).sqrt()
            } else {
                0.0
            },
        });
    }
    rows
}

/// Confidences of every record that has them, with a warning for each that
/// has not (the section is then computed from the others).
pub fn load_all(
    run_dir: &Path,
    records: &[String],
    warnings: &mut Vec<String>,
) -> BTreeMap<String, RecordConfidence> {
    let mut out = BTreeMap::new();
    let mut missing = Vec::new();
    for r in records {
        match load(run_dir, r) {
            Ok(c) => {
                out.insert(r.clone(), c);
            }
            Err(e) => missing.push(e),
        }
    }
    if let Some(first) = missing.first() {
        warnings.push(format!(
            "confidence calibration without {} record(s): {first}{}",
            missing.len(),
            if missing.len() > 1 {
                " (and others)"
            } else {
                ""
            }
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quartiles_are_equal_groups_in_confidence_order() {
        // 10 marks: groups of 3, 3, 2, 2. Confidence i/10, error 10 - i ms:
        // the lowest confidences carry the largest errors.
        let pts: Vec<(f64, f64)> = (0..10)
            .map(|i| (i as f64 / 10.0, 10.0 - i as f64))
            .collect();
        let mut shuffled = pts.clone();
        shuffled.reverse();
        let r = quartile_rows(Fiducial::TEnd, shuffled);
        assert_eq!(r.iter().map(|x| x.n).collect::<Vec<_>>(), [3, 3, 2, 2]);
        // First group: confidences 0.0-0.2, errors 10, 9, 8.
        assert_eq!((r[0].confidence_min, r[0].confidence_max), (0.0, 0.2));
        assert!((r[0].mean_abs_ms - 9.0).abs() < 1e-12);
        assert!((r[0].sd_ms - 1.0).abs() < 1e-12);
        // Last group: confidences 0.8-0.9, errors 2, 1: mean 1.5, SD sqrt(0.5).
        assert_eq!(r[3].quartile, 4);
        assert!((r[3].mean_abs_ms - 1.5).abs() < 1e-12);
        assert!((r[3].sd_ms - 0.5f64.sqrt()).abs() < 1e-12);
        // The mean absolute error uses |error|, the SD the signed error.
        let signed: Vec<(f64, f64)> = (0..8)
            .map(|i| (0.5, if i % 2 == 0 { -4.0 } else { 4.0 }))
            .collect();
        let r = quartile_rows(Fiducial::QrsOn, signed);
        assert!(r.iter().all(|x| (x.mean_abs_ms - 4.0).abs() < 1e-12));
        // Too few marks for four groups worth reading: no rows.
        assert!(quartile_rows(Fiducial::QrsOn, vec![(0.5, 1.0); 7]).is_empty());
    }

    #[test]
    fn marks_are_looked_up_by_channel_fiducial_and_sample() {
        let mut g = Group::default();
        let marks = g.group("marks");
        let gl = marks.group("global");
        gl.dataset("t_end", Data::I64(vec![100, -1, 300]));
        gl.dataset("t_end_confidence", Data::F32(vec![0.5, f32::NAN, 0.25]));
        let l1 = marks.group("leads").group("01");
        l1.dataset("qrs_on", Data::I64(vec![40]));
        l1.dataset("qrs_on_confidence", Data::F32(vec![0.75]));
        let c = RecordConfidence::from_group(&g);
        assert_eq!(c.get(Marks::Global, 0, Fiducial::TEnd, 100), Some(0.5));
        assert_eq!(c.get(Marks::Global, 0, Fiducial::TEnd, 300), Some(0.25));
        assert_eq!(c.get(Marks::Global, 0, Fiducial::TEnd, 200), None);
        assert_eq!(c.get(Marks::Leads, 1, Fiducial::QrsOn, 40), Some(0.75));
        assert_eq!(c.get(Marks::Leads, 0, Fiducial::QrsOn, 40), None);
        assert_eq!(c.get(Marks::Global, 0, Fiducial::QrsOn, 40), None);
    }

    #[test]
    fn a_missing_part_file_is_an_error_naming_it() {
        let d = std::env::temp_dir().join(format!("tendline-cal-{}", std::process::id()));
        let e = load(&d, "rec7").unwrap_err();
        assert!(e.contains("rec7.json"), "{e}");
        let mut w = Vec::new();
        assert!(load_all(&d, &["rec7".into()], &mut w).is_empty());
        assert!(w[0].contains("rec7.json"), "{}", w[0]);
    }
}
