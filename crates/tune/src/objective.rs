//! The objective a search minimises, and the per-record results it is
//! computed from.
//!
//! For a set of records, per fiducial f (pooled over the records' scored beats):
//!
//! ```text
//! J = Σ_f w_f · ( SD_f / tol_f + λ_Se · (100 − Se_f) + λ_+P · (100 − +P_f)
//!                 + λ_bias · |mean_f| / tol_f )
//! ```
//!
//! * SD_f: sample SD (n − 1) of the signed errors test − reference (ms) of the
//!   marks found within the fiducial window (150 ms), as in `tendline validate`;
//!   fewer than two errors count as an SD of 150 ms (the window, a choice).
//! * tol_f: the CSE Working Party (1985) tolerances for the SD, from memory:
//!   P on 10.2, P end 12.7, QRS on 6.5, QRS end 11.6, T end 30.6 ms. The CSE
//!   gives none for peaks; this crate uses P peak 10.2 and T peak 30.6 ms
//!   (a choice: the tolerance of the wave's own onset/end).
//! * Se_f, +P_f: sensitivity and positive predictivity of the fiducial in
//!   percent (scoring rules of `tendline_evaluate::score`); λ_Se = λ_+P = 0.1
//!   per percentage point by default (a choice: losing 10 % of a fiducial's
//!   marks costs as much as one tolerance of SD, so a candidate cannot buy a
//!   lower SD by dropping its hardest beats).
//! * w_f: 1 for P on, P end, QRS on, QRS end, T peak and T end; 0 for P
//!   peak (two fiducials per wave). A fiducial without reference marks in the
//!   record set is left out.
//! * mean_f: mean error (ms); λ_bias = 0 by default (the CSE criterion is on
//!   the SD), set it to also penalise a systematic shift.
//!
//! Everything is configurable in the space file's `[objective]` table.

use serde::Deserialize;
use std::collections::BTreeMap;
use tendline_evaluate::matching::Counts;
use tendline_evaluate::stats;
use tendline_evaluate::Fiducial;

/// Fiducials in the order of [`Fiducial::ALL`].
pub const N_FID: usize = Fiducial::ALL.len();

/// SD used when fewer than two errors exist (ms): the fiducial window.
pub const MISSING_SD_MS: f64 = 150.0;

/// Objective parameters (table `[objective]` of the space file).
#[derive(Debug, Clone, PartialEq)]
pub struct Objective {
    /// Weight per fiducial, [`Fiducial::ALL`] order.
    pub weights: [f64; N_FID],
    /// SD tolerance per fiducial (ms).
    pub tolerance_ms: [f64; N_FID],
    /// Cost per percentage point of sensitivity below 100.
    pub sensitivity_penalty: f64,
    /// Cost per percentage point of positive predictivity below 100.
    pub ppv_penalty: f64,
    /// Weight of |mean error| / tolerance (0 = the SD alone).
    pub bias_penalty: f64,
}

