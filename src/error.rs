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

/// A setting outside its valid range, found by the settings type itself: the key path
/// inside its section (`t_min`, `tsep[2]`) and what was expected. The pipeline prefixes the
/// section and turns the path into the line and column of the key in the YAML file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Invalid {
    /// Key path inside the section.
    pub key: String,
    /// What is wrong and what would be valid.
    pub message: String,
}

impl Invalid {
    /// The setting at `key` is invalid because of `message`.
    pub fn new(key: impl Into<String>, message: impl Into<String>) -> Self {
        Invalid {
            key: key.into(),
            message: message.into(),
        }
    }
}

impl std::fmt::Display for Invalid {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "`{}`: {}", self.key, self.message)
    }
}

/// Levenshtein edit distance between two strings (by characters).
pub fn levenshtein(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for (i, ca) in a.chars().enumerate() {
        cur[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// The candidate closest to `word` if it is a plausible misspelling (distance at most a
/// third of the word's length, at least 1; ties go to the first candidate).
pub fn suggest<'a>(word: &str, candidates: &[&'a str]) -> Option<&'a str> {
    let limit = (word.chars().count() / 3).max(1);
    candidates
        .iter()
        .map(|c| (levenshtein(word, c), *c))
        .filter(|(d, _)| *d <= limit)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c)
}
