//! The embedded index of a records folder: an SQLite database (`.regulus-index.sqlite` in the
//! records root; no unit serial can start with a dot) with one row per run folder: unit,
//! station, design, plan, dates, outcome, verdict, floor result, key metrics and the full
//! metrics of its summary. It is a cache: the folders stay the source of truth, a run is
//! added when it finishes, a unit's rows are checked against its folders before they are
//! used, and `rebuild` makes it again from the folders. Never writes into a record folder.
//! This file only declares and re-exports.

mod db;
mod prejudged;
mod scan;
mod types;

pub use db::{index_path, Index, Rebuilt, RunFilter, INDEX_FILE};
pub use prejudged::{prejudged_key, Prejudged};
pub use types::{IndexError, IndexedRun, JudgingRow, MetricsRow};

/// Add a run that just finished to the index of its records root (its folder's grandparent).
pub fn run_finished(dir: &std::path::Path) -> Result<(), IndexError> {
    let root = dir
        .parent()
        .and_then(|u| u.parent())
        .ok_or_else(|| IndexError::NotARecord(dir.to_path_buf()))?;
    Index::open(root)?.add_record(dir)
}
