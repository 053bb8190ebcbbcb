//! What can stop the run pipeline, each kept with its kind and source, and phrased so the user
//! knows what to check. [`PipelineError::is_config`] tells a problem with the inputs (fix a
//! file or an argument) from a failure of the station (an instrument, a link, a disk).

use crate::bench::BenchError;
use crate::control::ControlError;
use crate::design::DesignError;
use crate::plan::PlanError;
use crate::runner::RunError;
use std::path::PathBuf;

/// A run could not be prepared or started.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The unit id cannot name a folder.
    #[error("{0}")]
    Unit(String),
    #[error("cannot read {what} {}: {source}", path.display())]
    Read {
        what: &'static str,
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{}: the plan file is not UTF-8 text", path.display())]
    NotText { path: PathBuf },
    #[error(transparent)]
    Design(#[from] DesignError),
    #[error(transparent)]
    Plan(#[from] PlanError),
    #[error(transparent)]
    Bench(Box<BenchError>),
    #[error("{message} (bench file {})", bench.display())]
    BenchRoles { message: String, bench: PathBuf },
    /// The pre-flight reading does not look like the design; the bench is in its safe state.
    /// `record` is the run folder that keeps the stop (run.json `aborted` with the reason,
    /// the reading in readings.csv, summary and report), once written.
    #[error("{message}{}", record.as_ref().map(|d| format!("; the record {} keeps the reading and says why", d.display())).unwrap_or_default())]
    PreFlight {
        message: String,
        measured_v: f64,
        /// The reading as a record row (kind `preflight`), to be written into the record.
        row: Option<Box<crate::record::Row>>,
        record: Option<PathBuf>,
    },
    /// The pre-flight stopped the unit, but the record of the stop could not be written (a
    /// station failure: the disk or the records folder).
    #[error("{message}; the record of this stop could not be written: {error}")]
    PreFlightNotRecorded {
        message: String,
        error: String,
        /// The record folder could not be created (check --records: exit 2, as for a run
        /// the runner cannot start); otherwise writing it failed (the disk: exit 4).
        config: bool,
    },
    /// The pre-flight reading could not be taken (the station's failure).
    #[error("pre-flight: the unloaded output could not be read: {error}")]
    PreFlightInstrument {
        #[source]
        error: ControlError,
    },
    /// Interrupted during the pre-flight reading; nothing was stressed.
    #[error("interrupted during the pre-flight reading: nothing was stressed, no record started")]
    PreFlightCancelled,
    /// The runner refused to start; the bench was put in its safe state (failures listed).
    #[error("{}", not_started(error))]
    NotStarted {
        #[source]
        error: RunError,
        safe_state: Vec<ControlError>,
    },
}

fn not_started(e: &RunError) -> String {
    match e {
        RunError::Roles(m) => m.clone(),
        RunError::Record(e) => format!("{e} (check --records)"),
    }
}

impl From<BenchError> for PipelineError {
    fn from(e: BenchError) -> PipelineError {
        PipelineError::Bench(Box::new(e))
    }
}

impl PipelineError {
    /// True for problems with the inputs (a file, an argument, the records folder); false for
    /// failures of the station (an instrument or its link).
    pub fn is_config(&self) -> bool {
        match self {
            PipelineError::Bench(e) => e.is_config(),
            PipelineError::PreFlightNotRecorded { config, .. } => *config,
            PipelineError::PreFlight { .. }
            | PipelineError::PreFlightInstrument { .. }
            | PipelineError::PreFlightCancelled => false,
            _ => true,
        }
    }

    /// True when the run stopped before any stress without a station failure: the unit did
    /// not look like the design, or the operator interrupted the pre-flight (INCOMPLETE).
    pub fn is_stopped_before_stress(&self) -> bool {
        matches!(
            self,
            PipelineError::PreFlight { .. } | PipelineError::PreFlightCancelled
        )
    }
}
