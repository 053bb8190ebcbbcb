//! Command-line interface: one file per command, each with its own clap `Args` struct and a
//! `run` function returning the process exit code. Errors carry context for the user; the
//! binary prints the chain once and maps it to an exit code with [`exit_code_for`].
//! This module only declares and re-exports.

mod app;
pub mod batch;
pub mod compare;
pub mod completions;
pub mod dashboard;
pub mod demo;
pub mod design;
mod exit;
pub mod history;
pub mod index;
pub mod json_out;
pub mod options;
pub mod ports;
pub mod present;
pub mod probe;
pub mod report;
pub mod run;
pub mod sim;
pub mod size;
pub mod station;
pub mod sync;

pub use app::{dispatch, Cli, Command};
pub use exit::{
    exit_code_for, exit_codes_help, for_batch, for_verdict, for_verdicts, usage, CodedError,
    EXIT_ABORTED, EXIT_CODES, EXIT_ERROR, EXIT_FAIL, EXIT_INCOMPLETE, EXIT_MARGINAL, EXIT_OK,
    EXIT_USAGE,
};
