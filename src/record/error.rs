//! The one error type of the record: a file could not be written or read, naming the file and
//! what to check. No I/O of its own.

use std::fmt;
use std::io;
use std::path::{Path, PathBuf};

/// What was being done to a record file when an I/O error happened.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileAction {
    Create,
    CreateFolder,
    List,
    Read,
    Replace,
    Sync,
    Write,
    WriteSnapshot,
}

impl FileAction {
    /// The words used in messages (`cannot <action> <path>`).
    pub fn as_str(self) -> &'static str {
        match self {
            FileAction::Create => "create",
            FileAction::CreateFolder => "create folder",
            FileAction::List => "list",
            FileAction::Read => "read",
            FileAction::Replace => "replace",
            FileAction::Sync => "sync",
            FileAction::Write => "write",
            FileAction::WriteSnapshot => "write snapshot",
        }
    }
}

impl fmt::Display for FileAction {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A record could not be written or read; names the file and what to check.
#[derive(Debug, thiserror::Error)]
pub enum RecordError {
    #[error("cannot {action} {path}: {source}")]
    Io {
        action: FileAction,
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

impl RecordError {
    /// True when an existing record could not be read (listed, read or parsed): the user's to
    /// check (a wrong folder, a damaged file); false when writing a record failed.
    pub fn is_reading(&self) -> bool {
        match self {
            RecordError::Io { action, .. } => matches!(action, FileAction::Read | FileAction::List),
            RecordError::Csv { .. } | RecordError::Invalid { .. } => true,
        }
    }
}

/// Wrap an I/O error with what was being done to which file.
pub(super) fn io_err(action: FileAction, path: &Path) -> impl FnOnce(io::Error) -> RecordError {
    let path = path.to_path_buf();
    move |source| RecordError::Io {
        action,
        path,
        source,
    }
}
