//! The library's one error type.
//!
//! Every variant is written for a physicist who has never read the code: it says where
//! (file, line, column, channel, YAML key) and what was expected. The command layer prints
//! the message with its cause chain and exits non-zero.

use std::path::PathBuf;

/// Result alias used throughout the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Where in an input file something went wrong. Lines and columns are 1-based.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// The file that was read.
    pub file: PathBuf,
    /// 1-based line number (the header is line 1).
    pub line: u64,
    /// 1-based column number, or `None` when the problem is the whole row.
    pub column: Option<u64>,
    /// Column name, when the problem is one field.
    pub field: Option<String>,
}

impl std::fmt::Display for Location {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}:{}", self.file.display(), self.line)?;
        if let Some(c) = self.column {
            write!(f, ":{c}")?;
        }
        if let Some(name) = &self.field {
            write!(f, " (column `{name}`)")?;
        }
        Ok(())
    }
}

/// Everything that can go wrong in formfactory.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be opened, read or written.
    #[error("{path}: {source}")]
    Io {
        /// The file concerned.
        path: PathBuf,
        /// The operating-system error.
        source: std::io::Error,
    },
    /// A correlator table broke a rule of the exchange format.
    #[error("{location}: {message}")]
    Data {
        /// Where the offending field or row is.
        location: Location,
        /// What was found and what was expected.
        message: String,
    },
    /// A whole-table rule was broken (missing rows, configuration mismatch, empty file).
    #[error("{path}: {message}")]
    Table {
        /// The table concerned.
        path: PathBuf,
        /// What was found and what was expected.
        message: String,
    },
    /// The pipeline or mock specification is invalid.
    #[error("{message}")]
    Config {
        /// The full message, with YAML line/column where known and what would be valid.
        message: String,
    },
    /// A computation could not be carried out on the data given (too few points, singular
    /// covariance, missing two-point momentum for a ratio, ...).
    #[error("{stage}: {message}")]
    Analysis {
        /// The stage that failed (`spectrum`, `ratio`, ...).
        stage: &'static str,
        /// What went wrong and, where possible, what to change.
        message: String,
    },
}

impl Error {
    /// Wrap an I/O error with the path it concerns.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }

    /// An analysis error from `stage`.
    pub fn analysis(stage: &'static str, message: impl Into<String>) -> Self {
        Error::Analysis {
            stage,
            message: message.into(),
        }
    }

    /// A configuration error.
    pub fn config(message: impl Into<String>) -> Self {
        Error::Config {
            message: message.into(),
        }
    }
}
