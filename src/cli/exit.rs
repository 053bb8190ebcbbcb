//! Exit codes, decided in one place: [`exit_code_for`] maps any error to the process exit
//! code by its kind (never by its text), and [`for_run`] / [`for_verdict`] map results.
//! 0 completed and passed (or the command succeeded); 1 completed with a failing verdict;
//! 2 usage or configuration error; 3 aborted (instrument failure, interlock, interrupt).

use crate::compare::Verdict;
use crate::record::Outcome;
#[cfg(test)]
use crate::record::RecordError;
use crate::report::ReportError;

/// Exit code: completed and passed, or the command succeeded.
pub const EXIT_OK: u8 = 0;
/// Exit code: completed with a failing verdict.
pub const EXIT_FAIL: u8 = 1;
/// Exit code: usage or configuration error.
pub const EXIT_USAGE: u8 = 2;
/// Exit code: aborted (instrument failure, interlock, interrupt).
pub const EXIT_ABORTED: u8 = 3;

/// An error the command line itself found (an argument, a confirmation), with its exit code.
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

/// A usage error (exit 2) with this message, as an anyhow error.
pub fn usage(message: impl Into<String>) -> anyhow::Error {
    CodedError::new(EXIT_USAGE, message).into()
}

/// The exit code of an error: the outermost error in the chain whose kind is known decides;
/// configuration problems (design, plan and bench files, records to read, arguments) are 2;
/// anything else (instruments, links, writing files) aborts with 3.
pub fn exit_code_for(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if let Some(c) = cause.downcast_ref::<CodedError>() {
            return c.code;
        }
        if let Some(e) = cause.downcast_ref::<crate::pipeline::PipelineError>() {
            return config_or_abort(e.is_config());
        }
        if let Some(e) = cause.downcast_ref::<crate::bench::BenchError>() {
            return config_or_abort(e.is_config());
        }
        if let Some(e) = cause.downcast_ref::<ReportError>() {
            return config_or_abort(report_is_config(e));
        }
        if cause.downcast_ref::<crate::design::DesignError>().is_some()
            || cause.downcast_ref::<crate::plan::PlanError>().is_some()
            || cause.downcast_ref::<crate::config::Located>().is_some()
            || cause
                .downcast_ref::<crate::spice::netlist::NetlistError>()
                .is_some()
            || cause
                .downcast_ref::<crate::design::sizing::SizeError>()
                .is_some()
        {
            return EXIT_USAGE;
        }
    }
    EXIT_ABORTED
}

fn config_or_abort(config: bool) -> u8 {
    if config {
        EXIT_USAGE
    } else {
        EXIT_ABORTED
    }
}

/// A record that cannot be read or is malformed is the user's to fix (a wrong folder);
/// failing to write derived files or plots is not.
fn report_is_config(e: &ReportError) -> bool {
    match e {
        ReportError::Record(e) => e.is_reading(),
        _ => false,
    }
}

/// Exit code of a run: 3 when it did not complete; 1 when it completed with a failing
/// verdict; 0 otherwise.
pub fn for_run(outcome: Outcome, verdict: Option<Verdict>) -> u8 {
    match (outcome, verdict) {
        (Outcome::Completed, Some(Verdict::Fail)) => EXIT_FAIL,
        (Outcome::Completed, _) => EXIT_OK,
        _ => EXIT_ABORTED,
    }
}

/// Exit code of a judgement of finished records: 1 when any verdict fails, else 0.
pub fn for_verdicts(verdicts: impl IntoIterator<Item = Option<Verdict>>) -> u8 {
    if verdicts.into_iter().any(|v| v == Some(Verdict::Fail)) {
        EXIT_FAIL
    } else {
        EXIT_OK
    }
}

/// Exit code of a batch of runs (the demo): the first abort or usage code among them, or 0
/// when every run went through (a failing unit is a result, not a failure of the batch).
pub fn for_batch(codes: impl IntoIterator<Item = u8>) -> u8 {
    let worst = codes.into_iter().max().unwrap_or(EXIT_OK);
    if worst >= EXIT_ABORTED {
        worst
    } else {
        EXIT_OK
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn errors_map_by_kind() {
        let e: anyhow::Error = crate::config::Located {
            file: "d.toml".into(),
            line: Some(1),
            column: Some(1),
            message: "bad".into(),
        }
        .into();
        assert_eq!(exit_code_for(&e), EXIT_USAGE);
        assert_eq!(exit_code_for(&e.context("while preparing")), EXIT_USAGE);
        assert_eq!(exit_code_for(&usage("x")), EXIT_USAGE);
        let io = std::io::Error::other("link closed");
        assert_eq!(exit_code_for(&anyhow::Error::from(io)), EXIT_ABORTED);
        let rec = ReportError::Record(RecordError::Invalid {
            path: "r".into(),
            message: "m".into(),
        });
        assert_eq!(exit_code_for(&rec.into()), EXIT_USAGE);
    }

    #[test]
    fn results_map_to_codes() {
        assert_eq!(for_run(Outcome::Completed, Some(Verdict::Pass)), EXIT_OK);
        assert_eq!(for_run(Outcome::Completed, None), EXIT_OK);
        assert_eq!(for_run(Outcome::Completed, Some(Verdict::Fail)), EXIT_FAIL);
        assert_eq!(for_run(Outcome::Aborted, Some(Verdict::Pass)), EXIT_ABORTED);
        assert_eq!(for_verdicts([Some(Verdict::Pass), None]), EXIT_OK);
        assert_eq!(for_verdicts([Some(Verdict::Fail)]), EXIT_FAIL);
        assert_eq!(for_batch([EXIT_OK, EXIT_FAIL]), EXIT_OK);
        assert_eq!(for_batch([EXIT_FAIL, EXIT_ABORTED]), EXIT_ABORTED);
    }
}
