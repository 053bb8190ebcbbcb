//! Record layout shared by the writer (runner) and the readers (analysis, report, history).
//! See docs/ARCHITECTURE.md "Record layout". This file holds the types and the CSV header,
//! the writer (folder creation, snapshots, rows appended and flushed one by one, run.json
//! replaced atomically) and the readers (rows, one run, a unit's history). It never rewrites
//! or deletes readings and knows nothing about instruments or plans.

use crate::control::InstrumentIdentity;
use crate::measure::Quantity;
use serde::{Deserialize, Serialize};

/// Version of the record layout written by this build.
pub const SCHEMA_VERSION: u32 = 1;

/// The exact header line of `readings.csv`.
pub const READINGS_HEADER: &str = "utc,elapsed_s,step,step_kind,point,load_mode,setpoint,source_volts,samples,output_voltage [V],output_voltage_spread [V],output_current [A],output_current_spread [A],input_voltage [V],input_voltage_spread [V],input_current [A],input_current_spread [A],temperature [degC],temperature_spread [degC],flags";

/// What kind of plan step produced a row.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum StepKind {
    LoadSweep,
    LimitTrace,
    KneeSearch,
    ShortCircuit,
    LineSweep,
    Soak,
}

impl StepKind {
    pub fn as_str(self) -> &'static str {
        match self {
            StepKind::LoadSweep => "load_sweep",
            StepKind::LimitTrace => "limit_trace",
            StepKind::KneeSearch => "knee_search",
            StepKind::ShortCircuit => "short_circuit",
            StepKind::LineSweep => "line_sweep",
            StepKind::Soak => "soak",
        }
    }
    pub fn parse(s: &str) -> Option<StepKind> {
        [
            StepKind::LoadSweep,
            StepKind::LimitTrace,
            StepKind::KneeSearch,
            StepKind::ShortCircuit,
            StepKind::LineSweep,
            StepKind::Soak,
        ]
        .into_iter()
        .find(|k| k.as_str() == s)
    }
}

/// A measured column: mean over the samples and spread (max - min); `overrange` is explicit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub enum Cell {
    Value { mean: f64, spread: f64 },
    Overrange,
}

/// One row of `readings.csv`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Row {
    /// RFC 3339 UTC with milliseconds, e.g. `2026-12-01T22:40:01.123Z`.
    pub utc: String,
    pub elapsed_s: f64,
    pub step: usize,
    pub step_kind: StepKind,
    pub point: usize,
    /// `cc`, `cv`, `cr`, or `off` when the load input is off.
    pub load_mode: String,
    pub setpoint: Option<f64>,
    pub source_volts: Option<f64>,
    pub samples: u32,
    pub output_voltage: Option<Cell>,
    pub output_current: Option<Cell>,
    pub input_voltage: Option<Cell>,
    pub input_current: Option<Cell>,
    pub temperature: Option<Cell>,
    /// Flags: `overrange`, `interlock`, `recovery`, `dwell_start`, `dwell_end`.
    pub flags: Vec<String>,
}

impl Row {
    /// The measured cell for a quantity.
    pub fn cell(&self, q: Quantity) -> Option<Cell> {
        match q {
            Quantity::OutputVoltage => self.output_voltage,
            Quantity::OutputCurrent => self.output_current,
            Quantity::InputVoltage => self.input_voltage,
            Quantity::InputCurrent => self.input_current,
            Quantity::Temperature => self.temperature,
        }
    }
    /// The mean of a measured quantity, if present and not overrange.
    pub fn value(&self, q: Quantity) -> Option<f64> {
        match self.cell(q) {
            Some(Cell::Value { mean, .. }) => Some(mean),
            _ => None,
        }
    }
    pub fn has_flag(&self, flag: &str) -> bool {
        self.flags.iter().any(|f| f == flag)
    }
}

/// How a run ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Outcome {
    Running,
    Completed,
    Aborted,
    Failed,
}

/// Which design a run was made against.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DesignRef {
    pub path: String,
    pub sha256: String,
    pub name: String,
}

/// Content of `run.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunInfo {
    pub schema_version: u32,
    pub tool_version: String,
    pub unit: String,
    pub plan_name: String,
    pub design: DesignRef,
    pub instruments: Vec<InstrumentIdentity>,
    pub operator: Option<String>,
    pub note: Option<String>,
    pub started_utc: String,
    pub ended_utc: Option<String>,
    pub outcome: Outcome,
    pub reason: Option<String>,
    pub rows: u64,
}

// ---------------------------------------------------------------------------------------------
// Writer and readers

use chrono::{DateTime, SecondsFormat, Utc};
use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// File names inside a run folder.
pub const READINGS_FILE: &str = "readings.csv";
pub const RUN_FILE: &str = "run.json";
pub const DESIGN_SNAPSHOT: &str = "design.toml";
pub const BENCH_SNAPSHOT: &str = "bench.toml";
pub const PLAN_SNAPSHOT: &str = "plan.toml";

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

