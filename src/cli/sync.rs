//! `regulus sync`: upload a records folder's finished runs that the shared store (PostgreSQL)
//! does not hold yet. Safe to rerun and to run from several stations at once; when the store
//! is unreachable the runs stay queued locally and the next sync catches up. Also the
//! store-backed history of `regulus history --store`. Thin: the logic lives in `crate::store`.

use super::station as st_run;
use super::{usage, EXIT_ERROR, EXIT_OK};
use crate::report::{self, History};
use crate::store;
use anyhow::Context;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Options of `regulus sync`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Store connection URL, postgresql://USER@HOST:PORT/DATABASE (default: the station
    /// file's `store`).
    #[arg(long, value_name = "URL")]
    pub store: Option<String>,
    /// Records folder to upload (default: the station file's, else `records`).
    #[arg(long, value_name = "DIR")]
    pub records: Option<PathBuf>,
    /// Station file (names the station of records without a station stamp).
    #[arg(long, value_name = "FILE")]
    pub station: Option<PathBuf>,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let st = st_run::find(args.station.as_deref())?;
    let url = args
        .store
        .clone()
        .or_else(|| st.as_ref().and_then(|s| s.store.clone()))
        .ok_or_else(|| usage("no store: give --store URL or a station file with `store`"))?;
    let records = args
        .records
        .clone()
        .or_else(|| st.as_ref().map(|s| s.records.clone()))
        .unwrap_or_else(|| PathBuf::from("records"));
    if !records.is_dir() {
        return Err(usage(format!(
            "{}: no such records folder (check --records)",
            records.display()
        )));
    }
    let station_id = st.as_ref().map(|s| s.id.clone());
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let mut out = std::io::stdout().lock();
    let result = rt.block_on(sync_once(&url, &records, station_id.as_deref()));
    report_sync(&mut out, &url, &records, result)
}

/// Connect, migrate and upload the queue of `records`.
pub async fn sync_once(
    url: &str,
    records: &Path,
    station: Option<&str>,
) -> Result<store::SyncReport, store::StoreError> {
    let mut client = store::connect(url).await?;
    store::sync_folder(&mut client, records, station).await
}

/// Say what a sync did; exit 0 when the queue was emptied, 4 (a station error: the store is
/// away or refused a run) when runs stay queued.
pub fn report_sync(
    out: &mut impl Write,
    url: &str,
    records: &Path,
    result: Result<store::SyncReport, store::StoreError>,
) -> anyhow::Result<u8> {
    let queued = store::pending(records).map(|p| p.len()).unwrap_or(0);
    match result {
        Ok(r) => {
            writeln!(
                out,
                "synced {} run(s) ({} reading rows) from {} to the store; {} already there; {} queued",
                r.uploaded,
                r.readings,
                records.display(),
                r.already,
                queued
            )?;
            for s in &r.skipped {
                writeln!(out, "not uploaded: {s}")?;
            }
            Ok(if queued == 0 { EXIT_OK } else { EXIT_ERROR })
        }
        Err(e) if e.is_unreachable() => {
            writeln!(
                out,
                "store unreachable ({}): {queued} run(s) stay queued in {}; sync again later",
                super::present::chain_text(&e),
                records.display()
            )?;
            let _ = url;
            Ok(EXIT_ERROR)
        }
        Err(e) => Err(e.into()),
    }
}

/// A unit's history across stations, from the store.
pub fn history_from_store(url: &str, unit: &str) -> anyhow::Result<History> {
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let runs = rt.block_on(async {
        let client = store::connect(url).await?;
        store::store_runs(&client, Some(unit), None).await
    })?;
    let mut h =
        report::history_from_entries(unit, runs.iter().map(|r| r.history_entry()).collect());
    h.plans = runs.into_iter().map(|r| (r.folder, r.plan_name)).collect();
    Ok(h)
}

/// Every run from the store (or one unit's) with its metrics and what its plan promised, for
/// `regulus compare --store`. The store holds the metrics its stations analysed with the
/// default settings, so other settings are refused.
pub fn store_metrics(
    url: &str,
    unit: Option<&str>,
    opts: &crate::analysis::AnalysisOptions,
) -> anyhow::Result<Vec<store::StoreMetrics>> {
    if *opts != crate::analysis::AnalysisOptions::default() {
        return Err(usage(
            "--store uses the metrics the store holds, analysed with the default settings: \
             give record folders instead to analyse with other settings",
        ));
    }
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let runs = rt.block_on(async {
        let client = store::connect(url).await?;
        store::store_metrics(&client, unit).await
    })?;
    Ok(runs)
}
