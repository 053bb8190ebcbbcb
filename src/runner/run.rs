//! One run from start to finish: check roles, create the record, execute every step, put the
//! bench in its safe state and close the record.

use super::exec::Exec;
use super::types::{Observer, RunError, RunReport, RunSetup, Stop};
use super::CancelToken;
use crate::control::BenchControl;
use crate::measure::Role;
use crate::plan::Plan;
use crate::record::{Outcome, RecordWriter, RunInfo, SCHEMA_VERSION};
use chrono::Utc;
use std::time::Instant;

/// Run `plan` on `bench`: check roles, create the record, execute every step, put the bench
/// in its safe state, and close the record. Errors before the record exists (missing roles,
/// record folder not writable) come back as `Err` with nothing switched on.
pub async fn run<B: BenchControl, O: Observer>(
    bench: &mut B,
    plan: &Plan,
    setup: RunSetup<'_>,
    observer: &mut O,
    cancel: &CancelToken,
) -> Result<RunReport, RunError> {
    plan.check_roles(|r| bench.has_role(r))
        .map_err(RunError::Roles)?;
    let started = Utc::now();
    let info = RunInfo {
        schema_version: SCHEMA_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        unit: setup.unit.clone(),
        plan_name: plan.name.clone(),
        design: setup.design.clone(),
        instruments: bench.identities(),
        operator: setup.operator.clone(),
        note: setup.note.clone(),
        started_utc: String::new(),
        ended_utc: None,
        outcome: Outcome::Running,
        reason: None,
        rows: 0,
    };
    let mut writer = RecordWriter::create(setup.records, started, info, &setup.snapshots)?;
    let dir = writer.dir().to_path_buf();

    let mut steps = Vec::new();
    // Before the first setting: the guardian that makes the bench safe if this process dies.
    let guarded = bench
        .guard(&dir)
        .map_err(|e| Stop::Instrument(format!("{e} (while starting the guardian)")));
    let stop = if let Err(stop) = guarded {
        observer.stopping(&stop.outcome_reason().1);
        Some(stop)
    } else {
        let mut ex = Exec {
            bench,
            plan,
            writer: &mut writer,
            observer,
            cancel,
            t0: Instant::now(),
            load_on: false,
            source_v: None,
            short_since: None,
            setting: None,
        };
        let r = ex.all(&mut steps).await;
        if let Err(stop) = &r {
            let (_, reason) = stop.outcome_reason();
            ex.observer.stopping(&reason);
        }
        r.err()
    };
    // Always end in the safe state, whatever happened above: the load input off first, then
    // the source output (even when a bench file's safe-state sequences forget them), then
    // every instrument's own safe-state sequence.
    let mut safe_state_errors = Vec::new();
    if bench.has_role(Role::Load) {
        if let Err(e) = bench.set_load_input(false).await {
            safe_state_errors.push(e);
        }
    }
    if bench.has_role(Role::InputSource) {
        if let Err(e) = bench.set_source_output(false).await {
            safe_state_errors.push(e);
        }
    }
    safe_state_errors.extend(bench.safe_state().await);

    let (mut outcome, mut reason) = match &stop {
        None => (Outcome::Completed, None),
        Some(s) => {
            let (o, r) = s.outcome_reason();
            (o, Some(r))
        }
    };
    if !safe_state_errors.is_empty() {
        let list: Vec<String> = safe_state_errors.iter().map(|e| e.to_string()).collect();
        let text = format!(
            "safe state incomplete, check the bench by hand: {}",
            list.join("; ")
        );
        reason = Some(match reason {
            Some(r) => format!("{r}; {text}"),
            None => text,
        });
        outcome = Outcome::Error;
    }
    let rows = writer.rows();
    let (info, finish_error) = match writer.finish(Utc::now(), outcome, reason.clone()) {
        Ok(i) => (Some(i), None),
        Err(e) => (None, Some(e)),
    };
    // Safe, and the record says how the run ended: the guardian is no longer needed.
    bench.stand_down();
    Ok(RunReport {
        outcome,
        stop: stop.as_ref().map(|s| s.kind()),
        reason,
        dir,
        rows,
        steps,
        safe_state_errors,
        info,
        finish_error,
    })
}
