//! Wave delineation: P, QRS and T onset, peak and end per lead and across leads.
//!
//! Input: conditioned leads (mV) at `fs` and the QRS fiducial samples from detection.
//! All marks are sample indices into the same arrays.

use serde::{Deserialize, Serialize};

/// A single fiducial mark with its confidence in 0..=1.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Mark {
    pub sample: usize,
    pub confidence: f32,
}

/// T-wave morphology.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum TMorphology {
    #[default]
    Absent,
    Upright,
    Inverted,
    /// Positive then negative.
    BiphasicPosNeg,
    /// Negative then positive.
    BiphasicNegPos,
}

/// Method behind a T-end mark.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum TEndMethod {
    #[default]
    Wavelet,
    Tangent,
    Area,
}

/// The marks of one beat (on one lead, or global).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BeatMarks {
    pub p_on: Option<Mark>,
    pub p_peak: Option<Mark>,
    pub p_end: Option<Mark>,
    pub qrs_on: Option<Mark>,
    pub qrs_peak: Option<Mark>,
    pub qrs_end: Option<Mark>,
    pub t_on: Option<Mark>,
    pub t_peak: Option<Mark>,
    /// T end by the configured default method (`t_end_method`).
    pub t_end: Option<Mark>,
    pub t_end_method: TEndMethod,
    pub t_end_wavelet: Option<Mark>,
    pub t_end_tangent: Option<Mark>,
    pub t_end_area: Option<Mark>,
    pub t_morphology: TMorphology,
}

/// Per-lead and global marks of a record.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Delineation {
    /// `per_lead[lead][beat]`.
    pub per_lead: Vec<Vec<BeatMarks>>,
    /// `global[beat]`, combined across leads.
    pub global: Vec<BeatMarks>,
}
