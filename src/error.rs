//! Errors. Every error names where it happened (file and line, reaction, step or engine) and,
//! where there is one, what the user can do about it.

use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A user file could not be parsed: path, 1-based line, message.
    #[error("{path}:{line}: {msg}")]
    Parse {
        path: String,
        line: usize,
        msg: String,
    },
    /// An I/O failure, with what was being done.
    #[error("{context}: {source}")]
    Io {
        context: String,
        #[source]
        source: std::io::Error,
    },
    /// Input that is well-formed but not acceptable (e.g. impossible charge/multiplicity).
    #[error("{0}")]
    Invalid(String),
    /// An engine evaluation failed (after any retries).
    #[error("engine '{engine}': {msg}{}", output.as_ref().map(|p| format!(" (engine output kept in {})", p.display())).unwrap_or_default())]
    Engine {
        engine: String,
        msg: String,
        output: Option<PathBuf>,
    },
    /// An algorithm could not go on (e.g. NaN in a Hessian).
    #[error("{0}")]
    Algorithm(String),
}

impl Error {
    pub fn io(context: impl Into<String>, source: std::io::Error) -> Self {
        Error::Io {
            context: context.into(),
            source,
        }
    }
    pub fn invalid(msg: impl Into<String>) -> Self {
        Error::Invalid(msg.into())
    }
    pub fn parse(path: impl Into<String>, line: usize, msg: impl Into<String>) -> Self {
        Error::Parse {
            path: path.into(),
            line,
            msg: msg.into(),
        }
    }
}

pub type Result<T, E = Error> = std::result::Result<T, E>;
