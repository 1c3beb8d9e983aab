//! Per-subject QT/RR regression, individually corrected QTc and serial ΔQTc.
//!
//! When a subjects table links records to subjects, all measured windows of one
//! subject are pooled and QT is fitted against RR (RR in seconds, QT in ms) by
//! ordinary least squares, in two forms:
//! - linear `QT = a + b·RR`, giving `QTcI = QT + b·(1 − RR)`;
//! - log-log `ln QT = ln a + b·ln RR`, giving `QTcI = QT / RR^b`.
//!
//! Both corrections return QT unchanged at RR = 1 s, like the population formulas.
//! A fit is refused (None, with the reason) when the subject has too few windows or
//! the RR values span too narrow a range for a slope to mean anything.
//!
//! Serial ECGs: ΔQTc of each record = its QTc − the baseline record's QTc, for the
//! preferred formula and the individual corrections. The baseline is the record
//! whose timepoint equals the configured name (case-insensitive); if the subject
//! has none, the first record given for that subject is used and
//! `baseline_assumed` says so.

use serde::{Deserialize, Serialize};

/// Settings of the per-subject analysis.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct SubjectConfig {
    /// Fewest windows (QT/RR pairs) to fit a subject; default 10.
    pub min_windows: usize,
    /// Smallest RR range (max − min, ms) over the subject's windows to fit a slope; default 100.
    pub min_rr_range_ms: f64,
    /// Timepoint name of the baseline record; default `baseline`.
    pub baseline_timepoint: String,
    /// Arm (subjects CSV `arm`) the other arms are compared with in the
    /// time-matched ΔΔQTc of `study.csv` (case-insensitive); default `placebo`.
    pub reference_arm: String,
}

impl Default for SubjectConfig {
    fn default() -> Self {
        Self {
            min_windows: 10,
            min_rr_range_ms: 100.0,
            baseline_timepoint: "baseline".to_string(),
            reference_arm: "placebo".to_string(),
        }
    }
}

impl SubjectConfig {
    /// Range checks under `prefix` (e.g. `measure.subject`).
    pub fn check(&self, prefix: &str) -> tendline_params::Checker {
        let mut c = tendline_params::Checker::new(prefix);
        c.range(
            "min_windows",
            self.min_windows as f64,
            3.0,
            100_000.0,
            "windows",
        )
        .range("min_rr_range_ms", self.min_rr_range_ms, 0.0, 2000.0, "ms")
        .require(
            !self.baseline_timepoint.trim().is_empty(),
            "baseline_timepoint",
            "a non-empty name",
            "\"\"",
        )
        .require(
            !self.reference_arm.trim().is_empty(),
            "reference_arm",
            "a non-empty name",
            "\"\"",
        );
        c
    }
}

/// A least-squares line `y = intercept + slope·x`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Fit {
    pub intercept: f64,
    pub slope: f64,
    /// Coefficient of determination.
    pub r2: f64,
    /// Number of points fitted.
    pub n: usize,
}

/// Ordinary least squares of `y` on `x`; None with fewer than two distinct x.
pub fn ols(x: &[f64], y: &[f64]) -> Option<Fit> {
    let n = x.len().min(y.len());
    if n < 2 {
        return None;
    }
    let mx = x[..n].iter().sum::<f64>() / n as f64;
    let my = y[..n].iter().sum::<f64>() / n as f64;
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for i in 0..n {
        let (dx, dy) = (x[i] - mx, y[i] - my);
        sxx += dx * dx;
        sxy += dx * dy;
        syy += dy * dy;
    }
    if sxx <= 0.0 || !sxx.is_finite() {
        return None;
    }
    let slope = sxy / sxx;
    let r2 = if syy > 0.0 {
        sxy * sxy / (sxx * syy)
    } else {
        1.0
    };
    Some(Fit {
        intercept: my - slope * mx,
        slope,
        r2,
        n,
    })
}

/// One measured window of a subject.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QtRr {
    pub qt_ms: f64,
    pub rr_ms: f64,
}

