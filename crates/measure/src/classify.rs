//! Classification of a QTc against sex-specific limits, with the wording shown to users.
//!
//! Default limits: prolonged at ≥ 450 ms for men and ≥ 460 ms for women, short at
//! ≤ 390 ms (AHA/ACCF/HRS recommendations for the standardization and interpretation
//! of the electrocardiogram, Part IV, 2009; from memory). QTc > 500 ms is highlighted
//! as high risk (common practice: high risk of torsade de pointes). When the sex is
//! unknown both limits are applied and the text says so.

use serde::{Deserialize, Serialize};
use tendline_formats::Sex;

/// Printed with every classification.
pub const CAUTION: &str =
    "Automated measurements must be over-read by a qualified clinician; local protocols and licensed practice decide.";

/// Interval limits in milliseconds.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct Limits {
    /// QTc at or above this is prolonged for men (ms); default 450.
    pub prolonged_male_ms: f64,
    /// QTc at or above this is prolonged for women (ms); default 460.
    pub prolonged_female_ms: f64,
    /// QTc at or below this is short, either sex (ms); default 390.
    pub short_ms: f64,
    /// QTc strictly above this is highlighted as high risk (ms); default 500.
    pub high_risk_ms: f64,
    /// QRS at or above this is flagged as wide (ms); default 120.
    pub wide_qrs_ms: f64,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            prolonged_male_ms: 450.0,
            prolonged_female_ms: 460.0,
            short_ms: 390.0,
            high_risk_ms: 500.0,
            wide_qrs_ms: 120.0,
        }
    }
}

impl Limits {
    /// Range and ordering checks, reported under `prefix` (e.g. `measure.limits`).
    pub fn check(&self, prefix: &str) -> tendline_params::Checker {
        let mut c = tendline_params::Checker::new(prefix);
        c.range(
            "prolonged_male_ms",
            self.prolonged_male_ms,
            300.0,
            700.0,
            "ms",
        )
        .range(
            "prolonged_female_ms",
            self.prolonged_female_ms,
            300.0,
            700.0,
            "ms",
        )
        .range("short_ms", self.short_ms, 200.0, 500.0, "ms")
        .range("high_risk_ms", self.high_risk_ms, 300.0, 800.0, "ms")
        .range("wide_qrs_ms", self.wide_qrs_ms, 60.0, 250.0, "ms")
        .require(
            self.short_ms < self.prolonged_male_ms.min(self.prolonged_female_ms),
            "short_ms",
            "below both prolonged limits",
            self.short_ms,
        );
        c
    }
}

/// Outcome of comparing a QTc with the limits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum QtcFlag {
    /// Between the short and prolonged limits.
    Normal,
    /// At or above the prolonged limit that applies (for unknown sex: both limits).
    Prolonged,
    /// Sex unknown and the QTc is prolonged by the male limit but not the female one.
    ProlongedIfMale,
    /// At or below the short limit.
    Short,
    /// No QTc could be measured.
    Unknown,
}

impl QtcFlag {
    /// Stable lower-case name used in tables (`normal`, `prolonged`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            QtcFlag::Normal => "normal",
            QtcFlag::Prolonged => "prolonged",
            QtcFlag::ProlongedIfMale => "prolonged_if_male",
            QtcFlag::Short => "short",
            QtcFlag::Unknown => "unknown",
        }
    }
}

/// A classified QTc with its explanation.
#[derive(Debug, Clone, PartialEq)]
pub struct Classification {
    pub flag: QtcFlag,
    /// QTc strictly above `high_risk_ms`.
    pub high_risk: bool,
    /// The sex was unknown, so both limits were applied.
    pub sex_unknown: bool,
    /// One sentence for the report, ending with [`CAUTION`].
    pub text: String,
}

