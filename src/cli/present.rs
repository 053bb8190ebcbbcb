//! What the commands that run a plan show a person: the async runtime with Ctrl-C wired to a
//! cancellation token, a progress bar per step (hidden when stderr is not a terminal), the run
//! summary and the verdict table. Output functions take a generic writer so they can be
//! checked byte for byte. Holds no domain logic.

use crate::control::BenchControl;
use crate::measure::Quantity;
use crate::pipeline::{self, PipelineError, Prepared, RunRequest};
use crate::plan::Step;
use crate::quantity::eng;
use crate::record::{Outcome, Row};
use crate::runner::{CancelToken, Observer, RunReport, StepResult};
use anyhow::Context;
use indicatif::{ProgressBar, ProgressStyle};
use std::io::Write;

/// Wire Ctrl-C to a cancellation token (from then on it only asks the runner to stop, and
/// the runner reaches the safe state) and start the async runtime the bench runs on.
pub fn interruptible_runtime() -> anyhow::Result<(CancelToken, tokio::runtime::Runtime)> {
    let cancel = CancelToken::new();
    let c = cancel.clone();
    ctrlc::set_handler(move || {
        eprintln!("\ninterrupt: stopping, switching the load input and the source off...");
        c.cancel();
    })
    .context("cannot install the Ctrl-C handler")?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    Ok((cancel, rt))
}

/// Run a prepared plan on an open bench through the pipeline with a progress bar per step,
/// then print the summary and the verdict (or a warning when the derived files could not be
/// written: the record itself is complete). Returns the exit code. `run` and `demo` both
/// show a run this way.
pub async fn run_and_show<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    req: &RunRequest,
    cancel: &CancelToken,
) -> anyhow::Result<u8> {
    let mut progress = Progress::new(prep.plan.steps.len());
    let finished = match pipeline::execute(bench, prep, req, &mut progress, cancel).await {
        Ok(f) => f,
        Err(e) => {
            if let PipelineError::NotStarted { safe_state, .. } = &e {
                for f in safe_state {
                    eprintln!("warning: safe state: {f}");
                }
            }
            return Err(e.into());
        }
    };
    let report = &finished.report;
    let stdout = std::io::stdout();
    write_summary(&mut stdout.lock(), report).context("writing the summary")?;
    match &finished.written {
        Ok(written) => print_outcome(&mut stdout.lock(), written).context("writing the verdict")?,
        Err(e) => eprintln!(
            "warning: the report of {} was not written: {}; the record is complete, \
             retry with `regulus report {}`",
            report.dir.display(),
            chain_text(e),
            report.dir.display()
        ),
    }
    Ok(super::for_run(report.outcome, finished.verdict()))
}

/// Human summary of a run.
pub fn write_summary(out: &mut impl Write, r: &RunReport) -> std::io::Result<()> {
    let outcome = match r.outcome {
        Outcome::Completed => "completed",
        Outcome::Aborted => "ABORTED",
        Outcome::Failed => "FAILED",
        Outcome::Running => "running",
    };
    writeln!(out, "run {outcome}: {} rows in {}", r.rows, r.dir.display())?;
    if let Some(reason) = &r.reason {
        writeln!(out, "  reason: {reason}")?;
    }
    for (k, s) in r.steps.iter().enumerate() {
        if let Some(kn) = &s.knee {
            match kn.limit_current_a {
                Some(i) => writeln!(
                    out,
                    "  step {}: knee search {}: {} where the output fell to {} ({} points)",
                    k + 1,
                    kn.outcome,
                    eng(i, "A"),
                    eng(kn.threshold_v, "V"),
                    kn.points,
                )?,
                None => writeln!(out, "  step {}: knee {}", k + 1, kn.outcome)?,
            }
        }
        if let Some(rc) = &s.recovery {
            writeln!(
                out,
                "  step {}: output {} before the short, {} after release: {}",
                k + 1,
                eng(rc.before_v, "V"),
                eng(rc.after_v, "V"),
                if rc.recovered {
                    "recovered"
                } else {
                    "DID NOT RECOVER"
                }
            )?;
        }
    }
    if let Some(e) = &r.finish_error {
        writeln!(out, "  warning: run.json could not be finalised: {e}")?;
    }
    Ok(())
}

