//! Errors of the validation: each names the file or option and the problem.

use std::path::PathBuf;

/// Everything that can stop a validation run.
#[derive(Debug, thiserror::Error)]
pub enum EvalError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("annotation file {path}: {source}")]
    Annotation {
        path: PathBuf,
        #[source]
        source: tendline_formats::FormatError,
    },
    #[error("header {path}: {message}")]
    Header { path: PathBuf, message: String },
    #[error("{path}, line {line}: {message}")]
    Csv {
        path: PathBuf,
        line: usize,
        message: String,
    },
    #[error("invalid validation options: {}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))]
    Options(Vec<tendline_params::ParamError>),
    #[error("no records to validate: {0}")]
    NoRecords(String),
    #[error("record {record}: {message}")]
    Record { record: String, message: String },
    #[error("floors file {path}: {message}")]
    Floors { path: PathBuf, message: String },
    #[error("report: {0}")]
    Report(String),
}
