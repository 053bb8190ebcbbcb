//! What the commands that run a plan show a person: the async runtime with Ctrl-C wired to a
//! cancellation token, a progress bar per step (hidden when stderr is not a terminal), the run
//! summary and the verdict table. Output functions take a generic writer so they can be
//! checked byte for byte. Holds no domain logic.

use crate::compare::Verdict;
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

/// How a run's result is printed on stdout.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResultFormat {
    /// Lines for people: the run, the checks, the verdict and its reasons, the files.
    Text,
    /// One JSON object ([`RunResult`]) and nothing else.
    Json,
}

/// A writer that never fails: after the first error (a closed pipe: `regulus run | head`)
/// it drops everything, so printing can neither change the exit code nor skip work that
/// follows it. The error is kept for a note on stderr.
pub struct Console<W: Write> {
    inner: W,
    failed: Option<std::io::Error>,
}

impl<W: Write> Console<W> {
    pub fn new(inner: W) -> Console<W> {
        Console {
            inner,
            failed: None,
        }
    }
    /// The first write error, if any.
    pub fn failure(&self) -> Option<&std::io::Error> {
        self.failed.as_ref()
    }
}

impl<W: Write> Write for Console<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        if self.failed.is_none() {
            if let Err(e) = self.inner.write_all(buf) {
                self.failed = Some(e);
            }
        }
        Ok(buf.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        if self.failed.is_none() {
            if let Err(e) = self.inner.flush() {
                self.failed = Some(e);
            }
        }
        Ok(())
    }
}

/// What `run --json` prints: one object with the overall outcome, its exit code and
/// reasons, the record and its files, and the summary.
#[derive(Debug, serde::Serialize)]
pub struct RunResult<'a> {
    /// `pass`, `marginal`, `fail`, `incomplete` or `error`.
    pub outcome: Option<Verdict>,
    pub exit_code: u8,
    pub reasons: Vec<String>,
    pub unit: &'a str,
    pub record: String,
    /// run.json's outcome and reason.
    pub run_outcome: Outcome,
    pub run_reason: Option<&'a str>,
    pub rows: u64,
    /// True when run.json's final state is on disk (written, synced, folder synced).
    pub record_closed: bool,
    pub files: Vec<String>,
    pub summary: Option<&'a crate::report::Summary>,
}

/// The likely causes the record of a pre-flight stop gives (its summary's diagnosis of the
/// unloaded output), best first; none for any other error or when the summary is unreadable.
pub fn preflight_causes(e: &PipelineError) -> Vec<String> {
    let PipelineError::PreFlight {
        record: Some(dir), ..
    } = e
    else {
        return Vec::new();
    };
    std::fs::read(dir.join("summary.json"))
        .ok()
        .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
        .map(|s| likely_causes_in(&s))
        .unwrap_or_default()
}

/// The likely causes a parsed summary.json gives, best first (none when it has none).
pub fn likely_causes_in(summary: &serde_json::Value) -> Vec<String> {
    summary["comparison"]["likely_causes"]
        .as_array()
        .map(|a| {
            a.iter()
                .filter_map(|c| c.as_str().map(String::from))
                .collect()
        })
        .unwrap_or_default()
}

/// Run a prepared plan on an open bench through the pipeline with a progress bar per step.
/// The record is closed (run.json's final state synced) and the summary and report written
/// before anything about the result is printed; printing cannot change the exit code (a
/// closed stdout is noted on stderr). Returns the exit code of the overall outcome: ERROR
/// when the record could not be closed or the report not written. `run` and `demo` both
/// show a run this way.
pub async fn run_and_show<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    req: &RunRequest,
    cancel: &CancelToken,
    format: ResultFormat,
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
            let mut out = Console::new(std::io::stdout().lock());
            for cause in preflight_causes(&e) {
                let _ = writeln!(
                    out,
                    "if the unit is built to this design, likely cause: {cause}"
                );
            }
            return Err(e.into());
        }
    };
    let verdict = finished.verdict();
    let code = super::for_verdict(verdict);
    let report = &finished.report;
    if let Err(e) = &finished.written {
        eprintln!(
            "error: the summary and report of {} were not written: {}; the readings are on \
             disk, retry with `regulus report {}` once the cause is fixed",
            report.dir.display(),
            chain_text(e),
            report.dir.display()
        );
    }
    let mut out = Console::new(std::io::stdout().lock());
    match format {
        ResultFormat::Text => {
            let _ = write_summary(&mut out, report);
            if let Ok(written) = &finished.written {
                let _ = print_checks(&mut out, &written.summary);
            }
            let _ = print_verdict(&mut out, verdict, &finished.reasons());
            if let Ok(written) = &finished.written {
                let _ = print_files(&mut out, written);
            }
        }
        ResultFormat::Json => {
            let written = finished.written.as_ref().ok();
            let result = RunResult {
                outcome: verdict,
                exit_code: code,
                reasons: finished.reasons(),
                unit: &req.unit,
                record: report.dir.display().to_string(),
                run_outcome: report.outcome,
                run_reason: report.reason.as_deref(),
                rows: report.rows,
                record_closed: report.finish_error.is_none(),
                files: written
                    .map(|w| w.files.iter().map(|f| f.display().to_string()).collect())
                    .unwrap_or_default(),
                summary: written.map(|w| &w.summary),
            };
            let _ = serde_json::to_writer_pretty(&mut out, &result);
            let _ = writeln!(out);
        }
    }
    let _ = out.flush();
    if let Some(e) = out.failure() {
        if e.kind() != std::io::ErrorKind::BrokenPipe {
            eprintln!("warning: the result could not be printed: {e}");
        }
    }
    Ok(code)
}