impl Default for Objective {
    fn default() -> Self {
        let weights = Fiducial::ALL.map(|f| if f == Fiducial::PPeak { 0.0 } else { 1.0 });
        let tolerance_ms = Fiducial::ALL.map(|f| {
            f.cse_tolerance_ms().unwrap_or(match f {
                Fiducial::PPeak => 10.2,
                _ => 30.6,
            })
        });
        Objective {
            weights,
            tolerance_ms,
            sensitivity_penalty: 0.1,
            ppv_penalty: 0.1,
            bias_penalty: 0.0,
        }
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ObjectiveToml {
    weights: Option<BTreeMap<String, f64>>,
    tolerance_ms: Option<BTreeMap<String, f64>>,
    sensitivity_penalty: Option<f64>,
    ppv_penalty: Option<f64>,
    bias_penalty: Option<f64>,
}

fn fid_index(key: &str) -> Result<usize, String> {
    Fiducial::ALL
        .iter()
        .position(|f| f.key() == key)
        .ok_or_else(|| {
            let keys: Vec<&str> = Fiducial::ALL.iter().map(|f| f.key()).collect();
            let h = tendline_params::closest(key, keys.iter().copied())
                .map(|c| format!(" (did you mean `{c}`?)"))
                .unwrap_or_default();
            format!("unknown fiducial `{key}`{h}; allowed: {}", keys.join(", "))
        })
}

impl Objective {
    /// Parse the `[objective]` table; keys given override the defaults.
    pub fn from_value(v: &toml::Value) -> Result<Self, String> {
        let t: ObjectiveToml = v
            .clone()
            .try_into()
            .map_err(|e: toml::de::Error| e.to_string().trim().to_string())?;
        let mut o = Objective::default();
        for (k, w) in t.weights.unwrap_or_default() {
            if !(w.is_finite() && w >= 0.0) {
                return Err(format!("weights.{k}: allowed a number >= 0, got {w}"));
            }
            o.weights[fid_index(&k).map_err(|e| format!("weights: {e}"))?] = w;
        }
        for (k, tol) in t.tolerance_ms.unwrap_or_default() {
            if !(tol.is_finite() && tol > 0.0) {
                return Err(format!(
                    "tolerance_ms.{k}: allowed a number > 0 (ms), got {tol}"
                ));
            }
            o.tolerance_ms[fid_index(&k).map_err(|e| format!("tolerance_ms: {e}"))?] = tol;
        }
        for (name, v, slot) in [
            (
                "sensitivity_penalty",
                t.sensitivity_penalty,
                &mut o.sensitivity_penalty,
            ),
            ("ppv_penalty", t.ppv_penalty, &mut o.ppv_penalty),
            ("bias_penalty", t.bias_penalty, &mut o.bias_penalty),
        ] {
            if let Some(v) = v {
                if !(v.is_finite() && v >= 0.0) {
                    return Err(format!("{name}: allowed a number >= 0, got {v}"));
                }
                *slot = v;
            }
        }
        if o.weights.iter().all(|w| *w == 0.0) {
            return Err("weights: at least one fiducial needs a weight above 0".into());
        }
        Ok(o)
    }

    /// Human description (for reports).
    pub fn describe(&self) -> String {
        let terms: Vec<String> = Fiducial::ALL
            .iter()
            .enumerate()
            .filter(|(i, _)| self.weights[*i] > 0.0)
            .map(|(i, f)| {
                format!(
                    "{} x (SD/{} ms)",
                    fmt_num(self.weights[i]),
                    fmt_num(self.tolerance_ms[i])
                ) + &format!(" [{}]", f.key())
            })
            .collect();
        let bias = if self.bias_penalty > 0.0 {
            format!(
                " + {} x |mean error| / tolerance",
                fmt_num(self.bias_penalty)
            )
        } else {
            String::new()
        };
        format!(
            "sum over fiducials of {}; plus per fiducial weight x ({} x (100 - Se%) + {} x (100 - +P%){bias})",
            terms.join(" + "),
            fmt_num(self.sensitivity_penalty),
            fmt_num(self.ppv_penalty)
        )
    }

    /// The objective of pooled results.
    pub fn value(&self, s: &Summary) -> f64 {
        let mut j = 0.0;
        for (i, f) in s.fiducials.iter().enumerate() {
            let w = self.weights[i];
            if w == 0.0 || f.reference == 0 {
                continue;
            }
            let sd = f.sd_ms.unwrap_or(MISSING_SD_MS);
            let se = f.se_pct.unwrap_or(0.0);
            let ppv = f.ppv_pct.unwrap_or(100.0);
            let bias = f.mean_ms.map_or(0.0, f64::abs);
            j += w
                * ((sd + self.bias_penalty * bias) / self.tolerance_ms[i]
                    + self.sensitivity_penalty * (100.0 - se)
                    + self.ppv_penalty * (100.0 - ppv));
        }
        j
    }
}

fn fmt_num(x: f64) -> String {
    let s = format!("{x:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// What one candidate produced on one record, per fiducial ([`Fiducial::ALL`] order).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RecordResult {
    pub counts: [Counts; N_FID],
    /// Signed errors test − reference (ms) of the detected marks.
    pub errors: [Vec<f64>; N_FID],
}

/// Pooled statistics of one fiducial over a set of records.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FiducialSummary {
    /// Reference marks (TP + FN).
    pub reference: u64,
    pub n: usize,
    pub mean_ms: Option<f64>,
    pub sd_ms: Option<f64>,
    pub se_pct: Option<f64>,
    pub ppv_pct: Option<f64>,
}

/// Pooled statistics over a set of records.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Summary {
    pub records: usize,
    pub fiducials: [FiducialSummary; N_FID],
}

impl Summary {
    /// Pool the results of the given records (and only those).
    pub fn pool<'a>(results: impl IntoIterator<Item = &'a RecordResult>) -> Summary {
        let mut counts = [Counts::default(); N_FID];
        let mut errors: [Vec<f64>; N_FID] = Default::default();
        let mut records = 0;
        for r in results {
            records += 1;
            for i in 0..N_FID {
                counts[i].add(&r.counts[i]);
                errors[i].extend_from_slice(&r.errors[i]);
            }
        }
        let fiducials = std::array::from_fn(|i| FiducialSummary {
            reference: counts[i].tp + counts[i].fn_,
            n: errors[i].len(),
            mean_ms: stats::mean(&errors[i]),
            sd_ms: stats::sd(&errors[i]),
            se_pct: counts[i].sensitivity_pct(),
            ppv_pct: counts[i].ppv_pct(),
        });
        Summary { records, fiducials }
    }
}

/// A score: the objective and the statistics behind it (`objective` is
/// infinite for a candidate whose configuration is invalid).
#[derive(Debug, Clone, PartialEq)]
pub struct Score {
    pub objective: f64,
    pub summary: Summary,
}

