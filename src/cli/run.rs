//! `regulus run`: validate the design, plan and options, ask for confirmation before a
//! short-circuit test, open the bench, run the plan with a progress bar per step, and map the
//! outcome to an exit code. Holds no domain logic: the runner and the record writer do the work.

use super::{CodedError, EXIT_ABORTED, EXIT_OK, EXIT_USAGE};
use crate::bench::{Bench, BenchConfig};
use crate::control::BenchControl;
use crate::design::{self, Design};
use crate::measure::Quantity;
use crate::plan::{DesignTargets, Plan, Step};
use crate::quantity::eng;
use crate::record::{check_component, DesignRef, Outcome, Row, Snapshots};
use crate::runner::{self, CancelToken, Observer, RunReport, RunSetup, StepResult};
use anyhow::Context;
use indicatif::{ProgressBar, ProgressStyle};
use sha2::{Digest, Sha256};
use std::io::{BufRead, IsTerminal, Write};
use std::path::PathBuf;

/// Options of `regulus run`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Bench file (instruments by role).
    #[arg(long, value_name = "FILE")]
    pub bench: PathBuf,
    /// Design file the unit was built to.
    #[arg(long, value_name = "FILE")]
    pub design: PathBuf,
    /// Test plan file.
    #[arg(long, value_name = "FILE")]
    pub plan: PathBuf,
    /// Unit identifier (serial); names the unit's record folder.
    #[arg(long, value_name = "ID")]
    pub unit: String,
    /// Records root folder.
    #[arg(long, value_name = "DIR", default_value = "records")]
    pub records: PathBuf,
    /// Who runs the test (stored in the record).
    #[arg(long, value_name = "NAME")]
    pub operator: Option<String>,
    /// Free-text note stored in the record.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Skip the confirmation before a short-circuit test (for test stations).
    #[arg(long)]
    pub yes: bool,
}

/// Everything validated before any port opens.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub plan: Plan,
    pub design: Design,
    pub expectation: design::Expectation,
    pub targets: DesignTargets,
    pub design_ref: DesignRef,
    pub design_bytes: Vec<u8>,
    pub bench_bytes: Vec<u8>,
    pub plan_bytes: Vec<u8>,
}

fn usage(message: impl Into<String>) -> anyhow::Error {
    CodedError::new(EXIT_USAGE, message).into()
}

/// Read and check the design, the plan and the options. Every failure is a usage or
/// configuration error (exit 2) naming the file, line and column where there is one.
pub fn prepare(args: &Args) -> anyhow::Result<Prepared> {
    check_component("unit id", &args.unit).map_err(usage)?;
    let read = |p: &PathBuf, what: &str| {
        std::fs::read(p).map_err(|e| usage(format!("cannot read {what} {}: {e}", p.display())))
    };
    let design_bytes = read(&args.design, "design file")?;
    let bench_bytes = read(&args.bench, "bench file")?;
    let plan_bytes = read(&args.plan, "plan file")?;
    let d = Design::load(&args.design)?;
    let e = design::expect(&d);
    let targets = DesignTargets::from_design(&d, &e);
    let plan_text = String::from_utf8(plan_bytes.clone()).map_err(|_| {
        usage(format!(
            "{}: the plan file is not UTF-8 text",
            args.plan.display()
        ))
    })?;
    let plan = Plan::parse(&plan_text, &args.plan.display().to_string(), &targets)
        .map_err(|e| usage(e.to_string()))?;
    let design_ref = DesignRef {
        path: args.design.display().to_string(),
        sha256: format!("{:x}", Sha256::digest(&design_bytes)),
        name: d.design.name.clone(),
    };
    Ok(Prepared {
        plan,
        design: d,
        expectation: e,
        targets,
        design_ref,
        design_bytes,
        bench_bytes,
        plan_bytes,
    })
}

/// Print the short-circuit cautions and ask. `yes` skips the question; without a terminal on
/// stdin and without `yes`, refuse (exit 2). A declined answer aborts (exit 3).
pub fn confirm_short_circuit(
    plan: &Plan,
    vin: Option<f64>,
    yes: bool,
    stdin_is_terminal: bool,
    input: &mut impl BufRead,
    out: &mut impl Write,
) -> anyhow::Result<()> {
    if !plan.has_short_circuit() {
        return Ok(());
    }
    for line in runner::short_circuit_cautions(plan, vin) {
        writeln!(out, "{line}")?;
    }
    if yes {
        writeln!(out, "Confirmed by --yes.")?;
        return Ok(());
    }
    if !stdin_is_terminal {
        return Err(usage(
            "this plan shorts the unit's output and stdin is not a terminal: \
             confirm with --yes after reading the cautions",
        ));
    }
    write!(out, "Type 'yes' to start: ")?;
    out.flush()?;
    let mut answer = String::new();
    input.read_line(&mut answer)?;
    if answer.trim().eq_ignore_ascii_case("yes") {
        Ok(())
    } else {
        Err(CodedError::new(EXIT_ABORTED, "not confirmed: nothing was switched on").into())
    }
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let prep = prepare(&args)?;
    let cfg = BenchConfig::load(&args.bench).map_err(|e| usage(e.to_string()))?;
    prep.plan
        .check_roles(|r| cfg.instruments.iter().any(|i| i.roles.contains(&r)))
        .map_err(|m| usage(format!("{m} (bench file {})", args.bench.display())))?;
    let stdin = std::io::stdin();
    confirm_short_circuit(
        &prep.plan,
        prep.targets.input_voltage_v,
        args.yes,
        stdin.is_terminal(),
        &mut stdin.lock(),
        &mut std::io::stderr(),
    )?;
    let (cancel, rt) = interruptible_runtime()?;
    rt.block_on(async {
        let mut bench = Bench::open(&cfg).await.map_err(|e| {
            let code = if e.is_config() {
                EXIT_USAGE
            } else {
                EXIT_ABORTED
            };
            anyhow::Error::from(CodedError::new(code, e.to_string()))
        })?;
        execute(&mut bench, &prep, &args, &cancel).await
    })
}

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

