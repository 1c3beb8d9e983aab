//! Threshold tuning of the pipeline with record-level cross-validation
//! (`tendline tune`).
//!
//! A search space names keys of `pipeline.toml` with ranges or value lists;
//! a strategy (grid, seeded random, coordinate descent) proposes candidate
//! configurations; each candidate runs filter → detection → delineation on
//! annotated records and is scored against the reference marks; records are
//! split into k folds (seeded), the search is fitted on k − 1 folds and its
//! choice scored on the held-out fold, so over-fitting shows as a gap between
//! the training and held-out objective. The configuration written out is the
//! search on all records.
//!
//! # Search-space file (TOML)
//!
//! ```toml
//! [search]
//! strategy = "random"   # "grid" | "random" | "coordinate"
//! candidates = 100      # random: candidates, the base configuration included
//! seed = 1              # random draws and fold assignment
//! steps = 5             # grid / coordinate: points per range (ends included)
//! rounds = 2            # coordinate: passes over all parameters
//! folds = 5             # record-level cross-validation folds
//! max_candidates = 10000  # grid: refuse larger grids
//!
//! [objective]           # optional; the defaults are described below
//! weights = { t_end = 2.0, p_peak = 0.0 }
//! tolerance_ms = { t_peak = 30.6 }
//! sensitivity_penalty = 0.1   # per percentage point below 100
//! ppv_penalty = 0.1
//! bias_penalty = 0.0          # weight of |mean error| / tolerance
//!
//! [params.delineate]    # keys of pipeline.toml, nested or dotted
//! t_xi_end = { min = 0.2, max = 0.8 }                 # range (float key)
//! t_gamma = { min = 0.02, max = 0.5, scale = "log" }  # log-spaced range
//! global_context_beats = { min = 2, max = 12, steps = 6 }  # integer key
//! t_end_method = { values = ["wavelet", "tangent", "area"] }  # list
//! ```
//!
//! Unknown keys are named with the closest known key; range ends and list
//! values are applied to the base configuration and checked by the stages'
//! own `validate()`, so out-of-range values fail before any record is read.
//! A candidate that breaks a cross-key rule (e.g. a window minimum above
//! its maximum) is kept with an infinite objective and its reason.
//! `[measure]` keys are refused: they do not change the scored marks.
//!
//! # Objective
//!
//! See [`objective`]: per fiducial, the SD of the errors divided by the CSE
//! tolerance plus penalties for lost sensitivity and positive predictivity,
//! weighted and summed. Lower is better.
//!
//! # Speed
//!
//! See [`data`]: the conditioned signal, the detection and the wavelet
//! transform are cached per record and upstream configuration, only beats
//! that can pair with a reference beat are delineated, every (candidate,
//! record) pair is evaluated once ([`engine`]) and pairs run in parallel.

pub mod data;
pub mod engine;
pub mod folds;
pub mod objective;
pub mod report;
pub mod space;
pub mod strategy;

pub use data::{Dataset, Evaluate, RecordSource, Reference};
pub use engine::{cross_validate, CvResult, FoldResult, Progress};
pub use objective::{Objective, RecordResult, Score, Summary};
pub use report::{write_outputs, RunInfo};
pub use space::{Candidate, SearchSpace, Strategy, TunedConfig};

use std::path::PathBuf;
use tendline_params::ParamError;

/// Errors of the tuning library.
#[derive(Debug, thiserror::Error)]
pub enum TuneError {
    #[error("{origin}: {message}")]
    Space { origin: String, message: String },
    #[error("{}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))]
    Config(Vec<ParamError>),
    #[error("invalid configuration: {0}")]
    Invalid(String),
    #[error("{0}")]
    Options(String),
    #[error("record {record}: {message}")]
    Record { record: String, message: String },
    #[error("{}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}
