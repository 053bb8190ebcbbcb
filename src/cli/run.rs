//! `regulus run`: check the design, plan, bench file and options, ask for confirmation before a
//! short-circuit test, open the bench, run the plan with a progress bar per step, and map the
//! outcome to an exit code. A thin caller of [`crate::pipeline`]: it holds no domain logic.

use super::exit::{usage, CodedError, EXIT_INCOMPLETE};
use super::present::{self, ResultFormat};
use crate::bench::Bench;
use crate::control::BenchControl;
use crate::pipeline::{self, Prepared, RunRequest};
use crate::plan::Plan;
use crate::runner::{self, CancelToken};
use std::io::{BufRead, IsTerminal, Write};
use std::path::PathBuf;

/// Options of `regulus run`.
#[derive(Debug, Clone, clap::Args)]
#[command(after_help = super::exit::exit_codes_help())]
pub struct Args {
    /// Bench file (instruments by role); default: the station file's.
    #[arg(long, value_name = "FILE")]
    pub bench: Option<PathBuf>,
    /// Design file the unit was built to; default: the station file's.
    #[arg(long, value_name = "FILE")]
    pub design: Option<PathBuf>,
    /// Test plan file; default: the station file's.
    #[arg(long, value_name = "FILE")]
    pub plan: Option<PathBuf>,
    /// Unit identifier (serial); names the unit's record folder.
    #[arg(long, value_name = "ID")]
    pub unit: String,
    /// Records root folder (default: the station file's, else `records`).
    #[arg(long, value_name = "DIR")]
    pub records: Option<PathBuf>,
    /// Station file (also found through REGULUS_STATION or the configuration folder when
    /// --bench, --design or --plan is left out).
    #[arg(long, value_name = "FILE")]
    pub station: Option<PathBuf>,
    /// Who runs the test (stored in the record).
    #[arg(long, value_name = "NAME")]
    pub operator: Option<String>,
    /// Free-text note stored in the record.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Skip the confirmation before a short-circuit test (for test stations).
    #[arg(long)]
    pub yes: bool,
    /// Print the result as one JSON object on stdout (outcome, exit code, reasons, record,
    /// files, summary) instead of lines for people.
    #[arg(long)]
    pub json: bool,
    /// Skip the pre-flight check (the unloaded output compared with the design's band before
    /// any stress); use it only for a unit you know differs from its design file.
    #[arg(long)]
    pub no_preflight: bool,
}

impl Args {
    /// The pipeline's view of these options.
    pub fn request(&self) -> RunRequest {
        RunRequest {
            bench: self.bench.clone().unwrap_or_default(),
            design: self.design.clone().unwrap_or_default(),
            plan: self.plan.clone().unwrap_or_default(),
            unit: self.unit.clone(),
            records: self.records.clone().unwrap_or_else(|| "records".into()),
            operator: self.operator.clone(),
            note: self.note.clone(),
        }
    }
}

/// Read and check the design, the plan, the bench file and the options (through the
/// pipeline). Every failure is a usage or configuration error (exit 2) naming the file, line
/// and column where there is one.
pub fn prepare(args: &Args) -> anyhow::Result<Prepared> {
    let mut prep = pipeline::prepare(&args.request())?;
    if args.no_preflight {
        prep.preflight = pipeline::Preflight::Skip;
    }
    Ok(prep)
}

/// Print the short-circuit cautions and ask. `yes` skips the question; without a terminal on
/// stdin and without `yes`, refuse (exit 2). A declined answer is INCOMPLETE (exit 3):
/// nothing was switched on.
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
        Err(CodedError::new(EXIT_INCOMPLETE, "not confirmed: nothing was switched on").into())
    }
}

pub fn run(mut args: Args) -> anyhow::Result<u8> {
    let station = super::station::for_run(super::station::RunFiles {
        station: args.station.as_deref(),
        unit: &args.unit,
        bench: &mut args.bench,
        design: &mut args.design,
        plan: &mut args.plan,
        records: &mut args.records,
        operator: &mut args.operator,
    })?;
    let prep = prepare(&args)?;
    for note in prep.plan.beyond_design_notes() {
        eprintln!("CAUTION: {note}");
    }
    let stdin = std::io::stdin();
    confirm_short_circuit(
        &prep.plan,
        prep.targets.input_voltage_v,
        args.yes,
        stdin.is_terminal(),
        &mut stdin.lock(),
        &mut std::io::stderr(),
    )?;
    let (cancel, rt) = present::interruptible_runtime()?;
    rt.block_on(async {
        let mut bench = Bench::open(&prep.bench).await?;
        match &station {
            Some(st) => {
                super::station::run_unit(&mut bench, &prep, &args.request(), st, &cancel).await
            }
            None => execute(&mut bench, &prep, &args, &cancel).await,
        }
    })
}

/// Run a prepared plan on an open bench with a progress bar per step (`cancel` is wired to
/// Ctrl-C by the caller); prints the summary and the verdict to stdout and returns the exit
/// code.
pub async fn execute<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    args: &Args,
    cancel: &CancelToken,
) -> anyhow::Result<u8> {
    let format = if args.json {
        ResultFormat::Json
    } else {
        ResultFormat::Text
    };
    present::run_and_show(bench, prep, &args.request(), cancel, format).await
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cli::EXIT_USAGE;
    use crate::plan::DesignTargets;

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
        assert_eq!(code(&e), EXIT_INCOMPLETE);
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