/// One record of a subject, as given to [`analyse`].
#[derive(Debug, Clone, PartialEq)]
pub struct SubjectRecord {
    pub subject: String,
    pub record: String,
    pub timepoint: Option<String>,
    /// Treatment arm of a parallel-group study (subjects CSV `arm`), if given.
    pub arm: Option<String>,
    /// The record's windows with both QT and RR measured.
    pub windows: Vec<QtRr>,
    /// The record's QTc by the preferred formula (record summary), if any.
    pub qtc_ms: Option<f64>,
}

/// The individual QT/RR relation of a subject.
#[derive(Debug, Clone, PartialEq)]
pub struct SubjectFit {
    /// `QT = a + b·RR` (ms, RR in s): slope `b` in ms per s.
    pub linear: Option<Fit>,
    /// `ln QT = ln a + b·ln RR`: `b` is the exponent.
    pub loglog: Option<Fit>,
    /// Why no fit was made, if none was.
    pub note: Option<String>,
}

/// Results for one record of a subject.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordResult {
    pub record: String,
    pub timepoint: Option<String>,
    /// Median over the record's windows.
    pub qt_ms: Option<f64>,
    pub rr_ms: Option<f64>,
    /// Preferred-formula QTc as given.
    pub qtc_ms: Option<f64>,
    /// Median over windows of QT + b·(1 − RR).
    pub qtci_linear_ms: Option<f64>,
    /// Median over windows of QT / RR^b.
    pub qtci_loglog_ms: Option<f64>,
    /// Differences from the baseline record (None for the baseline's own missing values).
    pub delta_qtc_ms: Option<f64>,
    pub delta_qtci_linear_ms: Option<f64>,
    pub delta_qtci_loglog_ms: Option<f64>,
}

/// Everything about one subject.
#[derive(Debug, Clone, PartialEq)]
pub struct SubjectResult {
    pub subject: String,
    pub fit: SubjectFit,
    /// Record used as baseline.
    pub baseline_record: Option<String>,
    /// No record carried the baseline timepoint; the first one was used.
    pub baseline_assumed: bool,
    /// The subject's arm: the one its records name (None when none does or they
    /// name different arms; `note` says so then).
    pub arm: Option<String>,
    pub records: Vec<RecordResult>,
}

/// Linear individual correction `QT + b·(1 − RR)` (QT ms, RR s, b ms/s).
pub fn qtci_linear(qt_ms: f64, rr_s: f64, slope: f64) -> f64 {
    qt_ms + slope * (1.0 - rr_s)
}

/// Log-log individual correction `QT / RR^b` (QT ms, RR s).
pub fn qtci_loglog(qt_ms: f64, rr_s: f64, exponent: f64) -> f64 {
    qt_ms / rr_s.powf(exponent)
}

/// Fit one subject's pooled windows.
pub fn fit_subject(windows: &[QtRr], cfg: &SubjectConfig) -> SubjectFit {
    let w: Vec<QtRr> = windows
        .iter()
        .copied()
        .filter(|w| w.qt_ms.is_finite() && w.rr_ms.is_finite() && w.qt_ms > 0.0 && w.rr_ms > 0.0)
        .collect();
    let none = |note: String| SubjectFit {
        linear: None,
        loglog: None,
        note: Some(note),
    };
    if w.len() < cfg.min_windows {
        return none(format!(
            "{} windows with QT and RR, fewer than min_windows = {}",
            w.len(),
            cfg.min_windows
        ));
    }
    let lo = w.iter().map(|w| w.rr_ms).fold(f64::INFINITY, f64::min);
    let hi = w.iter().map(|w| w.rr_ms).fold(f64::NEG_INFINITY, f64::max);
    if hi - lo < cfg.min_rr_range_ms {
        return none(format!(
            "RR range {:.0} ms narrower than min_rr_range_ms = {:.0} ms",
            hi - lo,
            cfg.min_rr_range_ms
        ));
    }
    let rr: Vec<f64> = w.iter().map(|w| w.rr_ms / 1000.0).collect();
    let qt: Vec<f64> = w.iter().map(|w| w.qt_ms).collect();
    let lrr: Vec<f64> = rr.iter().map(|r| r.ln()).collect();
    let lqt: Vec<f64> = qt.iter().map(|q| q.ln()).collect();
    SubjectFit {
        linear: ols(&rr, &qt),
        loglog: ols(&lrr, &lqt),
        note: None,
    }
}

