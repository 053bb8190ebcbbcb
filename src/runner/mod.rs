//! The runner: executes an expanded [`crate::plan::Plan`] on any
//! [`crate::control::BenchControl`], checks the interlocks on every reading (and between
//! readings during long waits), writes the record row by row, reports progress to an
//! [`Observer`], and always ends with the bench's safe state (load input off first, then the
//! source) whether the run completed, tripped an interlock, lost an instrument or was
//! interrupted. It also checks, before any port opens, that a bench file can carry out a plan
//! (`needs.rs`). It never parses instrument replies and never opens ports itself.

mod exec;
mod interlocks;
mod needs;
mod run;
mod types;

pub use interlocks::{check_interlocks, short_circuit_cautions};
pub use needs::check_bench_for_plan;
pub use run::run;
pub use types::{
    CancelToken, Observer, Recovery, RunError, RunReport, RunSetup, Silent, StepResult, StopKind,
    RECOVERY_TOLERANCE,
};
