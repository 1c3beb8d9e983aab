//! Committed accuracy floors and the regression gate that checks a report against them.
//!
//! The floors file is TOML with one table per database (the report's `database`):
//!
//! ```toml
//! [qtdb.beats]
//! min_sensitivity_pct = 99.0
//! min_ppv_pct = 99.0
//!
//! [qtdb.global.t_end]            # fiducial keys: p_on p_peak p_end qrs_on qrs_end t_peak t_end
//! min_sensitivity_pct = 95.0
//! max_abs_mean_ms = 15.0
//! max_sd_ms = 35.0
//!
//! [qtdb.qt_beat]                 # Bland–Altman of beat QT (also qt_beat_per_lead,
//!                                # qt_window_superimposed, window_qrs,
//!                                # window_pr, window_p, window_tpe,
//!                                # window_tpe_lead_ref,
//!                                # window_qt_dispersion_lead_ref)
//! max_abs_bias_ms = 20.0
//! max_sd_ms = 40.0
//!
//! [ludb.per_lead.qrs_on]
//! min_sensitivity_pct = 95.0
//! max_sd_ms = 15.0
//! ```
//!
//! Every key is optional; a missing key is not checked. A floor on a metric the
//! report does not contain (e.g. per-lead floors on a report without per-lead
//! scoring) is a violation, so that losing a metric cannot pass silently.

use crate::report::{DelineationSection, ValidationReport};
use crate::stats::BlandAltman;
use crate::waves::Fiducial;
use crate::EvalError;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;
use tendline_params::{Checker, ParamError};

/// Floors for every database, keyed by database name.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Floors {
    pub databases: BTreeMap<String, DatabaseFloors>,
}

/// Floors of one database.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct DatabaseFloors {
    pub beats: Option<BeatFloors>,
    pub global: BTreeMap<Fiducial, FiducialFloors>,
    pub per_lead: BTreeMap<Fiducial, FiducialFloors>,
    pub qt_beat: Option<AgreementFloors>,
    pub qt_beat_per_lead: Option<AgreementFloors>,
    pub qt_window_superimposed: Option<AgreementFloors>,
    pub window_qrs: Option<AgreementFloors>,
    pub window_pr: Option<AgreementFloors>,
    pub window_p: Option<AgreementFloors>,
    pub window_tpe: Option<AgreementFloors>,
    pub window_tpe_lead_ref: Option<AgreementFloors>,
    pub window_qt_dispersion_lead_ref: Option<AgreementFloors>,
}

/// Beat detection floors (percent).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct BeatFloors {
    pub min_sensitivity_pct: Option<f64>,
    pub min_ppv_pct: Option<f64>,
}

/// Floors of one fiducial.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct FiducialFloors {
    pub min_sensitivity_pct: Option<f64>,
    pub min_ppv_pct: Option<f64>,
    /// Largest allowed |mean error|, ms.
    pub max_abs_mean_ms: Option<f64>,
    /// Largest allowed pooled SD, ms.
    pub max_sd_ms: Option<f64>,
}

/// Floors of a Bland–Altman agreement.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct AgreementFloors {
    pub max_abs_bias_ms: Option<f64>,
    pub max_sd_ms: Option<f64>,
    /// Fewest paired values required.
    pub min_n: Option<usize>,
}

impl Floors {
    /// Parse floors TOML text; `path` names the source in errors.
    pub fn from_toml(text: &str, path: &Path) -> Result<Floors, EvalError> {
        let f: Floors = toml::from_str(text).map_err(|e| EvalError::Floors {
            path: path.to_path_buf(),
            message: e.to_string(),
        })?;
        f.validate().map_err(|errs| EvalError::Floors {
            path: path.to_path_buf(),
            message: errs
                .iter()
                .map(|e| e.to_string())
                .collect::<Vec<_>>()
                .join("; "),
        })?;
        Ok(f)
    }

