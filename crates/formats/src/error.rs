//! Errors of the format readers: each names the file and the problem.
use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum FormatError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// The input is malformed (the message names the line or field).
    #[error("{path}: {message}")]
    Invalid { path: PathBuf, message: String },
    /// The input is well-formed but uses a variant this reader does not support.
    #[error("{path}: unsupported: {message}")]
    Unsupported { path: PathBuf, message: String },
}

impl FormatError {
    /// The file the error is about.
    pub fn path(&self) -> &std::path::Path {
        match self {
            FormatError::Io { path, .. }
            | FormatError::Invalid { path, .. }
            | FormatError::Unsupported { path, .. } => path,
        }
    }
}