fn io_err(action: &'static str, path: &Path) -> impl FnOnce(io::Error) -> RecordError {
    let path = path.to_path_buf();
    move |source| RecordError::Io {
        action,
        path,
        source,
    }
}

/// Byte-for-byte copies of the input files, stored beside the readings.
#[derive(Debug, Clone, Copy)]
pub struct Snapshots<'a> {
    pub design: &'a [u8],
    pub bench: &'a [u8],
    pub plan: &'a [u8],
}

/// UTC time as written in records: RFC 3339 with milliseconds and `Z`.
pub fn utc_string(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Millis, true)
}

/// Folder name of a run: `<UTC %Y%m%dT%H%M%SZ>_<plan name>`.
pub fn folder_name(started: DateTime<Utc>, plan_name: &str) -> String {
    format!("{}_{}", started.format("%Y%m%dT%H%M%SZ"), plan_name)
}

/// Check that a unit id or plan name is safe as one path component.
pub fn check_component(what: &str, s: &str) -> Result<(), String> {
    let ok = !s.is_empty()
        && !s.starts_with('.')
        && s.len() <= 100
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.');
    if ok {
        Ok(())
    } else {
        Err(format!(
            "{what} '{s}' must be 1-100 characters of letters, digits, '-', '_' and '.', \
             not starting with '.' (it names a folder)"
        ))
    }
}

/// Write `bytes` to `path` atomically: a temporary file in the same folder, synced, renamed.
fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), RecordError> {
    let tmp = path.with_extension("json.tmp");
    let mut f = File::create(&tmp).map_err(io_err("create", &tmp))?;
    f.write_all(bytes).map_err(io_err("write", &tmp))?;
    f.sync_all().map_err(io_err("sync", &tmp))?;
    drop(f);
    fs::rename(&tmp, path).map_err(io_err("replace", path))?;
    Ok(())
}

/// Advisory lock held on readings.csv while a writer is alive; readers use it to tell a
/// running record from an incomplete one (a writer that died releases it with its process).
#[cfg(unix)]
mod lock {
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
mod lock {
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
        fs::create_dir_all(&unit_dir).map_err(io_err("create folder", &unit_dir))?;
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
                Err(e) => return Err(io_err("create folder", &candidate)(e)),
            }
        };
        for (name, bytes) in [
            (DESIGN_SNAPSHOT, snapshots.design),
            (BENCH_SNAPSHOT, snapshots.bench),
            (PLAN_SNAPSHOT, snapshots.plan),
        ] {
            let p = dir.join(name);
            fs::write(&p, bytes).map_err(io_err("write snapshot", &p))?;
        }
        let path = dir.join(READINGS_FILE);
        let mut file = OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&path)
            .map_err(io_err("create", &path))?;
        if !lock::try_exclusive(&file) {
            return Err(RecordError::Invalid {
                path,
                message: "another writer holds this record".to_string(),
            });
        }
        file.write_all(READINGS_HEADER.as_bytes())
            .and_then(|_| file.write_all(b"\n"))
            .and_then(|_| file.flush())
            .map_err(io_err("write", &path))?;
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
        self.csv.flush().map_err(io_err("write", &path))?;
        self.info.rows += 1;
        Ok(())
    }

    /// Update the instrument list in run.json (e.g. once identities are known).
    pub fn set_instruments(
        &mut self,
        instruments: Vec<crate::control::InstrumentIdentity>,
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
        self.csv.flush().map_err(io_err("write", &path))?;
        self.csv
            .get_ref()
            .sync_all()
            .map_err(io_err("sync", &path))?;
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
        row.load_mode.clone(),
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

fn parse_row(rec: &csv::StringRecord) -> Result<Row, String> {
    let n_fields = READINGS_HEADER.split(',').count();
    if rec.len() != n_fields {
        return Err(format!("expected {n_fields} fields, found {}", rec.len()));
    }
    let field = |i: usize| rec.get(i).unwrap_or("");
    let f64_at = |i: usize, name: &str| -> Result<f64, String> {
        field(i)
            .parse::<f64>()
            .map_err(|_| format!("`{name}` is not a number: '{}'", field(i)))
    };
    let opt_at = |i: usize, name: &str| -> Result<Option<f64>, String> {
        if field(i).is_empty() {
            Ok(None)
        } else {
            f64_at(i, name).map(Some)
        }
    };
    let usize_at = |i: usize, name: &str| -> Result<usize, String> {
        field(i)
            .parse::<usize>()
            .map_err(|_| format!("`{name}` is not a whole number: '{}'", field(i)))
    };
    let cell_at = |i: usize, name: &str| -> Result<Option<Cell>, String> {
        match field(i) {
            "" => Ok(None),
            "overrange" => Ok(Some(Cell::Overrange)),
            _ => Ok(Some(Cell::Value {
                mean: f64_at(i, name)?,
                spread: opt_at(i + 1, name)?.unwrap_or(0.0),
            })),
        }
    };
    let step_kind =
        StepKind::parse(field(3)).ok_or_else(|| format!("unknown step_kind '{}'", field(3)))?;
    let samples = field(8)
        .parse::<u32>()
        .map_err(|_| format!("`samples` is not a whole number: '{}'", field(8)))?;
    Ok(Row {
        utc: field(0).to_string(),
        elapsed_s: f64_at(1, "elapsed_s")?,
        step: usize_at(2, "step")?,
        step_kind,
        point: usize_at(4, "point")?,
        load_mode: field(5).to_string(),
        setpoint: opt_at(6, "setpoint")?,
        source_volts: opt_at(7, "source_volts")?,
        samples,
        output_voltage: cell_at(9, "output_voltage")?,
        output_current: cell_at(11, "output_current")?,
        input_voltage: cell_at(13, "input_voltage")?,
        input_current: cell_at(15, "input_current")?,
        temperature: cell_at(17, "temperature")?,
        flags: field(19)
            .split(';')
            .filter(|s| !s.is_empty())
            .map(str::to_string)
            .collect(),
    })
}

/// Read every complete row of a readings.csv. A last line cut short by a killed process
/// (no final newline) is skipped: it is the reading that was in flight.
pub fn read_rows(path: &Path) -> Result<Vec<Row>, RecordError> {
    let bytes = fs::read(path).map_err(io_err("read", path))?;
    let complete = match bytes.iter().rposition(|b| *b == b'\n') {
        Some(p) => &bytes[..=p],
        None => &bytes[..0],
    };
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .from_reader(complete);
    let header = rdr.headers().map_err(|e| RecordError::Csv {
        path: path.to_path_buf(),
        line: 1,
        message: e.to_string(),
    })?;
    let expected: Vec<&str> = READINGS_HEADER.split(',').collect();
    if header.iter().collect::<Vec<_>>() != expected {
        return Err(RecordError::Csv {
            path: path.to_path_buf(),
            line: 1,
            message: "the header is not a regulus readings header (schema version 1)".into(),
        });
    }
    let mut rows = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| RecordError::Csv {
            path: path.to_path_buf(),
            line: e.position().map(|p| p.line()).unwrap_or(0),
            message: e.to_string(),
        })?;
        let line = rec.position().map(|p| p.line()).unwrap_or(0);
        rows.push(parse_row(&rec).map_err(|message| RecordError::Csv {
            path: path.to_path_buf(),
            line,
            message,
        })?);
    }
    Ok(rows)
}

