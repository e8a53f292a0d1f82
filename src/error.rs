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

/// Longest line of an error message printed whole; longer lines are cut in the middle.
const MAX_LINE_CHARS: usize = 400;

/// `message` made fit for a terminal: control characters (other than newlines and tabs)
/// shown as escapes, and each line longer than a few hundred characters shortened, so a
/// field of binary garbage or of 50 MB is never echoed whole.
pub fn printable(message: &str) -> String {
    message
        .split('\n')
        .map(|line| {
            let clean: String = line
                .chars()
                .flat_map(|c| -> Vec<char> {
                    if c.is_control() && c != '\t' {
                        c.escape_default().collect()
                    } else {
                        vec![c]
                    }
                })
                .collect();
            shorten(&clean, MAX_LINE_CHARS)
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// `text` with at most about `max` characters: its start and end with the number of
/// characters left out between them.
pub fn shorten(text: &str, max: usize) -> String {
    let n = text.chars().count();
    if n <= max {
        return text.to_string();
    }
    let keep = max / 2;
    let head: String = text.chars().take(keep).collect();
    let tail: String = text.chars().skip(n - keep / 2).collect();
    format!(
        "{head}[... {} characters left out ...]{tail}",
        n - keep - keep / 2
    )
}

/// A field's raw bytes for a message: invalid UTF-8 and control characters escaped, at most
/// about 60 characters.
pub fn excerpt(raw: &[u8]) -> String {
    const MAX: usize = 60;
    // Only the bytes that can be shown are converted, whatever the field's size.
    let cut = &raw[..raw.len().min(4 * MAX)];
    let text: String = cut.escape_ascii().to_string();
    let shown = shorten(&text, MAX);
    if raw.len() > cut.len() {
        format!("{shown}[... {} bytes in all]", raw.len())
    } else {
        shown
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_and_binary_text_is_shortened_and_escaped() {
        let long = "x".repeat(10_000);
        let p = printable(&format!("error: {long}\nnext\u{7}"));
        assert!(p.len() < 600, "{}", p.len());
        assert!(
            p.contains("characters left out") && p.ends_with("next\\u{7}"),
            "{p}"
        );
        let e = excerpt(&[0xff; 1_000_000]);
        assert!(e.len() < 200 && e.contains("1000000 bytes in all"), "{e}");
        assert_eq!(excerpt(b"1.5e"), "1.5e");
    }
}
