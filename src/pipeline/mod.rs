//! The run pipeline, the one path every command that runs a plan takes: inputs read once and
//! checked ([`prepare`]: design, expectation, plan and bench file, before any port opens), the
//! plan run on a bench ([`execute`]: runner, then the derived files), and the result
//! ([`Finished`]). `regulus run` and `regulus demo` are thin callers of it. This module prints
//! nothing and parses no command line; it must not depend on `cli`.

mod error;
mod execute;
mod inputs;
mod preflight;

pub use error::PipelineError;
pub use execute::{execute, write_derived, Finished};
pub use inputs::{prepare, InputFile, Prepared, RunRequest};
pub use preflight::{judge_preflight, preflight, preflight_band, Preflight, PREFLIGHT_MARGIN};
