//! Record layout shared by the writer (runner) and the readers (analysis, report, history).
//! See docs/ARCHITECTURE.md "Record layout". This file holds the types and the CSV header;
//! the writer appends and flushes each row as it is taken, and never rewrites readings.

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
