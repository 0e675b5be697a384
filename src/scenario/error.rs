//! Typed input errors: each names the file, line:column, field path and the allowed range.

use std::fmt;

use crate::text::{excerpt, EXCERPT_CHARS};

/// Where in an input a problem sits.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Place {
    /// A file (or embedded file) at a line and column (1-based).
    File {
        file: String,
        line: usize,
        col: usize,
    },
    /// A command-line override.
    Override { key: String, value: String },
    /// A file, position unknown.
    FileOnly { file: String },
}

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Place::File { file, line, col } => write!(f, "{file}:{line}:{col}"),
            Place::Override { key, value } => write!(
                f,
                "--set {}={}",
                excerpt(key, EXCERPT_CHARS),
                excerpt(value, EXCERPT_CHARS)
            ),
            Place::FileOnly { file } => write!(f, "{file}"),
        }
    }
}

/// A bad input (exit code 2 at the edge).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum InputError {
    #[error("could not read '{}': {reason}", excerpt(.path, 4 * EXCERPT_CHARS))]
    Read { path: String, reason: String },
    #[error("{place}: RON syntax error: {}", excerpt(.message, 4 * EXCERPT_CHARS))]
    Syntax { place: Place, message: String },
    /// `message` is bounded where it is made: the parser's own text is cut there, ours names
    /// the valid fields in full.
    #[error("{place}: field `{}`: {message}", excerpt(.path, EXCERPT_CHARS))]
    Field {
        place: Place,
        path: String,
        message: String,
    },
    #[error("{place}: `{}` = {} is out of range; allowed {allowed}", excerpt(.path, EXCERPT_CHARS), excerpt(.value, EXCERPT_CHARS))]
    Range {
        place: Place,
        path: String,
        value: String,
        allowed: String,
    },
    #[error("--set {}: {}", excerpt(.key, EXCERPT_CHARS), excerpt(.message, 4 * EXCERPT_CHARS))]
    Override { key: String, message: String },
    #[error("{0}")]
    Usage(String),
    /// A measured log (CSV): the file, the line, the column as written in the header (None for
    /// a problem with the whole row) and the rule it breaks.
    #[error("{}:{line}: {}{rule}", excerpt(.file, 4 * EXCERPT_CHARS), .column.as_ref().map_or_else(String::new, |c| format!("column `{c}`: ")))]
    Log {
        file: String,
        line: usize,
        column: Option<String>,
        rule: String,
    },
}
