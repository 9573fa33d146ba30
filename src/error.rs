//! Errors of a run and the exit codes they map to.
//!
//! | exit | meaning |
//! |---|---|
//! | 0 | success |
//! | 1 | the input data could not be read (malformed record, I/O failure) |
//! | 2 | a usage problem: options, columns, lists or weightings |
//! | 3 | `--strict` found a warning and stopped |

use std::fmt;

use crate::lists::ListError;
use crate::score::ScoreError;

#[derive(Debug)]
pub enum Error {
    /// Bad options, unknown columns, unknown lists or weightings.
    Usage(String),
    /// A broken code list.
    Lists(ListError),
    /// Input data that cannot be read; `line` is the 1-based line of the
    /// record where it is known.
    Data { line: Option<u64>, message: String },
    /// Reading or writing failed.
    Io {
        context: String,
        source: std::io::Error,
    },
    /// A warning turned into a failure by `--strict`.
    Strict { line: Option<u64>, message: String },
}

impl Error {
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Data { .. } | Error::Io { .. } => 1,
            Error::Usage(_) | Error::Lists(_) => 2,
            Error::Strict { .. } => 3,
        }
    }

    pub fn io(context: impl Into<String>, source: std::io::Error) -> Error {
        Error::Io {
            context: context.into(),
            source,
        }
    }

    pub fn data(line: Option<u64>, message: impl Into<String>) -> Error {
        Error::Data {
            line,
            message: message.into(),
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Error::Usage(m) => f.write_str(m),
            Error::Lists(e) => write!(f, "{e}"),
            Error::Data {
                line: Some(l),
                message,
            } => write!(f, "line {l}: {message}"),
            Error::Data {
                line: None,
                message,
            } => f.write_str(message),
            Error::Io { context, source } => write!(f, "{context}: {source}"),
            Error::Strict {
                line: Some(l),
                message,
            } => write!(f, "line {l}: {message} (--strict)"),
            Error::Strict {
                line: None,
                message,
            } => write!(f, "{message} (--strict)"),
        }
    }
}

impl std::error::Error for Error {}

impl From<ScoreError> for Error {
    fn from(e: ScoreError) -> Self {
        match e {
            ScoreError::Usage(m) => Error::Usage(m),
        }
    }
}

impl From<ListError> for Error {
    fn from(e: ListError) -> Self {
        Error::Lists(e)
    }
}
