//! Time-matched ΔΔQTc of a parallel-group study (the study table, `study.csv`).
//!
//! What a cardiac-safety study reports from the per-subject ΔQTc (each record's
//! QTc by the preferred formula minus its subject's baseline QTc, see
//! [`crate::subject`]): per timepoint and arm the mean ΔQTc, and per timepoint
//! each arm against the reference arm (placebo) — ΔΔQTc, the difference of the
//! two arms' mean ΔQTc, with its two-sided 90 % confidence interval (common
//! practice after ICH E14: the upper bound of that interval is compared with
//! 10 ms; from memory).
//!
//! Conventions:
//! - A subject with several records at one timepoint (replicate ECGs) enters with
//!   the mean of their ΔQTc, once.
//! - The baseline timepoint itself (ΔQTc 0 by construction) is left out.
//! - The interval is Welch's: the difference of two independent means with
//!   unequal variances, standard error `sqrt(s1²/n1 + s0²/n0)` (sample SDs,
//!   n − 1), degrees of freedom by the Welch–Satterthwaite formula, quantile of
//!   Student's t at 0.95. Each arm needs two subjects at the timepoint; with no
//!   spread in either arm the interval is not given.
//! - Descriptive only: a study's statistical analysis plan (often a mixed model
//!   with baseline as covariate) decides the reported figures, and automated
//!   measurements must be over-read by a qualified clinician.

use crate::subject::SubjectResult;
use statrs::distribution::{ContinuousCDF, StudentsT};
use std::collections::BTreeMap;

/// Mean ΔQTc of one arm at one timepoint.
#[derive(Debug, Clone, PartialEq)]
pub struct ArmMean {
    pub timepoint: String,
    pub arm: String,
    /// Subjects with a ΔQTc at the timepoint.
    pub n: usize,
    pub mean_ms: f64,
    /// Sample SD (n − 1); None for one subject.
    pub sd_ms: Option<f64>,
}

/// One arm against the reference arm at one timepoint.
#[derive(Debug, Clone, PartialEq)]
pub struct Contrast {
    pub timepoint: String,
    pub arm: String,
    pub reference_arm: String,
    /// Mean ΔQTc of the arm minus that of the reference arm.
    pub ddqtc_ms: f64,
    pub se_ms: Option<f64>,
    pub df: Option<f64>,
    /// Two-sided 90 % interval (Welch).
    pub ci90_low_ms: Option<f64>,
    pub ci90_high_ms: Option<f64>,
}

/// The study table.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Study {
    pub means: Vec<ArmMean>,
    pub contrasts: Vec<Contrast>,
}

/// Welch's two-sided interval at `level` (e.g. 0.90) for mean(a) − mean(b):
/// (difference, standard error, degrees of freedom, low, high). The interval
/// parts are None when either sample has fewer than two values or both have
/// no spread.
#[allow(clippy::type_complexity)]
pub fn welch(
    a: &[f64],
    b: &[f64],
    level: f64,
) -> Option<(f64, Option<f64>, Option<f64>, Option<f64>, Option<f64>)> {
    if a.is_empty() || b.is_empty() {
        return None;
    }
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let var =
        |v: &[f64], m: f64| v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64;
    let (ma, mb) = (mean(a), mean(b));
    let d = ma - mb;
    if a.len() < 2 || b.len() < 2 {
        return Some((d, None, None, None, None));
    }
    let (qa, qb) = (var(a, ma) / a.len() as f64, var(b, mb) / b.len() as f64);
    let se2 = qa + qb;
    if se2 <= 0.0 || !se2.is_finite() {
        return Some((d, Some(0.0), None, None, None));
    }
    let df = se2 * se2 / (qa * qa / (a.len() - 1) as f64 + qb * qb / (b.len() - 1) as f64);
    let se = se2.sqrt();
    let t = StudentsT::new(0.0, 1.0, df)
        .ok()
        .map(|t| t.inverse_cdf(0.5 + level / 2.0));
    Some((
        d,
        Some(se),
        Some(df),
        t.map(|t| d - t * se),
        t.map(|t| d + t * se),
    ))
}