/// Whether a record is finished, still being written, or was left behind by a dead process.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RecordState {
    /// run.json holds a final outcome.
    Finished(Outcome),
    /// Outcome `running` and a live writer holds the record.
    Running,
    /// Outcome `running` but no writer is alive: the run was cut short.
    Incomplete,
}

/// One run read back from disk.
#[derive(Debug, Clone)]
pub struct RunRecord {
    pub dir: PathBuf,
    pub info: RunInfo,
    pub state: RecordState,
    pub rows: Vec<Row>,
}

/// The state of a record from its run.json and the writer's lock.
pub fn record_state(dir: &Path, info: &RunInfo) -> RecordState {
    if info.outcome != Outcome::Running {
        return RecordState::Finished(info.outcome);
    }
    let Ok(f) = File::open(dir.join(READINGS_FILE)) else {
        return RecordState::Incomplete;
    };
    // A process that forks (any program starting another) briefly shares the writer's open
    // file, lock included, until the child execs: only a lock held on three looks spaced
    // 20 ms apart is a live writer.
    for look in 0..3 {
        if look > 0 {
            std::thread::sleep(std::time::Duration::from_millis(20));
        }
        if !lock::held_elsewhere(&f) {
            return RecordState::Incomplete;
        }
    }
    RecordState::Running
}

/// Read run.json of a run folder.
pub fn read_info(dir: &Path) -> Result<RunInfo, RecordError> {
    let path = dir.join(RUN_FILE);
    let bytes = fs::read(&path).map_err(io_err("read", &path))?;
    serde_json::from_slice(&bytes).map_err(|e| RecordError::Invalid {
        path,
        message: format!("not a regulus run.json: {e}"),
    })
}

/// Read one run folder: run.json, its state, and its rows.
pub fn read_run(dir: &Path) -> Result<RunRecord, RecordError> {
    let info = read_info(dir)?;
    let state = record_state(dir, &info);
    let rows = read_rows(&dir.join(READINGS_FILE))?;
    Ok(RunRecord {
        dir: dir.to_path_buf(),
        info,
        state,
        rows,
    })
}

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
    let rd = fs::read_dir(&unit_dir).map_err(io_err("list", &unit_dir))?;
    let mut dirs: Vec<PathBuf> = Vec::new();
    for e in rd {
        let e = e.map_err(io_err("list", &unit_dir))?;
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
