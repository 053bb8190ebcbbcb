//! `regulus index`: the records folder's embedded index: `--rebuild` makes it again from the
//! folders (the source of truth); without it, says how many runs it holds and where it is.
//! Also the index-backed history used by `regulus history`. Thin: the logic lives in
//! `crate::index`.

use super::{usage, EXIT_OK};
use crate::analysis::AnalysisOptions;
use crate::index::{self, Index, RunFilter};
use crate::report::{self, History};
use std::io::Write;
use std::path::{Path, PathBuf};

/// Options of `regulus index`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Records folder whose index to use.
    #[arg(long, value_name = "DIR", default_value = "records")]
    pub records: PathBuf,
    /// Make the index again from the record folders.
    #[arg(long)]
    pub rebuild: bool,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    if !args.records.is_dir() {
        return Err(usage(format!(
            "{}: no such records folder (check --records)",
            args.records.display()
        )));
    }
    let mut idx = Index::open(&args.records)?;
    let mut out = std::io::stdout().lock();
    if args.rebuild {
        let r = idx.rebuild()?;
        writeln!(
            out,
            "indexed {} run(s) from {} into {}",
            r.indexed,
            args.records.display(),
            index::index_path(&args.records).display()
        )?;
        for s in &r.skipped {
            writeln!(out, "skipped {s}")?;
        }
    } else {
        writeln!(
            out,
            "{}: {} run(s) indexed (rebuild from the folders with --rebuild)",
            index::index_path(&args.records).display(),
            idx.len()?
        )?;
    }
    Ok(EXIT_OK)
}

/// A unit's history through the index: the unit's rows are first checked against its
/// folders (new, changed or removed records), then read from the index. With analysis
/// settings other than the defaults the index (which holds metrics analysed with the
/// defaults) does not apply and the folders are read, as they are when the index cannot be
/// opened.
pub fn history(records: &Path, unit: &str, opts: &AnalysisOptions) -> anyhow::Result<History> {
    if *opts != AnalysisOptions::default() {
        return Ok(report::history(records, unit, opts)?);
    }
    let Ok(mut idx) = Index::open(records) else {
        return Ok(report::history(records, unit, opts)?);
    };
    let unreadable = idx.refresh_unit(unit)?;
    let runs = idx.runs(&RunFilter {
        unit: Some(unit.to_string()),
        ..RunFilter::default()
    })?;
    let mut h =
        report::history_from_entries(unit, runs.iter().map(|r| r.history_entry()).collect());
    h.unreadable = unreadable;
    h.plans = runs.into_iter().map(|r| (r.folder, r.plan_name)).collect();
    Ok(h)
}

/// The runs of a records folder's index (all, or one unit's, whose rows are first checked
/// against its folders) as `compare --index` judges them against the design whose content
/// hash is `design_sha256`. The index holds metrics analysed with the default settings, so
/// other settings are refused.
pub fn judging_rows(
    records: &Path,
    unit: Option<&str>,
    opts: &AnalysisOptions,
    design_sha256: &str,
) -> anyhow::Result<Vec<index::JudgingRow>> {
    if *opts != AnalysisOptions::default() {
        return Err(usage(
            "--index uses the metrics the index holds, analysed with the default settings: \
             give record folders instead to analyse with other settings",
        ));
    }
    if !records.is_dir() {
        return Err(usage(format!(
            "{}: no such records folder (check --index)",
            records.display()
        )));
    }
    let mut idx = Index::open(records)?;
    if let Some(u) = unit {
        idx.refresh_unit(u)?;
    }
    Ok(idx.judging_rows(unit, design_sha256)?)
}
