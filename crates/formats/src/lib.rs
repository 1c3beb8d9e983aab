//! Readers and writers for the open ECG formats tendline accepts.
//!
//! Every signal reader produces the same [`Record`]: one sampling rate, leads with
//! their names exactly as the input header gives them, samples in physical units
//! (millivolts where the input's units allow the conversion) and metadata.
//! Annotation files (WFDB) are read and written by [`annotation`].
//!
//! Conventions: sample indices are 0-based from the first sample of the record;
//! time in seconds is `sample / fs`.

pub mod annotation;
pub mod csv;
pub mod edf;
pub mod error;
pub mod meta;
pub mod wfdb;

pub use annotation::Annotation;
pub use error::FormatError;
pub use meta::{Metadata, Sex};

use std::path::PathBuf;

/// One lead of a record.
#[derive(Debug, Clone, PartialEq)]
pub struct Lead {
    /// Lead name exactly as in the input (WFDB description, EDF label, CSV header).
    pub name: String,
    /// Units of `samples` after conversion (normally `mV`).
    pub units: String,
    /// Samples in physical units.
    pub samples: Vec<f64>,
}

/// A recording as every reader returns it.
#[derive(Debug, Clone, PartialEq)]
pub struct Record {
    /// Record name (file stem for EDF/CSV, record name for WFDB).
    pub name: String,
    /// Sampling rate in Hz, shared by all leads.
    pub fs: f64,
    /// The leads, in input order (the index is the WFDB `chan` in written annotations).
    pub leads: Vec<Lead>,
    /// Age, sex, subject and free-text comments.
    pub meta: Metadata,
    /// Every file the record was read from (for input checksums).
    pub files: Vec<PathBuf>,
}

impl Record {
    /// Number of samples per lead (all leads have the same length).
    pub fn n_samples(&self) -> usize {
        self.leads.first().map_or(0, |l| l.samples.len())
    }
}
