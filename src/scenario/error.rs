//! Typed input errors: each names the file, line:column, field path and the allowed range.

use std::fmt;

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
            Place::Override { key, value } => write!(f, "--set {key}={value}"),
            Place::FileOnly { file } => write!(f, "{file}"),
        }
    }
}

/// A bad input (exit code 2 at the edge).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum InputError {
    #[error("could not read '{path}': {reason}")]
    Read { path: String, reason: String },
    #[error("{place}: RON syntax error: {message}")]
    Syntax { place: Place, message: String },
    #[error("{place}: field `{path}`: {message}")]
    Field {
        place: Place,
        path: String,
        message: String,
    },
    #[error("{place}: `{path}` = {value} is out of range; allowed {allowed}")]
    Range {
        place: Place,
        path: String,
        value: String,
        allowed: String,
    },
    #[error("--set {key}: {message}")]
    Override { key: String, message: String },
    #[error("{0}")]
    Usage(String),
}