    /// Read and parse a floors file.
    pub fn read(path: &Path) -> Result<Floors, EvalError> {
        let text = std::fs::read_to_string(path).map_err(|source| EvalError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        Self::from_toml(&text, path)
    }

    /// Percentages within 0–100, times non-negative.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("");
        let pct = |c: &mut Checker, k: &str, v: Option<f64>| {
            if let Some(v) = v {
                c.range(k, v, 0.0, 100.0, "%");
            }
        };
        let ms = |c: &mut Checker, k: &str, v: Option<f64>| {
            if let Some(v) = v {
                c.range(k, v, 0.0, 10_000.0, "ms");
            }
        };
        for (db, d) in &self.databases {
            if let Some(b) = &d.beats {
                pct(
                    &mut c,
                    &format!("{db}.beats.min_sensitivity_pct"),
                    b.min_sensitivity_pct,
                );
                pct(&mut c, &format!("{db}.beats.min_ppv_pct"), b.min_ppv_pct);
            }
            for (sec, m) in [("global", &d.global), ("per_lead", &d.per_lead)] {
                for (f, x) in m {
                    let k = format!("{db}.{sec}.{}", f.key());
                    pct(
                        &mut c,
                        &format!("{k}.min_sensitivity_pct"),
                        x.min_sensitivity_pct,
                    );
                    pct(&mut c, &format!("{k}.min_ppv_pct"), x.min_ppv_pct);
                    ms(&mut c, &format!("{k}.max_abs_mean_ms"), x.max_abs_mean_ms);
                    ms(&mut c, &format!("{k}.max_sd_ms"), x.max_sd_ms);
                }
            }
            for (k, a) in [
                ("qt_beat", &d.qt_beat),
                ("qt_beat_per_lead", &d.qt_beat_per_lead),
                ("qt_window_superimposed", &d.qt_window_superimposed),
                ("window_qrs", &d.window_qrs),
                ("window_pr", &d.window_pr),
                ("window_p", &d.window_p),
                ("window_tpe", &d.window_tpe),
                ("window_tpe_lead_ref", &d.window_tpe_lead_ref),
                (
                    "window_qt_dispersion_lead_ref",
                    &d.window_qt_dispersion_lead_ref,
                ),
            ] {
                if let Some(a) = a {
                    ms(
                        &mut c,
                        &format!("{db}.{k}.max_abs_bias_ms"),
                        a.max_abs_bias_ms,
                    );
                    ms(&mut c, &format!("{db}.{k}.max_sd_ms"), a.max_sd_ms);
                }
            }
        }
        c.finish()
    }
}

fn below(v: &mut Vec<String>, what: &str, got: Option<f64>, min: Option<f64>) {
    if let Some(min) = min {
        match got {
            Some(g) if g >= min => {}
            Some(g) => v.push(format!("{what} = {g:.3}, floor ≥ {min}")),
            None => v.push(format!("{what} is not available, floor ≥ {min}")),
        }
    }
}

fn above(v: &mut Vec<String>, what: &str, got: Option<f64>, max: Option<f64>) {
    if let Some(max) = max {
        match got {
            Some(g) if g <= max => {}
            Some(g) => v.push(format!("{what} = {g:.3}, ceiling ≤ {max}")),
            None => v.push(format!("{what} is not available, ceiling ≤ {max}")),
        }
    }
}

fn check_section(
    v: &mut Vec<String>,
    db: &str,
    name: &str,
    sec: Option<&DelineationSection>,
    floors: &BTreeMap<Fiducial, FiducialFloors>,
) {
    if floors.is_empty() {
        return;
    }
    let Some(sec) = sec else {
        v.push(format!(
            "{db}.{name}: floors are set but the report has no {name} scoring"
        ));
        return;
    };
    for (f, fl) in floors {
        let k = format!("{db}.{name}.{}", f.key());
        let Some(s) = sec.fiducial(*f) else {
            v.push(format!(
                "{k}: floors are set but the fiducial was not scored"
            ));
            continue;
        };
        below(
            v,
            &format!("{k} sensitivity %"),
            s.sensitivity_pct,
            fl.min_sensitivity_pct,
        );
        below(
            v,
            &format!("{k} positive predictivity %"),
            s.ppv_pct,
            fl.min_ppv_pct,
        );
        above(
            v,
            &format!("{k} |mean error| ms"),
            s.stats.mean_ms.map(f64::abs),
            fl.max_abs_mean_ms,
        );
        above(v, &format!("{k} SD ms"), s.stats.sd_ms, fl.max_sd_ms);
    }
}

