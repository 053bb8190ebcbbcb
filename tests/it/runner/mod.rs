//! The runner, the record and the run command, mostly against the in-memory test bench.

mod cli;
mod plans;
mod record;
mod run;
