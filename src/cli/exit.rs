//! Exit codes, decided in one place: [`exit_code_for`] maps any error to the process exit
//! code by its kind (never by its text), and [`for_verdict`] / [`for_verdicts`] map an
//! overall outcome (decided by `compare::judge`, the one rule) to its code:
//! 0 PASS (or the command succeeded), 1 FAIL, 2 usage or configuration error,
//! 3 INCOMPLETE (stopped by an interlock, Ctrl-C or a signal, killed, or a promised metric
//! missing), 4 ERROR (the station: an instrument, a link, a full disk), 5 MARGINAL.

use crate::compare::Verdict;
#[cfg(test)]
use crate::record::RecordError;
use crate::report::ReportError;

/// Exit code: PASS, or the command succeeded.
pub const EXIT_OK: u8 = 0;
/// Exit code: FAIL (a judged metric outside its worst case).
pub const EXIT_FAIL: u8 = 1;
/// Exit code: usage or configuration error.
pub const EXIT_USAGE: u8 = 2;
/// Exit code: INCOMPLETE (did not finish, or a promised metric is missing).
pub const EXIT_INCOMPLETE: u8 = 3;
/// Exit code: ERROR (the station failed: instrument, link, disk).
pub const EXIT_ERROR: u8 = 4;
/// Exit code: MARGINAL (inside the worst case, outside the Monte Carlo band).
pub const EXIT_MARGINAL: u8 = 5;
/// Older name of [`EXIT_INCOMPLETE`] (a run that stopped before the end).
pub const EXIT_ABORTED: u8 = EXIT_INCOMPLETE;

/// Every exit code with its meaning, as `--help` and the README list them.
pub const EXIT_CODES: [(u8, &str); 6] = [
    (EXIT_OK, "PASS (or the command succeeded)"),
    (
        EXIT_FAIL,
        "FAIL: a judged metric is outside the design's worst case",
    ),
    (
        EXIT_USAGE,
        "usage or configuration error (file:line:column)",
    ),
    (
        EXIT_INCOMPLETE,
        "INCOMPLETE: stopped (interlock, Ctrl-C, signal), killed, or a metric the plan \
         promises was not measured",
    ),
    (
        EXIT_ERROR,
        "ERROR: the station failed (instrument, link, writing the record or its report)",
    ),
    (
        EXIT_MARGINAL,
        "MARGINAL: inside the worst case, outside the Monte Carlo band",
    ),
];

/// The exit-code table as text for `--help`.
pub fn exit_codes_help() -> String {
    let mut s = String::from("Exit codes:\n");
    for (code, what) in EXIT_CODES {
        s.push_str(&format!("  {code}  {what}\n"));
    }
    s
}

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
/// anything else (instruments, links, writing files) is a station error, 4.
pub fn exit_code_for(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if let Some(c) = cause.downcast_ref::<CodedError>() {
            return c.code;
        }
        if let Some(e) = cause.downcast_ref::<crate::pipeline::PipelineError>() {
            if e.is_stopped_before_stress() {
                return EXIT_INCOMPLETE;
            }
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
    EXIT_ERROR
}

fn config_or_abort(config: bool) -> u8 {
    if config {
        EXIT_USAGE
    } else {
        EXIT_ERROR
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

/// Exit code of one overall outcome; `None` (metrics only, no design) is 0.
pub fn for_verdict(verdict: Option<Verdict>) -> u8 {
    match verdict {
        None | Some(Verdict::Pass) => EXIT_OK,
        Some(Verdict::Fail) => EXIT_FAIL,
        Some(Verdict::Incomplete) => EXIT_INCOMPLETE,
        Some(Verdict::Error) => EXIT_ERROR,
        Some(Verdict::Marginal) => EXIT_MARGINAL,
    }
}

/// Exit code of several outcomes (records judged together): the worst by severity
/// (ERROR, FAIL, INCOMPLETE, MARGINAL, PASS).
pub fn for_verdicts(verdicts: impl IntoIterator<Item = Option<Verdict>>) -> u8 {
    for_verdict(verdicts.into_iter().flatten().max())
}

/// Exit code of a batch of runs (the demo): a unit's FAIL or MARGINAL is a result, not a
/// failure of the batch, so only usage, INCOMPLETE and ERROR codes come through (the
/// highest of them).
pub fn for_batch(codes: impl IntoIterator<Item = u8>) -> u8 {
    codes
        .into_iter()
        .filter(|c| matches!(*c, EXIT_USAGE | EXIT_INCOMPLETE | EXIT_ERROR))
        .max()
        .unwrap_or(EXIT_OK)
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
        assert_eq!(exit_code_for(&anyhow::Error::from(io)), EXIT_ERROR);
        let full = ReportError::Write {
            path: "r/summary.json".into(),
            source: std::io::Error::from_raw_os_error(28),
        };
        assert_eq!(exit_code_for(&full.into()), EXIT_ERROR);
        let rec = ReportError::Record(RecordError::Invalid {
            path: "r".into(),
            message: "m".into(),
        });
        assert_eq!(exit_code_for(&rec.into()), EXIT_USAGE);
    }

    #[test]
    fn results_map_to_codes() {
        // The contract of docs/ARCHITECTURE.md "Exit codes".
        assert_eq!(for_verdict(Some(Verdict::Pass)), 0);
        assert_eq!(for_verdict(None), 0);
        assert_eq!(for_verdict(Some(Verdict::Fail)), 1);
        assert_eq!(for_verdict(Some(Verdict::Incomplete)), 3);
        assert_eq!(for_verdict(Some(Verdict::Error)), 4);
        assert_eq!(for_verdict(Some(Verdict::Marginal)), 5);
        assert_eq!(for_verdicts([Some(Verdict::Pass), None]), EXIT_OK);
        assert_eq!(for_verdicts([Some(Verdict::Fail)]), EXIT_FAIL);
        assert_eq!(
            for_verdicts([Some(Verdict::Marginal), Some(Verdict::Incomplete)]),
            EXIT_INCOMPLETE
        );
        assert_eq!(
            for_verdicts([Some(Verdict::Fail), Some(Verdict::Error)]),
            EXIT_ERROR
        );
        assert_eq!(for_batch([EXIT_OK, EXIT_FAIL, EXIT_MARGINAL]), EXIT_OK);
        assert_eq!(for_batch([EXIT_FAIL, EXIT_INCOMPLETE]), EXIT_INCOMPLETE);
        assert_eq!(for_batch([EXIT_ERROR, EXIT_INCOMPLETE]), EXIT_ERROR);
        let help = exit_codes_help();
        for code in 0..=5 {
            assert!(help.contains(&format!("  {code}  ")), "{help}");
        }
    }
}