/// Human summary of a run. The record is called complete only when run.json's final state
/// is on disk.
pub fn write_summary(out: &mut impl Write, r: &RunReport) -> std::io::Result<()> {
    let outcome = match r.outcome {
        Outcome::Completed => "completed",
        Outcome::Aborted => "STOPPED",
        Outcome::Error | Outcome::Failed => "STATION ERROR",
        Outcome::Running => "running",
    };
    match &r.finish_error {
        None => writeln!(
            out,
            "run {outcome}: {} rows in {} (record closed)",
            r.rows,
            r.dir.display()
        )?,
        Some(e) => writeln!(
            out,
            "run {outcome}: {} rows in {}, but the record is NOT closed: run.json's final \
             state could not be written: {e}",
            r.rows,
            r.dir.display()
        )?,
    }
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

/// Where a check's band was taken and the operating envelope beside it, in one line.
fn band_line(ch: &crate::compare::Check) -> Option<String> {
    let env = ch.envelope.map(|e| {
        format!(
            "operating envelope {} .. {}",
            crate::quantity::eng(e.min, &ch.unit),
            crate::quantity::eng(e.max, &ch.unit)
        )
    });
    match (&ch.band_basis, env) {
        (Some(b), Some(e)) => Some(format!("band: {b}; {e}")),
        (Some(b), None) => Some(format!("band: {b}")),
        (None, Some(e)) => Some(e),
        (None, None) => None,
    }
}

/// Print the comparison, likely causes, drift flags, verdict and its reasons, and the
/// written files.
pub fn print_outcome<W: std::io::Write>(
    mut w: W,
    written: &crate::report::Written,
) -> std::io::Result<()> {
    print_checks(&mut w, &written.summary)?;
    print_verdict(&mut w, written.summary.verdict, &written.summary.reasons)?;
    print_files(&mut w, written)
}

/// The checks against the design (with the knee method the limit check uses), likely
/// causes and drift flags.
pub fn print_checks<W: std::io::Write>(
    mut w: W,
    s: &crate::report::Summary,
) -> std::io::Result<()> {
    if let Some(c) = &s.comparison {
        for ch in &c.checks {
            writeln!(
                w,
                "{:<22} {:>10}  nominal {:>10}  {} {} .. {}  {}",
                ch.metric,
                crate::quantity::eng(ch.measured, &ch.unit),
                crate::quantity::eng(ch.nominal, &ch.unit),
                // As-built bands (part tolerances only) say so; an expectation without them
                // judges against the operating envelope's worst case.
                if ch.band_basis.is_some() {
                    "as built"
                } else {
                    "worst case"
                },
                crate::quantity::eng(ch.worst_case.min, &ch.unit),
                crate::quantity::eng(ch.worst_case.max, &ch.unit),
                ch.verdict.label()
            )?;
            if let Some(note) = &ch.note {
                writeln!(w, "  {}: {note}", ch.metric)?;
            }
            if let Some(line) = band_line(ch) {
                writeln!(w, "  {line}")?;
            }
        }
        if c.checks.iter().any(|ch| ch.metric == "limit_current") {
            if let Some(line) = knee_method_line(&s.metrics) {
                writeln!(w, "  {line}")?;
            }
        }
        for cause in &c.likely_causes {
            writeln!(w, "likely cause: {cause}")?;
        }
    }
    for f in &s.drift {
        writeln!(w, "DRIFT: {}", f.message)?;
    }
    // What the analysis could not do as asked, and where it took a metric instead (load
    // regulation below the rated load, a fit cut at the knee onset).
    for n in &s.metrics.notes {
        writeln!(w, "note: {n}")?;
    }
    Ok(())
}

/// Which knee the limit check judged: the two-segment fit when it exists, else the fixed
/// drop (as `Metrics::limit_current` chooses), with the other for comparison.
pub fn knee_method_line(m: &crate::analysis::Metrics) -> Option<String> {
    let k = m.knee.as_ref()?;
    let drop = format!("{:.0} % drop", k.drop_fraction * 100.0);
    match (k.two_segment, k.fixed_drop) {
        (Some(t), Some(f)) => Some(format!(
            "limit_current judged at the two-segment fit's knee {} (regulation line meets the \
             limit line); the fixed {drop} knee is {}",
            eng(t.current, "A"),
            eng(f.current, "A")
        )),
        (Some(t), None) => Some(format!(
            "limit_current judged at the two-segment fit's knee {}",
            eng(t.current, "A")
        )),
        (None, Some(f)) => Some(format!(
            "limit_current judged at the fixed {drop} knee {} (no two-segment fit)",
            eng(f.current, "A")
        )),
        (None, None) => None,
    }
}

/// The overall verdict and, unless it is a plain pass, why.
pub fn print_verdict<W: std::io::Write>(
    mut w: W,
    verdict: Option<Verdict>,
    reasons: &[String],
) -> std::io::Result<()> {
    match verdict {
        Some(v) => writeln!(w, "verdict: {}", v.label())?,
        None => writeln!(w, "no design given: metrics only")?,
    }
    for r in reasons {
        writeln!(w, "  because: {r}")?;
    }
    Ok(())
}

/// The files a report wrote.
pub fn print_files<W: std::io::Write>(
    mut w: W,
    written: &crate::report::Written,
) -> std::io::Result<()> {
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pipeline::Finished;
    use crate::record::{FileAction, RecordError};
    use std::path::PathBuf;

    fn report(finish_error: Option<RecordError>) -> RunReport {
        RunReport {
            outcome: Outcome::Completed,
            reason: None,
            dir: PathBuf::from("records/U1/20260101T000000Z_p"),
            rows: 12,
            steps: vec![],
            safe_state_errors: vec![],
            info: None,
            finish_error,
            stop: None,
        }
    }

    fn no_space() -> std::io::Error {
        // ENOSPC (POSIX): what a full disk answers to a write.
        std::io::Error::from_raw_os_error(28)
    }

    #[test]
    fn a_record_whose_final_state_is_not_on_disk_is_not_called_closed_and_is_an_error() {
        let e = RecordError::Io {
            action: FileAction::Sync,
            path: "records/U1/x/run.json".into(),
            source: no_space(),
        };
        let f = Finished {
            report: report(Some(e)),
            written: Err(crate::report::ReportError::Write {
                path: "s".into(),
                source: no_space(),
            }),
            indexed: Ok(()),
        };
        assert_eq!(f.verdict(), Some(Verdict::Error));
        assert_eq!(super::super::for_verdict(f.verdict()), 4);
        assert!(f.reasons()[0].contains("run.json's final state was not written"));
        let mut out = Vec::new();
        write_summary(&mut out, &f.report).unwrap();
        let text = String::from_utf8(out).unwrap();
        assert!(text.contains("NOT closed"), "{text}");
        assert!(!text.contains("(record closed)"), "{text}");

        let mut out = Vec::new();
        write_summary(&mut out, &report(None)).unwrap();
        assert!(String::from_utf8(out).unwrap().contains("(record closed)"));
    }

    #[test]
    fn unwritten_derived_files_make_the_run_an_error() {
        let f = Finished {
            report: report(None),
            written: Err(crate::report::ReportError::Write {
                path: "records/U1/x/summary.json".into(),
                source: no_space(),
            }),
            indexed: Ok(()),
        };
        assert_eq!(f.verdict(), Some(Verdict::Error));
        assert!(
            f.reasons()[0].contains("were not written"),
            "{:?}",
            f.reasons()
        );
    }

    struct Closed;
    impl Write for Closed {
        fn write(&mut self, _: &[u8]) -> std::io::Result<usize> {
            Err(std::io::ErrorKind::BrokenPipe.into())
        }
        fn flush(&mut self) -> std::io::Result<()> {
            Err(std::io::ErrorKind::BrokenPipe.into())
        }
    }

    #[test]
    fn the_console_swallows_a_closed_pipe_and_remembers_it() {
        let mut c = Console::new(Closed);
        assert!(writeln!(c, "verdict: PASS").is_ok());
        assert!(c.flush().is_ok());
        assert_eq!(
            c.failure().map(|e| e.kind()),
            Some(std::io::ErrorKind::BrokenPipe)
        );
    }
}