/// Classify `qtc_ms` (None or non-finite → `Unknown`).
pub fn classify(qtc_ms: Option<f64>, sex: Option<Sex>, limits: &Limits) -> Classification {
    let sex_unknown = sex.is_none();
    let Some(q) = qtc_ms.filter(|q| q.is_finite()) else {
        return Classification {
            flag: QtcFlag::Unknown,
            high_risk: false,
            sex_unknown,
            text: format!("QTc not measured. {CAUTION}"),
        };
    };
    let (m, f, s) = (
        limits.prolonged_male_ms,
        limits.prolonged_female_ms,
        limits.short_ms,
    );
    let (flag, mut text) = match sex {
        Some(Sex::Male) if q >= m => (QtcFlag::Prolonged, format!("QTc {q:.0} ms: prolonged (male limit ≥ {m:.0} ms).")),
        Some(Sex::Female) if q >= f => (QtcFlag::Prolonged, format!("QTc {q:.0} ms: prolonged (female limit ≥ {f:.0} ms).")),
        None if q >= m.max(f) => (
            QtcFlag::Prolonged,
            format!("QTc {q:.0} ms: prolonged by both limits (men ≥ {m:.0} ms, women ≥ {f:.0} ms); sex unknown."),
        ),
        None if q >= m.min(f) => {
            let (flag, who) = if m <= f {
                (QtcFlag::ProlongedIfMale, "men")
            } else {
                // Only reachable with unusual configured limits; say what applies.
                (QtcFlag::Prolonged, "women")
            };
            (
                flag,
                format!(
                    "QTc {q:.0} ms: prolonged by the limit for {who} only (men ≥ {m:.0} ms, women ≥ {f:.0} ms); sex unknown, both limits applied."
                ),
            )
        }
        _ if q <= s => (QtcFlag::Short, format!("QTc {q:.0} ms: short (≤ {s:.0} ms).")),
        _ => {
            let lim = match sex {
                Some(Sex::Male) => format!("below the male limit {m:.0} ms"),
                Some(Sex::Female) => format!("below the female limit {f:.0} ms"),
                None => format!("below both limits (men {m:.0} ms, women {f:.0} ms); sex unknown"),
            };
            (QtcFlag::Normal, format!("QTc {q:.0} ms: normal, {lim}."))
        }
    };
    let high_risk = q > limits.high_risk_ms;
    if high_risk {
        text.push_str(&format!(
            " Above {:.0} ms: high risk of torsade de pointes.",
            limits.high_risk_ms
        ));
    }
    text.push(' ');
    text.push_str(CAUTION);
    Classification {
        flag,
        high_risk,
        sex_unknown,
        text,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Limits: AHA/ACCF/HRS 2009 Part IV (from memory): prolonged ≥ 450 ms men,
    // ≥ 460 ms women, short ≤ 390 ms; > 500 ms high risk (common practice).
    fn f(q: f64, s: Option<Sex>) -> Classification {
        classify(Some(q), s, &Limits::default())
    }

    #[test]
    fn male_boundaries() {
        let m = Some(Sex::Male);
        assert_eq!(f(449.9, m).flag, QtcFlag::Normal);
        assert_eq!(f(450.0, m).flag, QtcFlag::Prolonged);
        assert_eq!(f(390.0, m).flag, QtcFlag::Short);
        assert_eq!(f(390.1, m).flag, QtcFlag::Normal);
    }

    #[test]
    fn female_boundaries() {
        let w = Some(Sex::Female);
        assert_eq!(f(450.0, w).flag, QtcFlag::Normal);
        assert_eq!(f(459.9, w).flag, QtcFlag::Normal);
        assert_eq!(f(460.0, w).flag, QtcFlag::Prolonged);
        assert_eq!(f(390.0, w).flag, QtcFlag::Short);
    }

    #[test]
    fn unknown_sex_applies_both_limits_and_says_so() {
        let c = f(455.0, None);
        assert_eq!(c.flag, QtcFlag::ProlongedIfMale);
        assert!(c.sex_unknown);
        assert!(c.text.contains("sex unknown"), "{}", c.text);
        assert_eq!(f(449.9, None).flag, QtcFlag::Normal);
        assert!(f(449.9, None).text.contains("sex unknown"));
        assert_eq!(f(450.0, None).flag, QtcFlag::ProlongedIfMale);
        assert_eq!(f(460.0, None).flag, QtcFlag::Prolonged);
        assert_eq!(f(390.0, None).flag, QtcFlag::Short);
    }

    #[test]
    fn high_risk_is_strictly_above_500_and_caution_always_present() {
        assert!(!f(500.0, Some(Sex::Male)).high_risk);
        let c = f(500.1, Some(Sex::Female));
        assert!(c.high_risk);
        assert!(c.text.contains("torsade"));
        for c in [c, f(400.0, None), classify(None, None, &Limits::default())] {
            assert!(c.text.ends_with(CAUTION), "{}", c.text);
        }
        assert_eq!(
            classify(Some(f64::NAN), None, &Limits::default()).flag,
            QtcFlag::Unknown
        );
    }

    #[test]
    fn limits_validation_names_keys() {
        let l = Limits {
            short_ms: 470.0,
            ..Limits::default()
        };
        let e = l.check("measure.limits").finish().unwrap_err();
        assert!(
            e.iter().any(|e| e.key == "measure.limits.short_ms"),
            "{e:?}"
        );
        assert!(Limits::default().check("measure.limits").finish().is_ok());
    }
}
