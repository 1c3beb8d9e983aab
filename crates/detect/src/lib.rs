//! QRS detection: Pan–Tompkins per lead, multi-lead fusion, beat labels and
//! unreadable stretches.
//!
//! Input: leads already passed through the run's conditioning filter
//! (baseline and power-line removed), in mV, all at sampling rate `fs`.
//! Output sample indices are 0-based indices into those same arrays.

use serde::{Deserialize, Serialize};

/// Beat class, with its standard WFDB beat code.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum BeatLabel {
    /// `N`: normal (dominant morphology, not premature).
    Normal,
    /// `V`: ventricular ectopic.
    Ventricular,
    /// `Q`: unclassifiable.
    Unclassified,
}

impl BeatLabel {
    /// The WFDB symbol (`N`, `V`, `Q`).
    pub fn symbol(self) -> &'static str {
        match self {
            BeatLabel::Normal => "N",
            BeatLabel::Ventricular => "V",
            BeatLabel::Unclassified => "Q",
        }
    }
}

/// One detected beat.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Beat {
    /// QRS fiducial point (sample index).
    pub sample: usize,
    pub label: BeatLabel,
}

/// A stretch excluded from analysis, `[start, end)` in samples.
#[derive(Debug, Clone, PartialEq)]
pub struct Span {
    pub start: usize,
    pub end: usize,
    /// Short reason: `noise`, `flat`, `saturation`.
    pub reason: String,
}

/// Everything detection says about one record.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Detection {
    pub beats: Vec<Beat>,
    pub unreadable: Vec<Span>,
    /// Quality per lead in 0..=1 (0 = unusable), same order as the input leads.
    pub lead_quality: Vec<f64>,
}