/// The study table of `subjects` (their arms and per-record ΔQTc), comparing every
/// other arm with `reference_arm` (case-insensitive) and leaving out
/// `baseline_timepoint`. Empty when no subject has an arm.
pub fn study(subjects: &[SubjectResult], reference_arm: &str, baseline_timepoint: &str) -> Study {
    // (timepoint, arm) -> per-subject mean ΔQTc, in first-seen order.
    let mut order: Vec<(String, String)> = Vec::new();
    let mut values: BTreeMap<(String, String), Vec<f64>> = BTreeMap::new();
    for s in subjects {
        let Some(arm) = &s.arm else { continue };
        let mut per_tp: Vec<(String, Vec<f64>)> = Vec::new();
        for r in &s.records {
            let (Some(tp), Some(d)) = (&r.timepoint, r.delta_qtc_ms) else {
                continue;
            };
            if tp.trim().eq_ignore_ascii_case(baseline_timepoint.trim()) || !d.is_finite() {
                continue;
            }
            match per_tp.iter_mut().find(|(t, _)| t == tp) {
                Some((_, v)) => v.push(d),
                None => per_tp.push((tp.clone(), vec![d])),
            }
        }
        for (tp, v) in per_tp {
            let key = (tp, arm.clone());
            if !order.contains(&key) {
                order.push(key.clone());
            }
            values
                .entry(key)
                .or_default()
                .push(v.iter().sum::<f64>() / v.len() as f64);
        }
    }
    let mut out = Study::default();
    for key in &order {
        let v = &values[key];
        let m = v.iter().sum::<f64>() / v.len() as f64;
        out.means.push(ArmMean {
            timepoint: key.0.clone(),
            arm: key.1.clone(),
            n: v.len(),
            mean_ms: m,
            sd_ms: (v.len() >= 2).then(|| {
                (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
            }),
        });
    }
    let is_ref = |a: &str| a.trim().eq_ignore_ascii_case(reference_arm.trim());
    for key in &order {
        if is_ref(&key.1) {
            continue;
        }
        let Some(rkey) = order.iter().find(|k| k.0 == key.0 && is_ref(&k.1)) else {
            continue;
        };
        if let Some((d, se, df, lo, hi)) = welch(&values[key], &values[rkey], 0.90) {
            out.contrasts.push(Contrast {
                timepoint: key.0.clone(),
                arm: key.1.clone(),
                reference_arm: rkey.1.clone(),
                ddqtc_ms: d,
                se_ms: se,
                df,
                ci90_low_ms: lo,
                ci90_high_ms: hi,
            });
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::subject::{RecordResult, SubjectFit};

    #[test]
    fn student_t_quantiles_match_the_printed_tables() {
        // Two-sided 90 % = one-sided 0.95 quantile of Student's t; printed tables
        // (e.g. Abramowitz and Stegun 1964, table 26.10; from memory):
        // df 1: 6.314, 5: 2.015, 10: 1.812, 30: 1.697.
        for (df, want) in [(1.0, 6.314), (5.0, 2.015), (10.0, 1.812), (30.0, 1.697)] {
            let t = StudentsT::new(0.0, 1.0, df).unwrap().inverse_cdf(0.95);
            assert!((t - want).abs() < 6e-4, "df {df}: {t} vs {want}");
        }
    }

    #[test]
    fn welch_interval_by_hand() {
        // a = 10, 12, 14 (mean 12, s² 4), b = 0, 4 (mean 2, s² 8).
        // d = 10; s²/n: 4/3 and 4 -> se² = 16/3, se = 2.3094;
        // df = (16/3)² / ((4/3)²/2 + 4²/1) = 28.444 / 16.889 = 1.6842 (Welch–Satterthwaite).
        let (d, se, df, lo, hi) = welch(&[10.0, 12.0, 14.0], &[0.0, 4.0], 0.90).unwrap();
        assert_eq!(d, 10.0);
        assert!((se.unwrap() - (16.0f64 / 3.0).sqrt()).abs() < 1e-12);
        let want_df = (16.0f64 / 3.0).powi(2) / ((4.0f64 / 3.0).powi(2) / 2.0 + 16.0);
        assert!((df.unwrap() - want_df).abs() < 1e-12);
        assert!((df.unwrap() - 1.6842).abs() < 1e-4);
        let t = StudentsT::new(0.0, 1.0, want_df).unwrap().inverse_cdf(0.95);
        assert!((lo.unwrap() - (10.0 - t * se.unwrap())).abs() < 1e-12);
        assert!((hi.unwrap() - (10.0 + t * se.unwrap())).abs() < 1e-12);
        // One value in an arm: the difference without an interval.
        let (d, se, ..) = welch(&[5.0], &[1.0, 3.0], 0.90).unwrap();
        assert_eq!((d, se), (3.0, None));
        // No spread in either arm: standard error 0, no interval.
        let (_, se, df, lo, _) = welch(&[5.0, 5.0], &[1.0, 1.0], 0.90).unwrap();
        assert_eq!((se, df, lo), (Some(0.0), None, None));
    }

    fn subject(id: &str, arm: Option<&str>, deltas: &[(&str, f64)]) -> SubjectResult {
        SubjectResult {
            subject: id.into(),
            fit: SubjectFit {
                linear: None,
                loglog: None,
                note: None,
            },
            baseline_record: None,
            baseline_assumed: false,
            arm: arm.map(str::to_string),
            records: deltas
                .iter()
                .enumerate()
                .map(|(k, &(tp, d))| RecordResult {
                    record: format!("{id}_{k}"),
                    timepoint: Some(tp.into()),
                    qt_ms: None,
                    rr_ms: None,
                    qtc_ms: None,
                    qtci_linear_ms: None,
                    qtci_loglog_ms: None,
                    delta_qtc_ms: Some(d),
                    delta_qtci_linear_ms: None,
                    delta_qtci_loglog_ms: None,
                })
                .collect(),
        }
    }

    #[test]
    fn time_matched_ddqtc_by_hand() {
        // Invented ΔQTc values (logic check). Drug at 2 h: subject D1 has
        // triplicate ECGs 9, 10, 11 (mean 10), D2 12, D3 14 -> 10, 12, 14.
        // Placebo at 2 h: 0 and 4. ΔΔQTc = 12 - 2 = 10 (the hand example of
        // `welch_interval_by_hand`). At 4 h only one placebo subject: no interval.
        let s = vec![
            subject(
                "D1",
                Some("drug"),
                &[
                    ("baseline", 0.0),
                    ("2h", 9.0),
                    ("2h", 10.0),
                    ("2h", 11.0),
                    ("4h", 5.0),
                ],
            ),
            subject(
                "D2",
                Some("drug"),
                &[("baseline", 0.0), ("2h", 12.0), ("4h", 7.0)],
            ),
            subject("D3", Some("drug"), &[("baseline", 0.0), ("2h", 14.0)]),
            subject(
                "P1",
                Some("Placebo"),
                &[("baseline", 0.0), ("2h", 0.0), ("4h", 1.0)],
            ),
            subject("P2", Some("Placebo"), &[("baseline", 0.0), ("2h", 4.0)]),
            subject("X1", None, &[("baseline", 0.0), ("2h", 100.0)]),
        ];
        let st = study(&s, "placebo", "baseline");
        let m: Vec<(&str, &str, usize, f64)> = st
            .means
            .iter()
            .map(|m| (m.timepoint.as_str(), m.arm.as_str(), m.n, m.mean_ms))
            .collect();
        assert_eq!(
            m,
            vec![
                ("2h", "drug", 3, 12.0),
                ("4h", "drug", 2, 6.0),
                ("2h", "Placebo", 2, 2.0),
                ("4h", "Placebo", 1, 1.0)
            ]
        );
        assert_eq!(st.contrasts.len(), 2);
        let c = &st.contrasts[0];
        assert_eq!(
            (
                c.timepoint.as_str(),
                c.arm.as_str(),
                c.reference_arm.as_str()
            ),
            ("2h", "drug", "Placebo")
        );
        assert_eq!(c.ddqtc_ms, 10.0);
        let (_, _, _, lo, hi) = welch(&[10.0, 12.0, 14.0], &[0.0, 4.0], 0.90).unwrap();
        assert_eq!((c.ci90_low_ms, c.ci90_high_ms), (lo, hi));
        let c4 = &st.contrasts[1];
        assert_eq!((c4.ddqtc_ms, c4.ci90_high_ms), (5.0, None));
        // No subject with an arm: an empty table.
        assert_eq!(study(&s[5..], "placebo", "baseline"), Study::default());
    }
}
