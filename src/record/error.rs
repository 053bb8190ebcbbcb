//! The one error type of the record: a file could not be written or read, naming the file and
//! what to check. No I/O of its own.

use std::io;
use std::path::{Path, PathBuf};

/// A record could not be written or read; names the file and what to check.
#[derive(Debug, thiserror::Error)]
pub enum RecordError {
    #[error("cannot {action} {path}: {source}")]
    Io {
        action: &'static str,
        path: PathBuf,
        #[source]
        source: io::Error,
    },
    #[error("{path}: line {line}: {message}")]
    Csv {
        path: PathBuf,
        line: u64,
        message: String,
    },
    #[error("{path}: {message}")]
    Invalid { path: PathBuf, message: String },
}

/// Wrap an I/O error with what was being done to which file.
pub(super) fn io_err(action: &'static str, path: &Path) -> impl FnOnce(io::Error) -> RecordError {
    let path = path.to_path_buf();
    move |source| RecordError::Io {
        action,
        path,
        source,
    }
}