/// Check that the result arrays line up with [`Fiducial::ALL`] (used in tests).
pub fn fiducial_index(f: Fiducial) -> usize {
    Fiducial::ALL.iter().position(|x| *x == f).unwrap_or(0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_computed_objective() {
        // Two records, only QRS on and T end weighted (weights 1), tolerances 6.5 / 30.6 ms.
        // QRS on errors: record A [2, -2], record B [4] -> pooled [2, -2, 4]:
        // mean 4/3, SD sqrt(((2/3)^2 + (10/3)^2 + (8/3)^2) / 2) = sqrt(168/9 / 2) = sqrt(28/3).
        // Counts: A tp 2 fn 0 fp 0, B tp 1 fn 1 fp 0 -> Se 75 %, +P 100 %.
        // T end errors [10, 30] (A only), tp 2, fn 0, fp 1 -> Se 100 %, +P 2/3.
        let qon = fiducial_index(Fiducial::QrsOn);
        let tend = fiducial_index(Fiducial::TEnd);
        let mut a = RecordResult::default();
        a.errors[qon] = vec![2.0, -2.0];
        a.counts[qon] = Counts {
            tp: 2,
            fn_: 0,
            fp: 0,
        };
        a.errors[tend] = vec![10.0, 30.0];
        a.counts[tend] = Counts {
            tp: 2,
            fn_: 0,
            fp: 1,
        };
        let mut b = RecordResult::default();
        b.errors[qon] = vec![4.0];
        b.counts[qon] = Counts {
            tp: 1,
            fn_: 1,
            fp: 0,
        };
        let s = Summary::pool([&a, &b]);
        assert_eq!(s.records, 2);
        let sd_q = (28.0f64 / 3.0).sqrt();
        assert!((s.fiducials[qon].sd_ms.unwrap() - sd_q).abs() < 1e-12);
        assert_eq!(s.fiducials[qon].se_pct, Some(75.0));
        let sd_t = 200f64.sqrt(); // [10, 30]: mean 20, SD sqrt((100 + 100) / 1)
        let mut o = Objective {
            weights: [0.0; N_FID],
            ..Default::default()
        };
        o.weights[qon] = 1.0;
        o.weights[tend] = 1.0;
        let expect = sd_q / 6.5 + 0.1 * 25.0 + sd_t / 30.6 + 0.1 * (100.0 - 200.0 / 3.0);
        assert!(
            (o.value(&s) - expect).abs() < 1e-9,
            "{} vs {expect}",
            o.value(&s)
        );
        // Pooling only record B: one error -> SD counts as the 150 ms window.
        let sb = Summary::pool([&b]);
        let expect_b = 150.0 / 6.5 + 0.1 * 50.0; // T end: no reference marks, left out
        assert!((o.value(&sb) - expect_b).abs() < 1e-9);
        // With the bias term: QRS on mean 4/3 ms, T end mean 20 ms, weight 0.5.
        o.bias_penalty = 0.5;
        let with_bias = expect + 0.5 * (4.0 / 3.0) / 6.5 + 0.5 * 20.0 / 30.6;
        assert!((o.value(&s) - with_bias).abs() < 1e-9);
    }

    #[test]
    fn objective_table_overrides_and_names_bad_keys() {
        let v: toml::Value = toml::from_str("weights = { t_end = 2.0 }\nppv_penalty = 0").unwrap();
        let o = Objective::from_value(&v).unwrap();
        assert_eq!(o.weights[fiducial_index(Fiducial::TEnd)], 2.0);
        assert_eq!(o.weights[fiducial_index(Fiducial::QrsOn)], 1.0);
        assert_eq!(o.ppv_penalty, 0.0);
        let v: toml::Value = toml::from_str("weights = { t_ned = 2.0 }").unwrap();
        let e = Objective::from_value(&v).unwrap_err();
        assert!(
            e.contains("t_ned") && e.contains("did you mean `t_end`"),
            "{e}"
        );
        let v: toml::Value = toml::from_str("tolerance_ms = { qrs_on = -1 }").unwrap();
        let e = Objective::from_value(&v).unwrap_err();
        assert!(
            e.contains("tolerance_ms.qrs_on") && e.contains("got -1"),
            "{e}"
        );
    }

    #[test]
    fn default_tolerances_are_the_cse_values() {
        // CSE Working Party 1985 (from memory), as in tendline_evaluate.
        let o = Objective::default();
        let t = |f| o.tolerance_ms[fiducial_index(f)];
        assert_eq!(t(Fiducial::POn), 10.2);
        assert_eq!(t(Fiducial::PEnd), 12.7);
        assert_eq!(t(Fiducial::QrsOn), 6.5);
        assert_eq!(t(Fiducial::QrsEnd), 11.6);
        assert_eq!(t(Fiducial::TEnd), 30.6);
        assert_eq!(t(Fiducial::TPeak), 30.6);
    }
}
