//! The record's layout as types: file names, the readings header, one row (cells keyed by
//! quantity, flags and load state as enums), run.json (`RunInfo`, `Outcome`) and the naming of
//! run folders. Pure data and formatting; the writer and readers do the I/O.

use crate::control::InstrumentIdentity;
use crate::measure::{LoadMode, Quantity};
use chrono::{DateTime, SecondsFormat, Utc};
use serde::{Deserialize, Serialize};

/// Version of the record layout written by this build.
pub const SCHEMA_VERSION: u32 = 1;

/// The exact header line of `readings.csv`.
pub const READINGS_HEADER: &str = "utc,elapsed_s,step,step_kind,point,load_mode,setpoint,source_volts,samples,output_voltage [V],output_voltage_spread [V],output_current [A],output_current_spread [A],input_voltage [V],input_voltage_spread [V],input_current [A],input_current_spread [A],temperature [degC],temperature_spread [degC],flags";

/// File names inside a run folder.
pub const READINGS_FILE: &str = "readings.csv";
pub const RUN_FILE: &str = "run.json";
pub const DESIGN_SNAPSHOT: &str = "design.toml";
pub const BENCH_SNAPSHOT: &str = "bench.toml";
pub const PLAN_SNAPSHOT: &str = "plan.toml";

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
    /// The unloaded reading taken before the first step (a record row only, never a plan
    /// step: it promises no metric and no analysis reads it).
    Preflight,
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
            StepKind::Preflight => "preflight",
        }
    }
    /// A plan step's kind (the pre-flight is not one).
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
    /// A record row's kind: a plan step's, or the pre-flight reading's.
    pub fn parse_row(s: &str) -> Option<StepKind> {
        StepKind::parse(s).or((s == StepKind::Preflight.as_str()).then_some(StepKind::Preflight))
    }
}

/// A measured column: mean over the samples and spread (max - min); `overrange` is explicit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub enum Cell {
    Value { mean: f64, spread: f64 },
    Overrange,
}

/// The measured cells of one row, keyed by quantity. A quantity without an instrument has no
/// cell.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Cells([Option<Cell>; Quantity::ALL.len()]);

/// Position of a quantity in [`Quantity::ALL`] (the cells' slot).
fn slot(q: Quantity) -> usize {
    Quantity::ALL
        .iter()
        .position(|x| *x == q)
        .unwrap_or_default()
}

impl Cells {
    pub fn new() -> Cells {
        Cells::default()
    }
    /// The cell of a quantity, if one was measured.
    pub fn get(&self, q: Quantity) -> Option<Cell> {
        self.0[slot(q)]
    }
    /// Set (or, with `None`, clear) the cell of a quantity.
    pub fn set(&mut self, q: Quantity, cell: Option<Cell>) {
        self.0[slot(q)] = cell;
    }
    /// True when any cell is an overrange.
    pub fn any_overrange(&self) -> bool {
        self.0.contains(&Some(Cell::Overrange))
    }
}

impl FromIterator<(Quantity, Option<Cell>)> for Cells {
    fn from_iter<I: IntoIterator<Item = (Quantity, Option<Cell>)>>(iter: I) -> Cells {
        let mut cells = Cells::new();
        for (q, c) in iter {
            cells.set(q, c);
        }
        cells
    }
}

impl<const N: usize> From<[(Quantity, Option<Cell>); N]> for Cells {
    fn from(pairs: [(Quantity, Option<Cell>); N]) -> Cells {
        pairs.into_iter().collect()
    }
}

/// A mark on a row, written as a word in the `flags` column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Flag {
    /// A measured cell of the row is an overrange.
    Overrange,
    /// The row tripped an interlock.
    Interlock,
    /// Short removed, output recovering.
    Recovery,
    /// First row of a short-circuit dwell.
    DwellStart,
    /// Last row of a short-circuit dwell.
    DwellEnd,
    /// An exchange with an instrument was retried (or its link resynchronised) for this row
    /// or a setting it depends on: the reading is good, the link was not.
    Retried,
}

impl Flag {
    pub const ALL: [Flag; 6] = [
        Flag::Overrange,
        Flag::Interlock,
        Flag::Recovery,
        Flag::DwellStart,
        Flag::DwellEnd,
        Flag::Retried,
    ];

    pub fn as_str(self) -> &'static str {
        match self {
            Flag::Overrange => "overrange",
            Flag::Interlock => "interlock",
            Flag::Recovery => "recovery",
            Flag::DwellStart => "dwell_start",
            Flag::DwellEnd => "dwell_end",
            Flag::Retried => "retried",
        }
    }
    pub fn parse(s: &str) -> Option<Flag> {
        Flag::ALL.into_iter().find(|f| f.as_str() == s)
    }
}

