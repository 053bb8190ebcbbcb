//! `regulus history UNIT`: a unit's dated records with key metrics and drift flags, as a table,
//! CSV or JSON, optionally with a plot of the key metrics over dates.

use super::options::AnalysisArgs;
use super::usage;
use super::EXIT_OK;
use anyhow::Context;
use std::path::PathBuf;

/// Options of `regulus history`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Unit serial (the folder name under the records folder).
    pub unit: String,
    /// Records folder.
    #[arg(long, value_name = "DIR", default_value = "records")]
    pub records: PathBuf,
    /// Read the unit's runs from every station in this store instead (PostgreSQL URL).
    #[arg(long, value_name = "URL")]
    pub store: Option<String>,
    /// Print JSON instead of a table.
    #[arg(long, conflicts_with = "csv")]
    pub json: bool,
    /// Print CSV instead of a table.
    #[arg(long)]
    pub csv: bool,
    /// Also draw the key metrics over dates into FILE (.svg or .png).
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
    #[command(flatten)]
    pub analysis: AnalysisArgs,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let aopts = args.analysis.options().map_err(usage)?;
    let plot_kind = match &args.plot {
        Some(p) => match p.extension().and_then(|e| e.to_str()) {
            Some("svg") => Some(false),
            Some("png") => Some(true),
            _ => {
                return Err(usage(format!(
                    "--plot {}: the file name must end in .svg or .png",
                    p.display()
                )))
            }
        },
        None => None,
    };
    if args.store.is_none() && !args.records.join(&args.unit).is_dir() {
        return Err(usage(format!(
            "no records for unit '{}' under {} (check --records and the unit serial)",
            args.unit,
            args.records.display()
        )));
    }
    let h = match &args.store {
        Some(url) => super::sync::history_from_store(url, &args.unit)?,
        None => super::index::history(&args.records, &args.unit, &aopts)?,
    };
    let mut out = std::io::stdout().lock();
    if args.json {
        crate::report::write_history_json(&mut out, &h)?;
    } else if args.csv {
        crate::report::write_history_csv(&mut out, &h)?;
    } else {
        crate::report::write_history_table(&mut out, &h)?;
    }
    if let (Some(path), Some(png)) = (&args.plot, plot_kind) {
        let chart = crate::report::plots::Chart::History {
            unit: &args.unit,
            entries: &h.entries,
        };
        if png {
            chart.to_png(path, crate::report::plots::SIZE)?;
        } else {
            let svg = chart.to_svg(crate::report::plots::SIZE)?;
            std::fs::write(path, svg).with_context(|| format!("writing {}", path.display()))?;
        }
    }
    Ok(EXIT_OK)
}
