//! Errors from reading or writing traces.

use std::fmt;

/// What went wrong and, for reading, on which line (1-based).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TraceError {
    /// 1-based line number, `None` for problems of the whole file (such as a missing `end`).
    pub line: Option<usize>,
    /// What was expected and what was found.
    pub message: String,
}

impl TraceError {
    /// An error at a line.
    pub fn at(line: usize, message: impl Into<String>) -> Self {
        TraceError {
            line: Some(line),
            message: message.into(),
        }
    }

    /// An error of the whole file.
    pub fn file(message: impl Into<String>) -> Self {
        TraceError {
            line: None,
            message: message.into(),
        }
    }
}

impl fmt::Display for TraceError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.line {
            Some(n) => write!(f, "line {n}: {}", self.message),
            None => write!(f, "{}", self.message),
        }
    }
}

impl std::error::Error for TraceError {}