fn med(v: impl Iterator<Item = f64>) -> Option<f64> {
    let mut v: Vec<f64> = v.filter(|x| x.is_finite()).collect();
    (!v.is_empty()).then(|| crate::align::median(&mut v))
}

/// Group records by subject (first-appearance order), fit each subject, correct and
/// compute ΔQTc from the baseline.
pub fn analyse(records: &[SubjectRecord], cfg: &SubjectConfig) -> Vec<SubjectResult> {
    let mut order: Vec<&str> = Vec::new();
    for r in records {
        if !order.contains(&r.subject.as_str()) {
            order.push(&r.subject);
        }
    }
    order
        .into_iter()
        .map(|sid| {
            let recs: Vec<&SubjectRecord> = records.iter().filter(|r| r.subject == sid).collect();
            let pooled: Vec<QtRr> = recs
                .iter()
                .flat_map(|r| r.windows.iter().copied())
                .collect();
            let fit = fit_subject(&pooled, cfg);
            let mut results: Vec<RecordResult> = recs
                .iter()
                .map(|r| {
                    let lin = fit.linear.map(|f| f.slope);
                    let ll = fit.loglog.map(|f| f.slope);
                    RecordResult {
                        record: r.record.clone(),
                        timepoint: r.timepoint.clone(),
                        qt_ms: med(r.windows.iter().map(|w| w.qt_ms)),
                        rr_ms: med(r.windows.iter().map(|w| w.rr_ms)),
                        qtc_ms: r.qtc_ms,
                        qtci_linear_ms: lin.and_then(|b| {
                            med(r
                                .windows
                                .iter()
                                .map(|w| qtci_linear(w.qt_ms, w.rr_ms / 1000.0, b)))
                        }),
                        qtci_loglog_ms: ll.and_then(|b| {
                            med(r
                                .windows
                                .iter()
                                .map(|w| qtci_loglog(w.qt_ms, w.rr_ms / 1000.0, b)))
                        }),
                        delta_qtc_ms: None,
                        delta_qtci_linear_ms: None,
                        delta_qtci_loglog_ms: None,
                    }
                })
                .collect();
            let named = recs.iter().position(|r| {
                r.timepoint
                    .as_deref()
                    .is_some_and(|t| t.trim().eq_ignore_ascii_case(cfg.baseline_timepoint.trim()))
            });
            let (base, assumed) = match named {
                Some(i) => (Some(i), false),
                None => ((!recs.is_empty()).then_some(0), true),
            };
            if let Some(b) = base {
                let br = results[b].clone();
                let d = |x: Option<f64>, y: Option<f64>| x.zip(y).map(|(x, y)| x - y);
                for r in &mut results {
                    r.delta_qtc_ms = d(r.qtc_ms, br.qtc_ms);
                    r.delta_qtci_linear_ms = d(r.qtci_linear_ms, br.qtci_linear_ms);
                    r.delta_qtci_loglog_ms = d(r.qtci_loglog_ms, br.qtci_loglog_ms);
                }
            }
            let mut arms: Vec<&str> = recs.iter().filter_map(|r| r.arm.as_deref()).collect();
            arms.sort_unstable();
            arms.dedup();
            let mut fit = fit;
            let arm = match arms.as_slice() {
                [a] => Some(a.to_string()),
                [] => None,
                many => {
                    let n = format!("records name different arms ({}); no arm", many.join(", "));
                    fit.note = Some(match fit.note.take() {
                        Some(x) => format!("{x}; {n}"),
                        None => n,
                    });
                    None
                }
            };
            SubjectResult {
                subject: sid.to_string(),
                fit,
                baseline_record: base.map(|b| recs[b].record.clone()),
                baseline_assumed: assumed,
                arm,
                records: results,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lcg(state: &mut u64) -> f64 {
        *state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((*state >> 11) as f64) / ((1u64 << 53) as f64)
    }

    // Windows generated from a known power law QT = a·RR^b (the log-log model of
    // individual QT/RR relations, common practice), with small multiplicative noise.
    fn power_law(a: f64, b: f64, n: usize, seed: u64) -> Vec<QtRr> {
        let mut s = seed;
        (0..n)
            .map(|_| {
                let rr = 0.55 + 0.7 * lcg(&mut s);
                let noise = 1.0 + 0.004 * (lcg(&mut s) - 0.5);
                QtRr {
                    qt_ms: a * rr.powf(b) * noise,
                    rr_ms: rr * 1000.0,
                }
            })
            .collect()
    }

    #[test]
    fn loglog_regression_recovers_exponent() {
        for (a, b) in [(400.0, 0.33), (410.0, 0.25), (390.0, 0.45)] {
            let w = power_law(a, b, 200, 42);
            let f = fit_subject(&w, &SubjectConfig::default());
            let ll = f.loglog.expect("fit");
            assert!((ll.slope - b).abs() < 0.01, "b = {b}, got {}", ll.slope);
            assert!(
                (ll.intercept.exp() - a).abs() < 2.0,
                "a = {a}, got {}",
                ll.intercept.exp()
            );
            // Individually corrected QTc is flat in RR: every window corrects to ≈ a.
            for x in &w {
                assert!((qtci_loglog(x.qt_ms, x.rr_ms / 1000.0, ll.slope) - a).abs() < 3.0);
            }
        }
    }

    #[test]
    fn linear_regression_exact_on_a_line() {
        let w: Vec<QtRr> = (0..20)
            .map(|i| {
                let rr = 0.6 + 0.03 * i as f64;
                QtRr {
                    qt_ms: 250.0 + 160.0 * rr,
                    rr_ms: rr * 1000.0,
                }
            })
            .collect();
        let f = fit_subject(&w, &SubjectConfig::default()).linear.unwrap();
        assert!((f.slope - 160.0).abs() < 1e-9 && (f.intercept - 250.0).abs() < 1e-9);
        assert!((qtci_linear(w[0].qt_ms, w[0].rr_ms / 1000.0, f.slope) - 410.0).abs() < 1e-9);
    }

    #[test]
    fn too_few_or_too_narrow_is_refused_with_reason() {
        let cfg = SubjectConfig::default();
        let f = fit_subject(&power_law(400.0, 0.3, 5, 1), &cfg);
        assert!(f.linear.is_none() && f.note.as_deref().unwrap().contains("min_windows"));
        let narrow: Vec<QtRr> = (0..20)
            .map(|i| QtRr {
                qt_ms: 400.0,
                rr_ms: 800.0 + i as f64,
            })
            .collect();
        let f = fit_subject(&narrow, &cfg);
        assert!(f.loglog.is_none() && f.note.as_deref().unwrap().contains("RR range"));
    }

    #[test]
    fn serial_delta_from_named_or_first_baseline() {
        let w = power_law(400.0, 0.3, 30, 9);
        let mk = |rec: &str, tp: Option<&str>, qtc: f64, shift: f64| SubjectRecord {
            arm: None,
            subject: "S1".into(),
            record: rec.into(),
            timepoint: tp.map(str::to_string),
            windows: w
                .iter()
                .map(|x| QtRr {
                    qt_ms: x.qt_ms + shift,
                    rr_ms: x.rr_ms,
                })
                .collect(),
            qtc_ms: Some(qtc),
        };
        let recs = vec![
            mk("r2", Some("day2"), 430.0, 20.0),
            mk("r1", Some("Baseline"), 410.0, 0.0),
        ];
        let out = analyse(&recs, &SubjectConfig::default());
        assert_eq!(out.len(), 1);
        let s = &out[0];
        assert_eq!(s.baseline_record.as_deref(), Some("r1"));
        assert!(!s.baseline_assumed);
        assert_eq!(s.records[0].delta_qtc_ms, Some(20.0));
        assert_eq!(s.records[1].delta_qtc_ms, Some(0.0));
        // A 20-ms QT shift at identical RR moves the individual QTc by ≈ 20 ms too.
        let d = s.records[0].delta_qtci_linear_ms.unwrap();
        assert!((d - 20.0).abs() < 1.0, "{d}");

        let recs = vec![mk("a", None, 400.0, 0.0), mk("b", Some("x"), 405.0, 0.0)];
        let s = &analyse(&recs, &SubjectConfig::default())[0];
        assert!(s.baseline_assumed);
        assert_eq!(s.baseline_record.as_deref(), Some("a"));
        assert_eq!(s.records[1].delta_qtc_ms, Some(5.0));
    }
}
