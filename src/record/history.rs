//! A unit's history: its run folders, oldest first, each with what its run.json says (or why
//! it cannot be read). Read only.

use super::error::{io_err, FileAction, RecordError};
use super::reader::{read_info, record_state, RecordState};
use super::schema::{check_component, RunInfo};
use std::fs;
use std::path::{Path, PathBuf};

/// One entry of a unit's history: a run folder and what its run.json says.
#[derive(Debug)]
pub struct HistoryEntry {
    pub dir: PathBuf,
    pub info: Result<RunInfo, RecordError>,
    pub state: Option<RecordState>,
}

/// A unit's run folders, oldest first (folder names start with the UTC start time).
/// Folders without a readable run.json are listed with their error, never skipped silently.
pub fn list_runs(records: &Path, unit: &str) -> Result<Vec<HistoryEntry>, RecordError> {
    check_component("unit id", unit).map_err(|m| RecordError::Invalid {
        path: records.to_path_buf(),
        message: m,
    })?;
    let unit_dir = records.join(unit);
    let rd = fs::read_dir(&unit_dir).map_err(io_err(FileAction::List, &unit_dir))?;
    let mut dirs: Vec<PathBuf> = Vec::new();
    for e in rd {
        let e = e.map_err(io_err(FileAction::List, &unit_dir))?;
        if e.file_type().map(|t| t.is_dir()).unwrap_or(false) {
            dirs.push(e.path());
        }
    }
    dirs.sort_by_key(|d| folder_sort_key(d));
    Ok(dirs
        .into_iter()
        .map(|dir| {
            let info = read_info(&dir);
            let state = info.as_ref().ok().map(|i| record_state(&dir, i));
            HistoryEntry { dir, info, state }
        })
        .collect())
}

/// Sort key: (time stamp and plan, numeric suffix) so that `-10` sorts after `-9`.
fn folder_sort_key(dir: &Path) -> (String, u32) {
    let name = dir
        .file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_default();
    if let Some((head, tail)) = name.rsplit_once('-') {
        if let Ok(n) = tail.parse::<u32>() {
            return (head.to_string(), n);
        }
    }
    (name, 1)
}
