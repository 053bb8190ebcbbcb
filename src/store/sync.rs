//! Syncing a records folder into the store: every record folder that is not being written
//! and is not yet on the local list of uploaded runs (`.regulus-synced` in the records root,
//! one line per run, appended after the store committed it) is the local queue; each is
//! uploaded in its own transaction. Safe to rerun and to run from several stations at once
//! (a run already in the store is left alone and only noted locally); when the store is
//! unreachable the queue simply stays, and the next sync catches up.

use super::error::{sql, StoreError};
use super::upload::{upload_record, Uploaded};
use crate::record::{self, RecordState};
use std::collections::HashSet;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Duration;
use tokio_postgres::{Client, Config, NoTls};

/// The local list of uploaded runs, in the records root.
pub const SYNCED_FILE: &str = ".regulus-synced";

/// What a sync did.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SyncReport {
    pub uploaded: usize,
    /// Runs the store already held (uploaded before, from here or by an interrupted sync).
    pub already: usize,
    /// Reading rows copied.
    pub readings: u64,
    /// Records that could not be uploaded, with the reason.
    pub skipped: Vec<String>,
}

/// Connect to the store (5 s to connect) and apply the migrations it lacks.
pub async fn connect(url: &str) -> Result<Client, StoreError> {
    let mut cfg: Config = url.parse().map_err(|source| StoreError::Url {
        url: url.to_string(),
        source,
    })?;
    cfg.connect_timeout(Duration::from_secs(5));
    let (mut client, connection) =
        cfg.connect(NoTls)
            .await
            .map_err(|source| StoreError::Connect {
                url: url.to_string(),
                source,
            })?;
    tokio::spawn(async move {
        // The connection ends when the client is dropped or the server goes away; the
        // client's next call then reports it.
        let _ = connection.await;
    });
    super::migrate(&mut client).await?;
    Ok(client)
}

fn synced_set(records: &Path) -> Result<HashSet<String>, StoreError> {
    let path = records.join(SYNCED_FILE);
    match std::fs::read_to_string(&path) {
        Ok(text) => Ok(text
            .lines()
            .filter_map(|l| l.split('\t').nth(1))
            .map(str::to_string)
            .collect()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(HashSet::new()),
        Err(source) => Err(StoreError::Queue { path, source }),
    }
}

fn note_synced(records: &Path, up: &Uploaded, rel: &str) -> Result<(), StoreError> {
    let path = records.join(SYNCED_FILE);
    let err = |source| StoreError::Queue {
        path: path.clone(),
        source,
    };
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(&path)
        .map_err(err)?;
    // One write per line: appends of a short line do not interleave.
    f.write_all(format!("{}\t{rel}\n", up.run_id).as_bytes())
        .map_err(err)?;
    f.sync_data().map_err(err)
}

/// The local queue: record folders (`<unit>/<run>`, oldest name first) not yet uploaded and
/// not being written.
pub fn pending(records: &Path) -> Result<Vec<PathBuf>, StoreError> {
    let done = synced_set(records)?;
    let list = |dir: &Path| -> Result<Vec<PathBuf>, StoreError> {
        let mut v = Vec::new();
        let rd = std::fs::read_dir(dir).map_err(|source| StoreError::Queue {
            path: dir.to_path_buf(),
            source,
        })?;
        for e in rd.flatten() {
            let hidden = e.file_name().to_string_lossy().starts_with('.');
            if !hidden && e.file_type().map(|t| t.is_dir()).unwrap_or(false) {
                v.push(e.path());
            }
        }
        v.sort();
        Ok(v)
    };
    let mut out = Vec::new();
    for unit in list(records)? {
        for dir in list(&unit)? {
            let rel = relative(records, &dir);
            if done.contains(&rel) {
                continue;
            }
            let Ok(info) = record::read_info(&dir) else {
                continue;
            };
            if record::record_state(&dir, &info) == RecordState::Running {
                continue;
            }
            out.push(dir);
        }
    }
    Ok(out)
}

fn relative(records: &Path, dir: &Path) -> String {
    dir.strip_prefix(records)
        .unwrap_or(dir)
        .to_string_lossy()
        .into_owned()
}

/// Upload the queue of a records folder. `station` names the station of records without a
/// station stamp. Stops at the first sign that the store went away (the rest stays queued:
/// [`pending`] says what is left).
pub async fn sync_folder(
    client: &mut Client,
    records: &Path,
    station: Option<&str>,
) -> Result<SyncReport, StoreError> {
    let queue = pending(records)?;
    let mut rep = SyncReport::default();
    for dir in &queue {
        match upload_record(client, dir, station).await {
            Ok(up) => {
                note_synced(records, &up, &relative(records, dir))?;
                if up.already {
                    rep.already += 1;
                } else {
                    rep.uploaded += 1;
                    rep.readings += up.readings;
                }
            }
            // The store went away: the rest stays queued for the next sync.
            Err(e) if e.is_unreachable() => return Err(e),
            Err(e) => rep.skipped.push(format!("{}: {e}", dir.display())),
        }
    }
    // Make sure the last commit really reached the server before reporting.
    client
        .simple_query("SELECT 1")
        .await
        .map_err(sql("check the connection"))?;
    Ok(rep)
}