/// Run a prepared plan on an open bench with a progress bar per step (`cancel` is wired to
/// Ctrl-C by the caller); prints the summary to stdout and returns the exit code.
pub async fn execute<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    args: &Args,
    cancel: &CancelToken,
) -> anyhow::Result<u8> {
    let setup = RunSetup {
        records: &args.records,
        unit: args.unit.clone(),
        operator: args.operator.clone(),
        note: args.note.clone(),
        design: prep.design_ref.clone(),
        snapshots: Snapshots {
            design: &prep.design_bytes,
            bench: &prep.bench_bytes,
            plan: &prep.plan_bytes,
        },
    };
    let mut progress = Progress::new(prep.plan.steps.len());
    let report = match runner::run(bench, &prep.plan, setup, &mut progress, cancel).await {
        Ok(r) => r,
        Err(e) => {
            // Nothing was switched on, but the bench is open: leave it in its safe state.
            for f in bench.safe_state().await {
                eprintln!("warning: safe state: {f}");
            }
            return Err(match e {
                runner::RunError::Roles(m) => usage(m),
                runner::RunError::Record(e) => usage(format!("{e} (check --records)")),
            });
        }
    };
    let stdout = std::io::stdout();
    write_summary(&mut stdout.lock(), &report).context("writing the summary")?;
    // Judge the record against the design and write summary.json, plots and report.html.
    // The record is already safe on disk: a report that cannot be written is a warning.
    let verdict = match write_run_report(&report, prep) {
        Ok(written) => {
            super::report::print_outcome(&mut stdout.lock(), &written)
                .context("writing the verdict")?;
            written.summary.verdict
        }
        Err(e) => {
            eprintln!(
                "warning: the report of {} was not written: {e:#}; the record is complete, \
                 retry with `regulus report {}`",
                report.dir.display(),
                report.dir.display()
            );
            None
        }
    };
    Ok(exit_code(&report, verdict))
}

/// Write summary.json, plots (SVG and PNG) and report.html for a finished run, with drift
/// flags against the unit's earlier records.
fn write_run_report(report: &RunReport, prep: &Prepared) -> anyhow::Result<crate::report::Written> {
    let exp = crate::compare::DesignExpectation::from_design(&prep.design, &prep.expectation);
    let analysis = crate::analysis::AnalysisOptions::default();
    let earlier = crate::report::earlier_entries(&report.dir, &analysis);
    let opts = crate::report::ReportOptions {
        analysis,
        earlier,
        png: true,
    };
    Ok(crate::report::write_report(&report.dir, Some(&exp), &opts)?)
}

/// Exit code of a finished run: 3 when it did not complete; 1 when it completed with a
/// failing verdict; 0 otherwise.
pub fn exit_code(report: &RunReport, verdict: Option<crate::compare::Verdict>) -> u8 {
    match (report.outcome, verdict) {
        (Outcome::Completed, Some(crate::compare::Verdict::Fail)) => super::EXIT_FAIL,
        (Outcome::Completed, _) => EXIT_OK,
        _ => EXIT_ABORTED,
    }
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
struct Progress {
    steps: usize,
    bar: Option<ProgressBar>,
}

impl Progress {
    fn new(steps: usize) -> Progress {
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

#[cfg(test)]
mod tests {
    use super::*;

    fn plan(text: &str) -> Plan {
        let t = DesignTargets {
            vout_v: 12.0,
            limit_current_a: 1.5,
            short_circuit_current_a: 0.6,
            max_load_current_a: 1.0,
            input_voltage_v: Some(18.0),
        };
        Plan::parse(text, "p.toml", &t).unwrap()
    }

    const SHORT: &str = "name = \"s\"\n[[step]]\nkind = \"short_circuit\"\ndwell = \"2 s\"\n";

    fn code(e: &anyhow::Error) -> u8 {
        super::super::exit_code_for(e)
    }

    #[test]
    fn short_circuit_needs_a_terminal_or_yes() {
        let p = plan(SHORT);
        let mut out = Vec::new();
        let e = confirm_short_circuit(&p, Some(18.0), false, false, &mut &b""[..], &mut out)
            .unwrap_err();
        assert_eq!(code(&e), EXIT_USAGE);
        let text = String::from_utf8(out).unwrap();
        // Pass-device dissipation in a short is about V_in * I_sc (all of the input voltage
        // across the pass device; common practice): 18 V * 0.6 A = 10.8 W.
        assert!(text.contains("10.8 W"), "{text}");
        assert!(text.contains("local codes and licensed practice"), "{text}");

        let mut out = Vec::new();
        assert!(
            confirm_short_circuit(&p, Some(18.0), true, false, &mut &b""[..], &mut out).is_ok()
        );
        let mut out = Vec::new();
        assert!(confirm_short_circuit(&p, None, false, true, &mut &b"yes\n"[..], &mut out).is_ok());
        let e =
            confirm_short_circuit(&p, None, false, true, &mut &b"n\n"[..], &mut out).unwrap_err();
        assert_eq!(code(&e), EXIT_ABORTED);
    }

    #[test]
    fn plans_without_a_short_ask_nothing() {
        let p =
            plan("name = \"s\"\n[[step]]\nkind = \"soak\"\nload = 1\nduration = 2\ninterval = 1\n");
        let mut out = Vec::new();
        assert!(confirm_short_circuit(&p, None, false, false, &mut &b""[..], &mut out).is_ok());
        assert!(out.is_empty());
    }
}
