//! Store errors, saying what to check: the server (unreachable, refused), the record, or the
//! local queue file.

use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("store {url}: not a valid PostgreSQL connection URL: {source} (write postgresql://USER@HOST:PORT/DATABASE)")]
    Url {
        url: String,
        #[source]
        source: tokio_postgres::Error,
    },
    #[error("store {url}: cannot connect: {source} (is the server running and reachable? the runs stay queued locally)")]
    Connect {
        url: String,
        #[source]
        source: tokio_postgres::Error,
    },
    #[error("store: {what}: {source}")]
    Sql {
        what: String,
        #[source]
        source: tokio_postgres::Error,
    },
    #[error("{path}: {message}")]
    Record { path: PathBuf, message: String },
    #[error("{path}: cannot update the local list of uploaded runs: {source}")]
    Queue {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
}

impl StoreError {
    /// The server could not be reached or went away (the runs stay queued).
    pub fn is_unreachable(&self) -> bool {
        match self {
            StoreError::Connect { .. } => true,
            StoreError::Sql { source, .. } => source.is_closed() || source.code().is_none(),
            _ => false,
        }
    }
}

pub(super) fn sql(what: impl Into<String>) -> impl FnOnce(tokio_postgres::Error) -> StoreError {
    let what = what.into();
    move |source| StoreError::Sql { what, source }
}
