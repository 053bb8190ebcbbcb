//! `regulus report RECORD`: regenerate a record's summary.json, plots and report.html, judged
//! against the record's design snapshot. With `--design OTHER` the record's own files are
//! left alone: a re-evaluation against that design is written beside them, in a folder named
//! after the design file. The exit code is the overall outcome's (see `--help`).

use super::options::AnalysisArgs;
use super::present::Console;
use super::usage;
use anyhow::Context;
use std::path::{Path, PathBuf};

/// Options of `regulus report`.
#[derive(Debug, clap::Args)]
#[command(after_help = super::exit::exit_codes_help())]
pub struct Args {
    /// Record folder: <records>/<unit>/<UTC stamp>_<plan>.
    pub record: PathBuf,
    /// Judge against another design file: writes a re-evaluation into
    /// RECORD/against-<design file name>/ and leaves the record's own summary and report as
    /// they are.
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

/// The folder a re-evaluation against `design` goes to: `RECORD/against-<file stem>/`.
pub fn reevaluation_dir(record: &Path, design: &Path) -> PathBuf {
    let stem = design
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "design".into());
    let safe: String = stem
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect();
    record.join(format!("against-{safe}"))
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
    let rec = crate::report::load_record(&args.record)?;
    // Earlier records of the same unit, for drift flags.
    let earlier = crate::report::earlier_entries(&args.record, &aopts);
    let opts = crate::report::ReportOptions {
        analysis: aopts,
        earlier,
        png: args.png,
        plan_steps: None,
        plan_limits: None,
    };
    let summary = crate::report::evaluate_loaded(&rec, &args.record, exp.as_ref(), &opts);
    let out_dir = match &args.design {
        Some(d) => reevaluation_dir(&args.record, d),
        None => args.record.clone(),
    };
    let written = crate::report::write_derived_files(&rec, &out_dir, &summary, exp.as_ref(), &opts)
        .with_context(|| format!("writing the report of {}", args.record.display()))?;
    let mut out = Console::new(std::io::stdout().lock());
    if let Some(d) = &args.design {
        let _ = std::io::Write::write_fmt(
            &mut out,
            format_args!(
                "re-evaluated against {} ({}); the record's own summary.json and report.html \
                 are unchanged; this re-evaluation is in {}\n",
                d.display(),
                summary
                    .comparison
                    .as_ref()
                    .map(|c| c.design_name.as_str())
                    .unwrap_or(""),
                out_dir.display()
            ),
        );
    }
    let _ = super::present::print_outcome(&mut out, &written);
    Ok(super::for_verdict(written.summary.verdict))
}
