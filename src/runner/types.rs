//! The runner's public types: the cancellation token, progress callbacks, what a run is given
//! and what it reports, and why a run stopped early. No I/O.

use crate::control::ControlError;
use crate::plan::{KneeResult, Step};
use crate::record::{DesignRef, Outcome, RecordError, Row, RunInfo, Snapshots};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

/// Recovery after a short counts as confirmed when the output is back within this fraction
/// of its value before the short (2 %, common practice for a pass/fail recovery check).
pub const RECOVERY_TOLERANCE: f64 = 0.02;

/// Longest sleep between two looks at the cancellation flag.
pub(super) const POLL: Duration = Duration::from_millis(20);

/// A cancellation flag shared between the runner and whoever may stop it (Ctrl-C handler,
/// a test). Cheap to clone; all clones share one flag.
#[derive(Debug, Clone, Default)]
pub struct CancelToken(Arc<AtomicBool>);

impl CancelToken {
    pub fn new() -> CancelToken {
        CancelToken::default()
    }
    /// Ask the runner to stop; it reaches the safe state within about 20 ms of its next wait
    /// or after the instrument command in flight.
    pub fn cancel(&self) {
        self.0.store(true, Ordering::SeqCst);
    }
    pub fn is_cancelled(&self) -> bool {
        self.0.load(Ordering::SeqCst)
    }
}

/// What a step found, reported when it finishes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct StepResult {
    pub rows: usize,
    /// Knee search answer.
    pub knee: Option<KneeResult>,
    /// Short circuit: output voltage before the short, last reading after release, and
    /// whether it came back within [`RECOVERY_TOLERANCE`].
    pub recovery: Option<Recovery>,
}

/// Recovery check after a short circuit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Recovery {
    pub before_v: f64,
    pub after_v: f64,
    pub recovered: bool,
}

/// Progress callbacks. All methods have empty defaults.
pub trait Observer {
    fn step_started(&mut self, _index: usize, _step: &Step) {}
    fn point_taken(&mut self, _index: usize, _row: &Row) {}
    fn step_finished(&mut self, _index: usize, _step: &Step, _result: &StepResult) {}
    /// The run is stopping; `reason` says why. Called before the safe state runs.
    fn stopping(&mut self, _reason: &str) {}
}

/// An observer that ignores everything.
#[derive(Debug, Default)]
pub struct Silent;
impl Observer for Silent {}

/// Everything about a run that is not in the plan or the bench.
#[derive(Debug, Clone)]
pub struct RunSetup<'a> {
    /// Records root; the run goes to `<records>/<unit>/<UTC>_<plan>/`.
    pub records: &'a Path,
    pub unit: String,
    pub operator: Option<String>,
    pub note: Option<String>,
    pub design: DesignRef,
    pub snapshots: Snapshots<'a>,
}

/// How a run went.
#[derive(Debug)]
pub struct RunReport {
    pub outcome: Outcome,
    /// Why the run stopped early (`None` when every step ran).
    pub stop: Option<StopKind>,
    pub reason: Option<String>,
    pub dir: PathBuf,
    pub rows: u64,
    pub steps: Vec<StepResult>,
    /// Failures while putting the bench in its safe state (each names the instrument).
    pub safe_state_errors: Vec<ControlError>,
    /// The final run.json content, when it could be written.
    pub info: Option<RunInfo>,
    /// Set when the final run.json could not be written.
    pub finish_error: Option<RecordError>,
}

/// Problems found before anything on the bench was switched on.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error("{0}")]
    Roles(String),
    #[error(transparent)]
    Record(#[from] RecordError),
}

/// Why a run stopped early.
#[derive(Debug)]
pub(super) enum Stop {
    Interlock(String),
    Cancelled,
    Instrument(String),
    Record(String),
}

impl Stop {
    pub(super) fn outcome_reason(&self) -> (Outcome, String) {
        match self {
            Stop::Interlock(r) => (Outcome::Aborted, format!("interlock: {r}")),
            Stop::Cancelled => (Outcome::Aborted, "interrupted by the operator".to_string()),
            Stop::Instrument(r) => (Outcome::Error, format!("instrument failure: {r}")),
            Stop::Record(r) => (Outcome::Error, format!("record could not be written: {r}")),
        }
    }
}

/// Why a run stopped early, by kind (the outcome model maps each to its outcome and exit code
/// in one place).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StopKind {
    /// An interlock tripped.
    Interlock,
    /// The operator interrupted the run.
    Cancelled,
    /// An instrument or its link failed (no reply, refused, closed, out of step): the
    /// station, not the unit.
    Instrument,
    /// The record could not be written.
    Record,
}

impl Stop {
    pub(super) fn kind(&self) -> StopKind {
        match self {
            Stop::Interlock(_) => StopKind::Interlock,
            Stop::Cancelled => StopKind::Cancelled,
            Stop::Instrument(_) => StopKind::Instrument,
            Stop::Record(_) => StopKind::Record,
        }
    }
}