fn check_agreement(
    v: &mut Vec<String>,
    k: &str,
    ba: Option<&BlandAltman>,
    fl: Option<&AgreementFloors>,
) {
    let Some(fl) = fl else { return };
    let Some(ba) = ba else {
        v.push(format!(
            "{k}: floors are set but the report has no such agreement"
        ));
        return;
    };
    above(
        v,
        &format!("{k} |bias| ms"),
        ba.bias_ms.map(f64::abs),
        fl.max_abs_bias_ms,
    );
    above(v, &format!("{k} SD ms"), ba.sd_ms, fl.max_sd_ms);
    if let Some(n) = fl.min_n {
        if ba.n < n {
            v.push(format!("{k} n = {}, floor ≥ {n}", ba.n));
        }
    }
}

/// Every floor the report violates, one readable line each (empty: all met).
/// Only the floors of the report's database are checked; a database without floors
/// gives no violation.
pub fn check_floors(report: &ValidationReport, floors: &Floors) -> Vec<String> {
    let mut v = Vec::new();
    let db = report.database.as_str();
    let Some(d) = floors.databases.get(db) else {
        return v;
    };
    if let Some(bf) = &d.beats {
        match &report.beats {
            Some(b) => {
                below(
                    &mut v,
                    &format!("{db}.beats sensitivity %"),
                    b.overall.sensitivity_pct,
                    bf.min_sensitivity_pct,
                );
                below(
                    &mut v,
                    &format!("{db}.beats positive predictivity %"),
                    b.overall.ppv_pct,
                    bf.min_ppv_pct,
                );
            }
            None => v.push(format!(
                "{db}.beats: floors are set but the report has no beat scoring"
            )),
        }
    }
    check_section(&mut v, db, "global", report.global.as_ref(), &d.global);
    check_section(
        &mut v,
        db,
        "per_lead",
        report.per_lead.as_ref(),
        &d.per_lead,
    );
    let qt = report.qt.as_ref();
    let checks = [
        ("qt_beat", qt.map(|q| &q.beat), &d.qt_beat),
        (
            "qt_beat_per_lead",
            qt.and_then(|q| q.beat_per_lead.as_ref()),
            &d.qt_beat_per_lead,
        ),
        (
            "qt_window_superimposed",
            qt.and_then(|q| q.window_superimposed.as_ref()),
            &d.qt_window_superimposed,
        ),
        (
            "window_qrs",
            qt.and_then(|q| q.window_qrs.as_ref()),
            &d.window_qrs,
        ),
        (
            "window_pr",
            qt.and_then(|q| q.window_pr.as_ref()),
            &d.window_pr,
        ),
        (
            "window_p",
            qt.and_then(|q| q.window_p.as_ref()),
            &d.window_p,
        ),
        (
            "window_tpe",
            qt.and_then(|q| q.window_tpe.as_ref()),
            &d.window_tpe,
        ),
        (
            "window_tpe_lead_ref",
            qt.and_then(|q| q.window_tpe_lead_ref.as_ref()),
            &d.window_tpe_lead_ref,
        ),
        (
            "window_qt_dispersion_lead_ref",
            qt.and_then(|q| q.window_qt_dispersion_lead_ref.as_ref()),
            &d.window_qt_dispersion_lead_ref,
        ),
    ];
    for (k, got, floors) in checks {
        check_agreement(&mut v, &format!("{db}.{k}"), got, floors.as_ref());
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_documented_example_and_rejects_typos() {
        let t = r#"
[qtdb.beats]
min_sensitivity_pct = 99.0
min_ppv_pct = 99.0
[qtdb.global.t_end]
min_sensitivity_pct = 95.0
max_abs_mean_ms = 15.0
max_sd_ms = 35.0
[qtdb.qt_beat]
max_abs_bias_ms = 20.0
[ludb.per_lead.qrs_on]
max_sd_ms = 15.0
"#;
        let f = Floors::from_toml(t, Path::new("floors.toml")).unwrap();
        assert_eq!(f.databases.len(), 2);
        assert_eq!(
            f.databases["qtdb"].global[&Fiducial::TEnd].max_sd_ms,
            Some(35.0)
        );
        let e = Floors::from_toml("[qtdb.global.t_ned]\nmax_sd_ms = 1\n", Path::new("f.toml"))
            .unwrap_err();
        assert!(e.to_string().contains("f.toml"), "{e}");
        assert!(Floors::from_toml("[qtdb.beats]\nmin_sens = 1\n", Path::new("f.toml")).is_err());
        let e = Floors::from_toml("[qtdb.beats]\nmin_ppv_pct = 120\n", Path::new("f.toml"))
            .unwrap_err();
        assert!(e.to_string().contains("qtdb.beats.min_ppv_pct"), "{e}");
    }
}
