//! `regulus report RECORD`: regenerate a record's summary.json, plots and report.html, compared
//! with the record's design snapshot (or another design file). Exit 1 on a failing verdict.

use super::options::AnalysisArgs;
use super::usage;
use anyhow::Context;
use std::path::{Path, PathBuf};

/// Options of `regulus report`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Record folder: <records>/<unit>/<UTC stamp>_<plan>.
    pub record: PathBuf,
    /// Design file to judge against (default: the record's design.toml snapshot).
    #[arg(long, value_name = "FILE")]
    pub design: Option<PathBuf>,
    /// Write metrics only, without comparing against a design.
    #[arg(long, conflicts_with = "design")]
    pub no_design: bool,
    /// Also write PNG plots beside the SVG plots.
    #[arg(long)]
    pub png: bool,
    #[command(flatten)]
    pub analysis: AnalysisArgs,
}

/// Load a design file and compute the expectation the comparison needs. A bad design file
/// is a configuration error (exit 2) located by file, line and column.
pub fn load_expectation(path: &Path) -> anyhow::Result<crate::compare::DesignExpectation> {
    let d = crate::design::Design::load(path)?;
    let e = crate::design::expect(&d);
    Ok(crate::compare::DesignExpectation::from_design(&d, &e))
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let aopts = args.analysis.options().map_err(usage)?;
    if !args.record.join("run.json").is_file() {
        return Err(usage(format!(
            "{}: not a record folder (no run.json); give <records>/<unit>/<stamp>_<plan>",
            args.record.display()
        )));
    }
    let exp = if args.no_design {
        None
    } else {
        let path = match &args.design {
            Some(p) => p.clone(),
            None => {
                let snap = args.record.join("design.toml");
                if !snap.is_file() {
                    return Err(usage(format!(
                        "{}: the record has no design.toml snapshot; give --design FILE, \
                             or --no-design for metrics only",
                        args.record.display()
                    )));
                }
                snap
            }
        };
        Some(load_expectation(&path)?)
    };
    crate::report::load_run_info(&args.record)?;
    // Earlier records of the same unit, for drift flags.
    let earlier = crate::report::earlier_entries(&args.record, &aopts);
    let opts = crate::report::ReportOptions {
        analysis: aopts,
        earlier,
        png: args.png,
    };
    let written = crate::report::write_report(&args.record, exp.as_ref(), &opts)
        .with_context(|| format!("writing the report of {}", args.record.display()))?;
    let mut out = std::io::stdout().lock();
    super::present::print_outcome(&mut out, &written)?;
    Ok(super::for_verdicts([written.summary.verdict]))
}
