//! Consistency of each lead's QT from one window to the next.
//!
//! The QT of a lead changes slowly: it follows the heart rate with a lag of a
//! minute or two and otherwise drifts over hours (common practice). A lead
//! whose QT, corrected for the window's RR by Fridericia's formula, departs
//! from its own corrected QT in the neighbouring windows by more than
//! `lead_consistency_ms` has taken another wave for its T end in that window
//! (the next P wave, a U wave, a step of the ST level) or read a biphasic T
//! wave by its other phase, and the window is flagged for over-read. The
//! reference is the median over up to
//! `lead_consistency_windows` windows on either side that give the lead a
//! valid QT ([`crate::global::qt_valid`]), so one or two jumps among them do
//! not move it; with fewer than `lead_consistency_min_windows` of them the
//! lead is not judged.
//!
//! The check flags; it does not choose. Leaving the departing lead out of the
//! QT made the QTDB windows with annotated beats worse (see
//! `lead_consistency_ms` in `pipeline.toml`): where a lead flips between two
//! readings of a biphasic T wave, the majority of the windows can hold the
//! wrong one.

use crate::{qtc, MeasureConfig, WindowMeasure};

/// Each valid lead's corrected QT (`[lead][window]`).
fn corrected(windows: &[WindowMeasure], cfg: &MeasureConfig) -> Vec<Vec<Option<f64>>> {
    let n_leads = windows.iter().map(|w| w.leads.len()).max().unwrap_or(0);
    let mut out: Vec<Vec<Option<f64>>> = vec![vec![None; windows.len()]; n_leads];
    for (l, col) in out.iter_mut().enumerate() {
        for (w, v) in windows.iter().zip(col.iter_mut()) {
            *v = w
                .leads
                .get(l)
                .filter(|lm| crate::global::qt_valid(lm, cfg))
                .and_then(|lm| lm.qt_ms)
                .zip(w.rr_ms)
                .map(|(q, rr)| qtc::all(q, rr).fridericia_ms)
                .filter(|v| v.is_finite());
        }
    }
    out
}

/// What the check found in one window.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WindowCheck {
    pub window: usize,
    /// Leads whose QT departs from their neighbours'.
    pub inconsistent: Vec<usize>,
}

/// The windows with at least one lead whose QT is inconsistent with its
/// neighbours, in window order.
pub fn inconsistent_leads(windows: &[WindowMeasure], cfg: &MeasureConfig) -> Vec<WindowCheck> {
    let tol = cfg.lead_consistency_ms;
    if tol <= 0.0 || windows.is_empty() {
        return Vec::new();
    }
    let k = cfg.lead_consistency_windows;
    let mut out = Vec::new();
    let corrected = corrected(windows, cfg);
    let mut near = Vec::with_capacity(2 * k);
    for w in 0..windows.len() {
        let mut check = WindowCheck {
            window: w,
            inconsistent: Vec::new(),
        };
        for (l, col) in corrected.iter().enumerate() {
            let Some(v) = col[w] else { continue };
            near.clear();
            let lo = w.saturating_sub(k);
            let hi = (w + k + 1).min(col.len());
            near.extend((lo..hi).filter(|&j| j != w).filter_map(|j| col[j]));
            if near.len() < cfg.lead_consistency_min_windows.max(1) {
                continue;
            }
            let med = crate::align::median(&mut near);
            if (v - med).abs() > tol {
                check.inconsistent.push(l);
            }
        }
        if !check.inconsistent.is_empty() {
            out.push(check);
        }
    }
    out
}
