//! Running a prepared plan and deriving its files: the runner executes the plan on a bench
//! (through the `BenchControl` trait, so a fake bench fits as well as the real one), then the
//! record is judged against the design and `summary.json`, the plots and `report.html` are
//! written into it. Prints nothing: the caller shows progress (an `Observer`) and the result.

use super::{PipelineError, Prepared, RunRequest};
use crate::compare::Verdict;
use crate::control::BenchControl;
use crate::record::{Outcome, RecordWriter, Row, RunInfo, SCHEMA_VERSION};
use crate::report::{ReportError, ReportOptions, Written};
use crate::runner::{self, CancelToken, Observer, RunReport, RunSetup};

/// A run that went through the runner: how it went, and its derived files (or why they could
/// not be written; the record itself is safe on disk either way).
#[derive(Debug)]
pub struct Finished {
    pub report: RunReport,
    pub written: Result<Written, ReportError>,
    /// Whether the run was added to its records folder's index (a cache: the record is
    /// complete either way, and `regulus index --rebuild` makes the index again).
    pub indexed: Result<(), crate::index::IndexError>,
}

impl Finished {
    /// The overall outcome of the run ([`crate::compare::judge`] through the summary), or
    /// ERROR when the record could not be closed (run.json's final state not on disk) or the
    /// summary and report could not be written: a verdict that is not on disk is lost.
    pub fn verdict(&self) -> Option<Verdict> {
        if self.report.finish_error.is_some() {
            return Some(Verdict::Error);
        }
        match &self.written {
            Ok(w) => w.summary.verdict,
            Err(_) => Some(Verdict::Error),
        }
    }

    /// Why the outcome is what it is (the summary's reasons, or the write failure).
    pub fn reasons(&self) -> Vec<String> {
        let mut v = Vec::new();
        if let Some(e) = &self.report.finish_error {
            v.push(format!("run.json's final state was not written: {e}"));
        }
        match &self.written {
            Ok(w) => v.extend(w.summary.reasons.iter().cloned()),
            Err(e) => v.push(format!("the summary and report were not written: {e}")),
        }
        v
    }
}

/// Take the pre-flight reading (see [`super::preflight`]), run a prepared plan on an open
/// bench and write the derived files. When the runner refuses
/// to start (missing roles, the record cannot be created), the bench is put in its safe state
/// and the error is returned together with the safe-state failures.
pub async fn execute<B: BenchControl, O: Observer>(
    bench: &mut B,
    prep: &Prepared,
    req: &RunRequest,
    observer: &mut O,
    cancel: &CancelToken,
) -> Result<Finished, PipelineError> {
    match super::preflight(bench, prep, cancel).await {
        Ok(()) => {}
        Err(PipelineError::PreFlight {
            message,
            measured_v,
            row,
            ..
        }) => {
            return Err(record_preflight_stop(
                bench, prep, req, message, measured_v, row,
            ))
        }
        Err(e) => return Err(e),
    }
    let setup = RunSetup {
        records: &req.records,
        unit: req.unit.clone(),
        operator: req.operator.clone(),
        note: req.note.clone(),
        design: prep.design_ref.clone(),
        snapshots: prep.snapshots(),
    };
    let report = match runner::run(bench, &prep.plan, setup, observer, cancel).await {
        Ok(r) => r,
        Err(error) => {
            // Nothing was switched on, but the bench is open: leave it in its safe state.
            let safe_state = bench.safe_state().await;
            return Err(PipelineError::NotStarted { error, safe_state });
        }
    };
    let written = write_derived(&report, prep);
    let indexed = crate::index::run_finished(&report.dir);
    Ok(Finished {
        report,
        written,
        indexed,
    })
}

/// Keep a pre-flight stop as a record: run.json (outcome `aborted`, the stop's message as
/// the reason), the reading in readings.csv (kind `preflight`), summary.json, the plots and
/// report.html, all on disk before the stop is reported; the run is added to the index.
/// The bench is already in its safe state. A record that cannot be written is a station
/// failure ([`PipelineError::PreFlightNotRecorded`]).
fn record_preflight_stop<B: BenchControl>(
    bench: &B,
    prep: &Prepared,
    req: &RunRequest,
    message: String,
    measured_v: f64,
    row: Option<Box<Row>>,
) -> PipelineError {
    // The record starts when the pre-flight reading began (its row's time less its elapsed
    // time), so the row's elapsed_s counts from the record's start like every other row.
    let started = row
        .as_ref()
        .and_then(|r| {
            let at = chrono::DateTime::parse_from_rfc3339(&r.utc).ok()?;
            let since = chrono::Duration::milliseconds((r.elapsed_s * 1000.0).round() as i64);
            Some(at.with_timezone(&chrono::Utc) - since)
        })
        .unwrap_or_else(chrono::Utc::now);
    let info = RunInfo {
        schema_version: SCHEMA_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        unit: req.unit.clone(),
        plan_name: prep.plan.name.clone(),
        design: prep.design_ref.clone(),
        instruments: bench.identities(),
        operator: req.operator.clone(),
        note: req.note.clone(),
        started_utc: String::new(),
        ended_utc: None,
        outcome: Outcome::Running,
        reason: None,
        rows: 0,
    };
    // Err((what went wrong, whether the folder could not even be created)).
    let write = || -> Result<std::path::PathBuf, (String, bool)> {
        let mut w = RecordWriter::create(&req.records, started, info, &prep.snapshots())
            .map_err(|e| (format!("{e} (check --records)"), true))?;
        let dir = w.dir().to_path_buf();
        let failed = |e: String| (e, false);
        if let Some(r) = &row {
            w.append(r).map_err(|e| failed(e.to_string()))?;
        }
        w.finish(chrono::Utc::now(), Outcome::Aborted, Some(message.clone()))
            .map_err(|e| failed(e.to_string()))?;
        write_derived_in(&dir, prep).map_err(|e| failed(e.to_string()))?;
        // The index is a cache: the record is complete either way.
        let _ = crate::index::run_finished(&dir);
        Ok(dir)
    };
    match write() {
        Ok(dir) => PipelineError::PreFlight {
            message,
            measured_v,
            row: None,
            record: Some(dir),
        },
        Err((error, config)) => PipelineError::PreFlightNotRecorded {
            message,
            error,
            config,
        },
    }
}

/// Write summary.json, plots (SVG and PNG) and report.html for a finished run, with drift
/// flags against the unit's earlier records.
pub fn write_derived(report: &RunReport, prep: &Prepared) -> Result<Written, ReportError> {
    write_derived_in(&report.dir, prep)
}

/// [`write_derived`] for the record in `dir`.
fn write_derived_in(dir: &std::path::Path, prep: &Prepared) -> Result<Written, ReportError> {
    let analysis = crate::analysis::AnalysisOptions::default();
    let earlier = crate::report::earlier_entries(dir, &analysis);
    let opts = ReportOptions {
        analysis,
        earlier,
        png: true,
        plan_steps: Some(prep.plan.steps.iter().map(|s| s.kind).collect()),
        plan_limits: Some(crate::floor::metric_limits(
            prep.plan.steps.iter().map(|s| s.limits),
        )),
    };
    crate::report::write_report_for_design(dir, &prep.design, &prep.expectation, &opts)
}
