//! The record writer: creates the run folder (never reusing one), writes the snapshots, holds
//! an advisory lock on readings.csv while alive, appends rows and flushes each before
//! returning, and replaces run.json atomically. It never rewrites or deletes readings.

use super::error::{io_err, FileAction, RecordError};
use super::schema::{
    check_component, folder_name, utc_string, Cell, Outcome, Row, RunInfo, Snapshots,
    BENCH_SNAPSHOT, DESIGN_SNAPSHOT, PLAN_SNAPSHOT, READINGS_FILE, READINGS_HEADER, RUN_FILE,
};
use crate::control::InstrumentIdentity;
use crate::measure::Quantity;
use chrono::{DateTime, Utc};
use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// Write `bytes` to `path` atomically: a temporary file in the same folder, synced, renamed,
/// and the folder synced so the new name is on disk too. A failed write leaves the old file
/// in place (and no temporary file behind).
fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), RecordError> {
    let tmp = path.with_extension("json.tmp");
    let written = (|| {
        let mut f = File::create(&tmp).map_err(io_err(FileAction::Create, &tmp))?;
        f.write_all(bytes)
            .map_err(io_err(FileAction::Write, &tmp))?;
        f.sync_all().map_err(io_err(FileAction::Sync, &tmp))?;
        drop(f);
        fs::rename(&tmp, path).map_err(io_err(FileAction::Replace, path))
    })();
    if written.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    written?;
    if let Some(dir) = path.parent() {
        sync_dir(dir).map_err(io_err(FileAction::Sync, dir))?;
    }
    Ok(())
}

/// Sync a folder (its entries: names created or renamed in it) to disk. On systems where a
/// folder cannot be opened for syncing this does nothing.
pub fn sync_dir(dir: &Path) -> io::Result<()> {
    #[cfg(unix)]
    {
        File::open(dir)?.sync_all()
    }
    #[cfg(not(unix))]
    {
        let _ = dir;
        Ok(())
    }
}

/// Advisory lock held on readings.csv while a writer is alive; readers use it to tell a
/// running record from an incomplete one (a writer that died releases it with its process).
#[cfg(unix)]
pub(super) mod lock {
    use std::fs::File;
    use std::os::unix::io::AsRawFd;

    /// Take an exclusive lock; false when another open file holds one.
    pub fn try_exclusive(f: &File) -> bool {
        // SAFETY: flock only reads the descriptor, which `f` keeps open for this call.
        unsafe { libc::flock(f.as_raw_fd(), libc::LOCK_EX | libc::LOCK_NB) == 0 }
    }
    /// True when some live writer holds the lock.
    pub fn held_elsewhere(f: &File) -> bool {
        // SAFETY: as above; the shared lock is released when `f` is closed.
        let r = unsafe { libc::flock(f.as_raw_fd(), libc::LOCK_SH | libc::LOCK_NB) };
        r != 0
    }
}

#[cfg(not(unix))]
pub(super) mod lock {
    use std::fs::File;
    pub fn try_exclusive(_f: &File) -> bool {
        true
    }
    pub fn held_elsewhere(_f: &File) -> bool {
        false
    }
}

/// Writes one run's record as it happens. Create it before the first reading; append each
/// row (on disk when `append` returns); call [`finish`](Self::finish) at the end.
#[derive(Debug)]
pub struct RecordWriter {
    dir: PathBuf,
    csv: csv::Writer<File>,
    info: RunInfo,
}