impl TryFrom<&str> for Flag {
    type Error = ();
    fn try_from(word: &str) -> Result<Flag, ()> {
        Flag::parse(word).ok_or(())
    }
}

/// The flags of one row: a set that keeps the order the flags were added in (the order they
/// are written in).
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Flags(Vec<Flag>);

impl Flags {
    pub fn new() -> Flags {
        Flags::default()
    }
    /// Add a flag (once; adding it again changes nothing).
    pub fn insert(&mut self, flag: Flag) {
        if !self.contains(flag) {
            self.0.push(flag);
        }
    }
    pub fn contains(&self, flag: Flag) -> bool {
        self.0.contains(&flag)
    }
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
    pub fn iter(&self) -> impl Iterator<Item = Flag> + '_ {
        self.0.iter().copied()
    }
    /// The flag words joined by `sep` (`;` in the record).
    pub fn join(&self, sep: &str) -> String {
        self.0
            .iter()
            .map(|f| f.as_str())
            .collect::<Vec<_>>()
            .join(sep)
    }
}

impl FromIterator<Flag> for Flags {
    fn from_iter<I: IntoIterator<Item = Flag>>(iter: I) -> Flags {
        let mut flags = Flags::new();
        for f in iter {
            flags.insert(f);
        }
        flags
    }
}

impl From<Vec<Flag>> for Flags {
    fn from(v: Vec<Flag>) -> Flags {
        v.into_iter().collect()
    }
}

/// The electronic load during a row: off, or on in a mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LoadState {
    /// Load input off (`off` in the record).
    Off,
    /// Load input on in this mode (`cc`, `cv` or `cr`).
    On(LoadMode),
}

impl LoadState {
    pub fn as_str(self) -> &'static str {
        match self {
            LoadState::Off => "off",
            LoadState::On(m) => m.as_str(),
        }
    }
    pub fn parse(s: &str) -> Option<LoadState> {
        match s {
            "off" => Some(LoadState::Off),
            "cc" => Some(LoadState::On(LoadMode::ConstantCurrent)),
            "cv" => Some(LoadState::On(LoadMode::ConstantVoltage)),
            "cr" => Some(LoadState::On(LoadMode::ConstantResistance)),
            _ => None,
        }
    }
    pub fn is_off(self) -> bool {
        self == LoadState::Off
    }
}

/// Compares with the record word (`"cc"`, `"off"`).
impl PartialEq<&str> for LoadState {
    fn eq(&self, word: &&str) -> bool {
        self.as_str() == *word
    }
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
    pub load_mode: LoadState,
    pub setpoint: Option<f64>,
    pub source_volts: Option<f64>,
    pub samples: u32,
    /// Measured cells by quantity.
    pub cells: Cells,
    pub flags: Flags,
}

impl Row {
    /// The measured cell for a quantity.
    pub fn cell(&self, q: Quantity) -> Option<Cell> {
        self.cells.get(q)
    }
    /// The mean of a measured quantity, if present and not overrange.
    pub fn value(&self, q: Quantity) -> Option<f64> {
        match self.cell(q) {
            Some(Cell::Value { mean, .. }) => Some(mean),
            _ => None,
        }
    }
    /// Whether the row carries a flag, given as a [`Flag`] or as its record word
    /// (`"dwell_start"`); a word that names no flag is never set.
    pub fn has_flag<F: TryInto<Flag>>(&self, flag: F) -> bool {
        flag.try_into()
            .map(|f| self.flags.contains(f))
            .unwrap_or(false)
    }
}

/// How a run ended (run.json's `outcome`). The overall verdict of a record is decided from
/// it by `compare::judge`: `aborted` is INCOMPLETE, `error` (and `failed`) is ERROR.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Outcome {
    /// Written at the start; a record still saying so after its writer is gone was cut short.
    Running,
    /// Every step of the plan ran.
    Completed,
    /// Stopped before the end of the plan by an interlock or the operator (Ctrl-C, a signal).
    Aborted,
    /// The station failed: an instrument or its link, the safe state, the disk.
    Error,
    /// Older records' word for a station failure (read as [`Outcome::Error`]).
    Failed,
}

impl Outcome {
    /// The word written in run.json.
    pub fn as_str(self) -> &'static str {
        match self {
            Outcome::Running => "running",
            Outcome::Completed => "completed",
            Outcome::Aborted => "aborted",
            Outcome::Error => "error",
            Outcome::Failed => "failed",
        }
    }

    /// The outcome a word of run.json (or an index or store holding it) names; a word it
    /// does not know reads as `running`, which a reader then takes for cut short.
    pub fn from_word(word: &str) -> Outcome {
        match word {
            "completed" => Outcome::Completed,
            "aborted" => Outcome::Aborted,
            "failed" => Outcome::Failed,
            "error" => Outcome::Error,
            _ => Outcome::Running,
        }
    }
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
