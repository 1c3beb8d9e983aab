//! Synthetic 12-lead ECG with exact ground-truth wave boundaries, and the
//! invented demo study that ships in `demo-signals/`.
//!
//! The demo data of tendline cannot be real recordings, so it is synthesised
//! here with boundaries known exactly, to check the pipeline end to end.
//!
//! # Model
//!
//! Each beat is the sum of five Gaussian events, P, Q, R, S and T, as in the
//! dynamical model of McSharry et al. (IEEE Trans Biomed Eng 2003;50:289-294).
//! That model moves a point around a limit cycle with phase θ advancing at
//! 2π/RR and adds a Gaussian bump aᵢ·exp(−Δθᵢ²/2bᵢ²) to z as θ passes each
//! event angle θᵢ. The generator uses the closed form of that trajectory (the
//! sum of the Gaussians, without the model's relaxation of z towards its
//! baseline, which is not needed here since baseline wander is added
//! separately) written in time instead of phase: an event at angle θᵢ with
//! width bᵢ is a Gaussian centred θᵢ·RR/2π after the R event with σ = bᵢ·RR/2π.
//! The centres and widths are set per beat in milliseconds, which is the same
//! thing as McSharry's RR-dependent event angles:
//!
//! | event | centre                                 | σ (ms)                    |
//! |-------|----------------------------------------|---------------------------|
//! | P     | from `pr_ms` (global P onset = QRS onset − PR) | 20                 |
//! | Q     | R − 22 ms                              | 6                          |
//! | R     | R (the beat time)                      | 9                          |
//! | S     | R + 24 ms                              | 7                          |
//! | T     | from QT (below)                        | rising 0.12·QT, falling 0.075·QT |
//!
//! The T wave is an asymmetric Gaussian (different σ before and after its
//! centre, steeper on the way down) so it has a realistic shape; its peak is
//! its centre.
//!
//! Each event has a heart vector (magnitude in mV, a frontal angle and an
//! elevation towards the front); its amplitude in a lead is the projection on
//! that lead's axis ([`leads`]). Limb leads see the pure dipole, so III = II − I
//! holds exactly; precordial leads multiply each QRS and T σ by a small
//! lead-specific width factor ([`leads::WIDTH_FACTOR`], up to 1.05 in V3).
//!
//! RR intervals follow the LF/HF tachogram of McSharry et al. ([`rr`]). The
//! QT of a beat follows QT = `qt1000_ms` · (RR/1000 ms)^β with RR the interval
//! preceding the beat; the T event is placed in time so that this QT is
//! realised exactly between the global boundaries defined next.
//!
//! # Ground truth (boundary rule)
//!
//! * In one lead, a wave whose amplitude |a| is below `negligible_mv`
//!   (default 0.05 mV) is absent. For a present wave with centre c and
//!   σ (σ_up before, σ_down after, lead width factor included), the onset is
//!   c − k·σ_up and the end c + k·σ_down, k = `boundary_k` (default 2.5: the
//!   wave has fallen to exp(−k²/2) ≈ 4.39 % of its peak there, and
//!   98.8 % of its area lies between).
//! * The QRS complex of a lead spans from the earliest onset to the latest end of
//!   its present Q, R and S events. Its peak mark is the R centre.
//! * The P, QRS and T peaks are the Gaussian centres.
//! * Global boundaries: the earliest onset and the latest end over the leads
//!   where the wave is present. Global QT = global T end − global QRS onset; it
//!   equals the requested QT to rounding error.
//! * A beat enters the truth only when its global P onset and T end both lie
//!   within the record (first sample at 0 s, last at (n − 1)/fs).
//! * The RR of a beat is the time from the previous R centre to its own.
//!
//! # Files
//!
//! [`mod@write`] stores a recording as a format-16 WFDB record (1000 ADU/mV) or an
//! EDF+ file, with the truth as WFDB annotation files `<record>.truth` (global,
//! channel 0) and `<record>.leadtruth` (per lead, `chan` = lead index), each
//! wave as `(` onset, peak (`p`, `N`, `t`), `)` end — the convention of the
//! pipeline's `.mark`/`.leadmark` output. [`demo`] defines the invented study
//! and writes `demo-signals/`; the `tendline-synth` binary runs it:
//!
//! ```sh
//! cargo run --release -p tendline-synth -- --out demo-signals --seed 20261202
//! ```
//!
//! # Numerical conventions
//!
//! Sample i of every lead is at time i/fs s. Signals are in mV; truth times are
//! kept as exact seconds ([`WaveTimes`]) and written to annotation files as the
//! nearest sample (`round(t·fs)`), so written marks are within half a sample of
//! the exact value. Noise SNRs are over all 12 leads and the whole record ([`NoiseSpec`]).
//! Random parts use ChaCha8 streams from `seed`, one stream per purpose, so
//! the output depends only on the spec; results are bit-identical on the same
//! platform (floating-point `exp`/`sin` may differ in the last bit elsewhere).

pub mod demo;
pub mod leads;
pub mod model;
pub mod noise;
pub mod rr;
pub mod spec;
pub mod write;

pub use model::{generate, LeadTruthBeat, SynthRecord, TruthBeat, TruthSummary, WaveTimes};
pub use spec::{NoiseSpec, SynthSpec};

use std::path::PathBuf;

/// What can go wrong while generating or writing synthetic records.
#[derive(Debug, thiserror::Error)]
pub enum SynthError {
    /// Parameters out of range; each error names the key.
    #[error("invalid synthesis parameters: {}", join(.0))]
    Invalid(Vec<tendline_params::ParamError>),
    /// Parameters in range but inconsistent (waves overlapping, no lead showing a wave...).
    #[error("impossible synthetic ECG: {message}")]
    Geometry { message: String },
    /// Writing a record, an annotation file or a table failed.
    #[error(transparent)]
    Format(#[from] tendline_formats::FormatError),
    /// A file outside the format writers (CSV tables, README) could not be written.
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
}

fn join(e: &[tendline_params::ParamError]) -> String {
    e.iter()
        .map(|x| x.to_string())
        .collect::<Vec<_>>()
        .join("; ")
}