/// Progress bar per step with a live status line (hidden when stderr is not a terminal).
pub struct Progress {
    steps: usize,
    bar: Option<ProgressBar>,
}

impl Progress {
    pub fn new(steps: usize) -> Progress {
        Progress { steps, bar: None }
    }
}

impl Observer for Progress {
    fn step_started(&mut self, index: usize, step: &Step) {
        let bar = ProgressBar::new(step.planned_points() as u64);
        let style = ProgressStyle::with_template("{prefix:>24} [{bar:30}] {pos:>4}/{len:4} {msg}")
            .map(|s| s.progress_chars("=> "))
            .unwrap_or_else(|_| ProgressStyle::default_bar());
        bar.set_style(style);
        bar.set_prefix(format!("{}/{} {}", index + 1, self.steps, step.label));
        self.bar = Some(bar);
    }

    fn point_taken(&mut self, _index: usize, row: &Row) {
        if let Some(bar) = &self.bar {
            let v = row.value(Quantity::OutputVoltage);
            let i = row.value(Quantity::OutputCurrent);
            let mut msg = String::new();
            if let Some(v) = v {
                msg.push_str(&eng(v, "V"));
            }
            if let Some(i) = i {
                msg.push_str(&format!("  {}", eng(i, "A")));
            }
            if let (Some(v), Some(i)) = (v, i) {
                msg.push_str(&format!("  {}", eng(v * i, "W")));
            }
            if let Some(t) = row.value(Quantity::Temperature) {
                msg.push_str(&format!("  {}", eng(t, "degC")));
            }
            if !row.flags.is_empty() {
                msg.push_str(&format!("  [{}]", row.flags.join(" ")));
            }
            bar.set_message(msg);
            bar.inc(1);
        }
    }

    fn step_finished(&mut self, _index: usize, _step: &Step, result: &StepResult) {
        if let Some(bar) = self.bar.take() {
            let mut msg = format!("{} points", result.rows);
            if let Some(k) = result.knee.and_then(|k| k.limit_current_a) {
                msg.push_str(&format!(", limit {}", eng(k, "A")));
            }
            if let Some(r) = result.recovery {
                msg.push_str(if r.recovered {
                    ", recovered"
                } else {
                    ", did not recover"
                });
            }
            bar.set_length(result.rows as u64);
            bar.finish_with_message(msg);
        }
    }

    fn stopping(&mut self, reason: &str) {
        if let Some(bar) = self.bar.take() {
            bar.abandon_with_message(format!("stopped: {reason}"));
        }
    }
}

/// Print the comparison, likely causes, drift flags, verdict and written files.
pub fn print_outcome<W: std::io::Write>(
    mut w: W,
    written: &crate::report::Written,
) -> std::io::Result<()> {
    let s = &written.summary;
    if let Some(c) = &s.comparison {
        for ch in &c.checks {
            writeln!(
                w,
                "{:<22} {:>10}  nominal {:>10}  worst case {} .. {}  {}",
                ch.metric,
                crate::quantity::eng(ch.measured, &ch.unit),
                crate::quantity::eng(ch.nominal, &ch.unit),
                crate::quantity::eng(ch.worst_case.min, &ch.unit),
                crate::quantity::eng(ch.worst_case.max, &ch.unit),
                ch.verdict.as_str().to_uppercase()
            )?;
        }
        for cause in &c.likely_causes {
            writeln!(w, "likely cause: {cause}")?;
        }
    }
    for f in &s.drift {
        writeln!(w, "DRIFT: {}", f.message)?;
    }
    match s.verdict {
        Some(v) => writeln!(w, "verdict: {}", v.as_str().to_uppercase())?,
        None => writeln!(w, "no design given: metrics only")?,
    }
    for f in &written.files {
        writeln!(w, "wrote {}", f.display())?;
    }
    Ok(())
}

/// An error and its sources on one line, `outer: inner: innermost` (as anyhow's `{:#}`).
pub fn chain_text(e: &dyn std::error::Error) -> String {
    let mut text = e.to_string();
    let mut source = e.source();
    while let Some(s) = source {
        text.push_str(": ");
        text.push_str(&s.to_string());
        source = s.source();
    }
    text
}
