//! Command-line interface: one file per command, each with its own clap `Args` struct and a
//! `run` function returning the process exit code. Errors carry context for the user; the
//! binary prints the chain once and maps it to an exit code with [`exit_code_for`].

use clap::{Parser, Subcommand};

pub mod compare;
pub mod demo;
pub mod design;
pub mod history;
pub mod probe;
pub mod report;
pub mod run;
pub mod sim;
pub mod size;

/// Exit code: completed and passed, or the command succeeded.
pub const EXIT_OK: u8 = 0;
/// Exit code: completed with a failing verdict.
pub const EXIT_FAIL: u8 = 1;
/// Exit code: usage or configuration error.
pub const EXIT_USAGE: u8 = 2;
/// Exit code: aborted (instrument failure, interlock, interrupt).
pub const EXIT_ABORTED: u8 = 3;

/// An error that carries its own exit code (wrap it in anyhow; `exit_code_for` finds it).
#[derive(Debug, thiserror::Error)]
#[error("{message}")]
pub struct CodedError {
    pub code: u8,
    pub message: String,
}

impl CodedError {
    pub fn new(code: u8, message: impl Into<String>) -> CodedError {
        CodedError {
            code,
            message: message.into(),
        }
    }
}

#[derive(Debug, Parser)]
#[command(
    name = "regulus",
    version,
    about = "Design, characterize and track linear regulated DC power supplies",
    long_about = "regulus computes a linear regulated supply's expected behaviour with tolerance \
bands, drives bench instruments over serial or TCP to characterize each built unit, compares \
measured with designed, flags drift and keeps a dated record per unit.\n\nCAUTION: power supplies \
under test can carry mains voltages, get hot and deliver large short-circuit currents. Follow \
local codes and licensed practice."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Compute a design's expected behaviour: output range, limit, dissipation, headroom, thermal.
    Design(design::Args),
    /// Choose a sense resistor and clamp parts from targets, with preferred (E-series) values.
    Size(size::Args),
    /// Connect to a bench's instruments, identify them and take one reading from each.
    Probe(probe::Args),
    /// Start a simulated bench (a simulated unit and its instruments) on local ports.
    Sim(sim::Args),
    /// Run a test plan on a unit and keep a dated record (stresses the unit: read the cautions).
    Run(run::Args),
    /// Run the standard plan on the built-in simulated bench; no hardware needed.
    Demo(demo::Args),
    /// Regenerate a record's summary, plots and HTML report.
    Report(report::Args),
    /// List a unit's dated runs with key metrics and drift flags.
    History(history::Args),
    /// Re-evaluate records against a design (for instance a new revision).
    Compare(compare::Args),
}

/// Run the chosen command and return its exit code.
pub fn dispatch(cli: Cli) -> anyhow::Result<u8> {
    match cli.command {
        Command::Design(a) => design::run(a),
        Command::Size(a) => size::run(a),
        Command::Probe(a) => probe::run(a),
        Command::Sim(a) => sim::run(a),
        Command::Run(a) => run::run(a),
        Command::Demo(a) => demo::run(a),
        Command::Report(a) => report::run(a),
        Command::History(a) => history::run(a),
        Command::Compare(a) => compare::run(a),
    }
}

/// Map an error to an exit code: a [`CodedError`] anywhere in the chain decides; a design
/// file error is a configuration error (2); anything else is an abort (3).
pub fn exit_code_for(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if let Some(c) = cause.downcast_ref::<CodedError>() {
            return c.code;
        }
        if cause.downcast_ref::<crate::design::DesignError>().is_some() {
            return EXIT_USAGE;
        }
    }
    EXIT_ABORTED
}
