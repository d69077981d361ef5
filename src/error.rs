//! The library's error type. Every variant that concerns a file or a record
//! carries the path or id it failed on, so a message printed at the edge
//! names what went wrong and where.

use std::path::PathBuf;

/// Result alias used across the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },

    #[error("index store {path}: {source}")]
    Store {
        path: PathBuf,
        #[source]
        source: rusqlite::Error,
    },

    #[error(
        "index at {path} was written by store format {found}, but this onrecord reads format {expected}; \
         add your documents to a new index (or use the onrecord version that wrote it)"
    )]
    FormatMismatch {
        path: PathBuf,
        found: String,
        expected: u32,
    },

    #[error("no index at {path}; run `onrecord add <PATH>` first (or pass --index)")]
    NoIndex { path: PathBuf },

    #[error(
        "index at {path} is being written by {holder}; wait for it to finish, then run this again \
         (two writers at once would repeat each other's work)"
    )]
    Busy { path: PathBuf, holder: String },

    #[error("search index {path}: {message}")]
    Search { path: PathBuf, message: String },

    #[error("{path}: {message}")]
    Extract { path: PathBuf, message: String },

    #[error("{path}, line {line}: {message}")]
    BadInput {
        path: PathBuf,
        line: usize,
        message: String,
    },

    #[error("model {path}: {message}")]
    Model { path: PathBuf, message: String },

    #[error("vector index {path}: {message}")]
    Vectors { path: PathBuf, message: String },

    #[error("endpoint {endpoint}: {message}")]
    Remote { endpoint: String, message: String },

    #[error("{0}")]
    Invalid(String),
}

impl Error {
    pub(crate) fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }

    pub(crate) fn store(path: impl Into<PathBuf>, source: rusqlite::Error) -> Self {
        Error::Store {
            path: path.into(),
            source,
        }
    }

    pub(crate) fn search(path: impl Into<PathBuf>, e: impl std::fmt::Display) -> Self {
        Error::Search {
            path: path.into(),
            message: e.to_string(),
        }
    }
}
