//! Readers and writers for the open ECG formats tendline accepts.
//!
//! Readers: [`wfdb`] (WFDB records), [`edf`] (EDF/EDF+, BDF/BDF+), [`ishne`]
//! (ISHNE Holter), [`csv`] (one column per lead) and [`aecg`] (HL7 v3 annotated
//! ECG XML). Every signal reader produces the
//! same [`Record`]: one sampling rate, leads with their names exactly as the input
//! header gives them (aECG: the MDC lead code without its `MDC_ECG_LEAD_` prefix,
//! see [`aecg`]), samples in physical units (millivolts where the input's units
//! allow the conversion) and metadata. Annotation files (WFDB) are read and
//! written by [`annotation`].
//!
//! Every reader passes the same contract test (`tests/reader_contract.rs`): the
//! invariants of [`Record`] on files it reads, and an error naming the file for an
//! empty file, a truncated file and an unknown extension.
//!
//! Conventions: sample indices are 0-based from the first sample of the record;
//! time in seconds is `sample / fs`. Physical values are converted to millivolts
//! when the input units are `uV`/`μV`/`µV` (÷1000), `mV` or `V` (×1000); other units
//! (e.g. `mmHg`, `NU`) are kept unconverted and named in [`Lead::units`]. Missing
//! samples that a format marks as invalid become NaN.
//!
//! Entry point: [`read_record`] picks the reader from the file extension.

pub mod aecg;
pub mod annotation;
pub mod csv;
pub mod deferred;
pub mod edf;
pub mod error;
mod frames;
pub mod ishne;
pub mod meta;
pub mod signals;
pub mod subjects;
pub mod wfdb;

pub use annotation::Annotation;
pub use error::FormatError;
pub use meta::{Metadata, Sex};

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

/// One lead of a record.
#[derive(Debug, Clone, PartialEq)]
pub struct Lead {
    /// Lead name exactly as in the input (WFDB description, EDF label, CSV header;
    /// aECG: the lead code without `MDC_ECG_LEAD_`).
    pub name: String,
    /// Units of `samples` after conversion (normally `mV`).
    pub units: String,
    /// Samples in physical units.
    pub samples: Vec<f64>,
}

/// A recording as every reader returns it.
#[derive(Debug, Clone, PartialEq)]
pub struct Record {
    /// Record name (file stem for EDF/CSV/aECG, record name for WFDB).
    pub name: String,
    /// Sampling rate in Hz, shared by all leads.
    pub fs: f64,
    /// The leads, in input order (the index is the WFDB `chan` in written annotations).
    pub leads: Vec<Lead>,
    /// Age, sex, subject and free-text comments.
    pub meta: Metadata,
    /// Every file the record was read from (for input checksums).
    pub files: Vec<PathBuf>,
    /// Problems that did not prevent reading (e.g. a WFDB header checksum that
    /// does not match the samples); empty for a clean input.
    pub warnings: Vec<String>,
}

impl Record {
    /// A record read from the single file `path` (EDF, CSV, aECG): named by the
    /// file's stem, with that file as its only input.
    pub fn from_file(
        path: &Path,
        fs: f64,
        leads: Vec<Lead>,
        meta: Metadata,
        warnings: Vec<String>,
    ) -> Self {
        Self {
            name: path
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default(),
            fs,
            leads,
            meta,
            files: vec![path.to_path_buf()],
            warnings,
        }
    }

    /// Number of samples per lead (all leads have the same length).
    pub fn n_samples(&self) -> usize {
        self.leads.first().map_or(0, |l| l.samples.len())
    }
}

/// The whole file at `path` as UTF-8 text; errors name the file and, for bytes
/// that are not UTF-8, the offset of the first bad one (text formats: CSV, aECG).
pub(crate) fn read_utf8(path: &Path) -> Result<String, FormatError> {
    let bytes = std::fs::read(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    String::from_utf8(bytes).map_err(|e| FormatError::Invalid {
        path: path.to_path_buf(),
        message: format!(
            "not UTF-8 text (invalid byte at offset {})",
            e.utf8_error().valid_up_to()
        ),
    })
}

/// Options of [`read_record`] (TOML table `input`). Default: every option unset.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq, Default)]
#[serde(deny_unknown_fields, default)]
pub struct ReadOptions {
    /// Sampling rate in Hz for CSV files; overrides a rate given in the file.
    /// Default: none (the CSV must state it, see [`csv`]).
    pub csv_fs: Option<f64>,
}

impl ReadOptions {
    /// Check value ranges; keys are reported under the `input` table.
    pub fn validate(&self) -> Result<(), Vec<tendline_params::ParamError>> {
        let mut c = tendline_params::Checker::new("input");
        if let Some(fs) = self.csv_fs {
            c.range("csv_fs", fs, 1e-6, 1e6, "Hz");
        }
        c.finish()
    }
}

/// [`read_record`], except that a WFDB, EDF, BDF or ISHNE record for which
/// `defer(fs, n_samples, n_leads)` is true keeps its samples digital
/// ([`deferred`]; [`wfdb::deferred`], [`edf::read_edf_deferred`],
/// [`ishne::read_ishne_deferred`]): a caller
/// that works through a long record in stretches converts one stretch at a
/// time. Other formats, and records that cannot be deferred (several rates,
/// variable layout, a discontinuous EDF+), are read whole.
pub fn read_record_deferred(
    path: &Path,
    opts: &ReadOptions,
    defer: &dyn Fn(f64, usize, usize) -> bool,
) -> Result<deferred::Loaded, FormatError> {
    if is_wfdb_input(path) {
        return wfdb::deferred::read_record_deferred(path, defer);
    }
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase());
    match ext.as_deref() {
        Some("edf" | "bdf") => edf::read_edf_deferred(path, defer),
        Some("ecg") => ishne::read_ishne_deferred(path, defer),
        _ => read_record(path, opts).map(deferred::Loaded::Physical),
    }
}

/// Whether [`read_record`] reads `path` as a WFDB record.
fn is_wfdb_input(path: &Path) -> bool {
    match path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .as_deref()
    {
        Some("hea") => true,
        Some("edf" | "bdf" | "ecg" | "csv" | "xml") => false,
        _ => wfdb::header_path_of(path).is_file(),
    }
}

/// Read a record, choosing the reader by extension: `.hea` (or a path without
/// extension that has a sibling `.hea`) → WFDB, `.edf` → EDF/EDF+, `.bdf` →
/// BDF/BDF+ (24-bit EDF), `.ecg` → ISHNE Holter ([`ishne`]), `.csv` → CSV,
/// `.xml` → HL7 aECG ([`aecg`]).
pub fn read_record(path: &Path, opts: &ReadOptions) -> Result<Record, FormatError> {
    if is_wfdb_input(path) {
        return wfdb::read_record(path);
    }
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase());
    match ext.as_deref() {
        Some("edf" | "bdf") => edf::read_edf(path),
        Some("ecg") => ishne::read_ishne(path),
        Some("csv") => csv::read_csv(path, opts.csv_fs),
        Some("xml") => aecg::read_aecg(path),
        _ => Err(FormatError::Invalid {
            path: path.to_path_buf(),
            message:
                "unknown input type: expected a .hea, .edf, .bdf, .ecg (ISHNE Holter), .csv or .xml \
                 (HL7 aECG) file, or a \
                      WFDB record path with a sibling .hea"
                    .into(),
        }),
    }
}