impl RecordWriter {
    /// Create `<records>/<unit>/<UTC>_<plan>/` (with a `-2`, `-3`... suffix when taken),
    /// write the snapshots, the readings header and run.json with outcome `running`.
    /// `info.started_utc` is set from `started`.
    pub fn create(
        records: &Path,
        started: DateTime<Utc>,
        mut info: RunInfo,
        snapshots: &Snapshots<'_>,
    ) -> Result<RecordWriter, RecordError> {
        let bad = |m: String| RecordError::Invalid {
            path: records.to_path_buf(),
            message: m,
        };
        check_component("unit id", &info.unit).map_err(bad)?;
        check_component("plan name", &info.plan_name).map_err(bad)?;
        let unit_dir = records.join(&info.unit);
        fs::create_dir_all(&unit_dir).map_err(io_err(FileAction::CreateFolder, &unit_dir))?;
        let base = folder_name(started, &info.plan_name);
        let mut n = 1u32;
        let dir = loop {
            let name = if n == 1 {
                base.clone()
            } else {
                format!("{base}-{n}")
            };
            let candidate = unit_dir.join(name);
            // create_dir (not _all) fails when the folder exists: never reuse a run folder.
            match fs::create_dir(&candidate) {
                Ok(()) => break candidate,
                Err(e) if e.kind() == io::ErrorKind::AlreadyExists && n < 10_000 => n += 1,
                Err(e) => return Err(io_err(FileAction::CreateFolder, &candidate)(e)),
            }
        };
        for (name, bytes) in [
            (DESIGN_SNAPSHOT, snapshots.design),
            (BENCH_SNAPSHOT, snapshots.bench),
            (PLAN_SNAPSHOT, snapshots.plan),
        ] {
            let p = dir.join(name);
            fs::write(&p, bytes).map_err(io_err(FileAction::WriteSnapshot, &p))?;
        }
        let path = dir.join(READINGS_FILE);
        let mut file = OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&path)
            .map_err(io_err(FileAction::Create, &path))?;
        if !lock::try_exclusive(&file) {
            return Err(RecordError::Invalid {
                path,
                message: "another writer holds this record".to_string(),
            });
        }
        file.write_all(READINGS_HEADER.as_bytes())
            .and_then(|_| file.write_all(b"\n"))
            .and_then(|_| file.flush())
            .map_err(io_err(FileAction::Write, &path))?;
        let csv = csv::WriterBuilder::new()
            .has_headers(false)
            .from_writer(file);
        info.started_utc = utc_string(started);
        info.ended_utc = None;
        info.outcome = Outcome::Running;
        info.reason = None;
        info.rows = 0;
        let w = RecordWriter { dir, csv, info };
        w.write_info()?;
        Ok(w)
    }

    pub fn dir(&self) -> &Path {
        &self.dir
    }

    pub fn info(&self) -> &RunInfo {
        &self.info
    }

    pub fn rows(&self) -> u64 {
        self.info.rows
    }

    /// Append one row and flush it to the operating system before returning.
    pub fn append(&mut self, row: &Row) -> Result<(), RecordError> {
        let path = self.dir.join(READINGS_FILE);
        self.csv
            .write_record(row_fields(row))
            .map_err(|e| RecordError::Invalid {
                path: path.clone(),
                message: format!("cannot write a row: {e}"),
            })?;
        self.csv.flush().map_err(io_err(FileAction::Write, &path))?;
        self.info.rows += 1;
        Ok(())
    }

    /// Update the instrument list in run.json (e.g. once identities are known).
    pub fn set_instruments(
        &mut self,
        instruments: Vec<InstrumentIdentity>,
    ) -> Result<(), RecordError> {
        self.info.instruments = instruments;
        self.write_info()
    }

    /// Close the record: sync the readings and replace run.json with the final outcome.
    pub fn finish(
        mut self,
        ended: DateTime<Utc>,
        outcome: Outcome,
        reason: Option<String>,
    ) -> Result<RunInfo, RecordError> {
        let path = self.dir.join(READINGS_FILE);
        self.csv.flush().map_err(io_err(FileAction::Write, &path))?;
        self.csv
            .get_ref()
            .sync_all()
            .map_err(io_err(FileAction::Sync, &path))?;
        self.info.ended_utc = Some(utc_string(ended));
        self.info.outcome = outcome;
        self.info.reason = reason;
        self.write_info()?;
        Ok(self.info)
    }

    fn write_info(&self) -> Result<(), RecordError> {
        let path = self.dir.join(RUN_FILE);
        let json = serde_json::to_vec_pretty(&self.info).map_err(|e| RecordError::Invalid {
            path: path.clone(),
            message: format!("cannot encode run information: {e}"),
        })?;
        write_atomic(&path, &json)
    }
}

fn num(x: f64) -> String {
    format!("{x}")
}

fn opt_num(x: Option<f64>) -> String {
    x.map(num).unwrap_or_default()
}

fn cell_fields(c: Option<Cell>) -> [String; 2] {
    match c {
        Some(Cell::Value { mean, spread }) => [num(mean), num(spread)],
        Some(Cell::Overrange) => ["overrange".to_string(), String::new()],
        None => [String::new(), String::new()],
    }
}

/// The CSV fields of one row, in header order.
pub fn row_fields(row: &Row) -> Vec<String> {
    let mut f = vec![
        row.utc.clone(),
        format!("{:.3}", row.elapsed_s),
        row.step.to_string(),
        row.step_kind.as_str().to_string(),
        row.point.to_string(),
        row.load_mode.as_str().to_string(),
        opt_num(row.setpoint),
        opt_num(row.source_volts),
        row.samples.to_string(),
    ];
    for q in Quantity::ALL {
        f.extend(cell_fields(row.cell(q)));
    }
    f.push(row.flags.join(";"));
    f
}
