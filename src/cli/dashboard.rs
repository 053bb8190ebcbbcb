//! `regulus dashboard (--records DIR | --store URL) [--design D] [--out FILE]`: the batch
//! dashboard page over a records folder's index or the shared store. Thin: the page is
//! `report::dashboard`, the runs come from `index` or `store`.

use super::{usage, EXIT_OK};
use crate::compare::{DesignExpectation, KeyMetric};
use crate::index::{Index, RunFilter};
use crate::report::dashboard::{write_dashboard, DashRun, SpecLimits};
use anyhow::Context;
use std::path::PathBuf;

/// Options of `regulus dashboard`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Records folder (its index is used).
    #[arg(
        long,
        value_name = "DIR",
        required_unless_present = "store",
        conflicts_with = "store"
    )]
    pub records: Option<PathBuf>,
    /// Shared store (PostgreSQL URL): runs from every station.
    #[arg(long, value_name = "URL")]
    pub store: Option<String>,
    /// Only runs made against this design (its name or content hash).
    #[arg(long, value_name = "D")]
    pub design: Option<String>,
    /// Where to write the page.
    #[arg(long, value_name = "FILE", default_value = "dashboard.html")]
    pub out: PathBuf,
}

/// The design's worst-case bands as specification limits (from its file's text).
fn limits_from_design(text: &str) -> Vec<SpecLimits> {
    let Ok(d) = crate::design::Design::parse(text, "design snapshot") else {
        return Vec::new();
    };
    let e = crate::design::expect(&d);
    let x = DesignExpectation::from_design(&d, &e);
    let mut v = vec![
        SpecLimits {
            metric: KeyMetric::OutputVoltage,
            lower: x.vout.worst_case.min,
            upper: x.vout.worst_case.max,
        },
        SpecLimits {
            metric: KeyMetric::LimitCurrent,
            lower: x.limit_current.worst_case.min,
            upper: x.limit_current.worst_case.max,
        },
    ];
    if let Some(s) = x.short_circuit_current {
        v.push(SpecLimits {
            metric: KeyMetric::ShortCircuitCurrent,
            lower: s.worst_case.min,
            upper: s.worst_case.max,
        });
    }
    v
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let (title, runs, limits) = match (&args.records, &args.store) {
        (Some(dir), _) => {
            if !dir.is_dir() {
                return Err(usage(format!(
                    "{}: no such records folder (check --records)",
                    dir.display()
                )));
            }
            let idx = Index::open(dir)?;
            let runs = idx.runs(&RunFilter {
                design: args.design.clone(),
                ..RunFilter::default()
            })?;
            let limits = runs
                .last()
                .and_then(|r| {
                    std::fs::read_to_string(r.dir(dir).join(crate::record::DESIGN_SNAPSHOT)).ok()
                })
                .map(|t| limits_from_design(&t))
                .unwrap_or_default();
            let title = runs
                .last()
                .map(|r| r.design_name.clone())
                .unwrap_or_else(|| "no runs".into());
            let dash = runs
                .into_iter()
                .map(|r| DashRun {
                    unit: r.unit,
                    station: r.station,
                    started_utc: r.started_utc,
                    result: r.result,
                    values: r.values,
                })
                .collect::<Vec<_>>();
            (title, dash, limits)
        }
        (None, Some(url)) => {
            let rt = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .context("cannot start the async runtime")?;
            let (runs, design) = rt.block_on(async {
                let client = crate::store::connect(url).await?;
                let runs = crate::store::store_runs(&client, None, args.design.as_deref()).await?;
                let design = match runs.last() {
                    Some(r) => crate::store::design_content(&client, &r.design_sha256).await?,
                    None => None,
                };
                Ok::<_, crate::store::StoreError>((runs, design))
            })?;
            let limits = design
                .and_then(|b| String::from_utf8(b).ok())
                .map(|t| limits_from_design(&t))
                .unwrap_or_default();
            let title = runs
                .last()
                .map(|r| r.design_name.clone())
                .unwrap_or_else(|| "no runs".into());
            let dash = runs
                .into_iter()
                .map(|r| DashRun {
                    unit: r.unit,
                    station: Some(r.station),
                    started_utc: r.started_utc,
                    result: r.result,
                    values: r.values,
                })
                .collect::<Vec<_>>();
            (title, dash, limits)
        }
        (None, None) => return Err(usage("give --records DIR or --store URL")),
    };
    let mut page = Vec::new();
    write_dashboard(&mut page, &title, &runs, &limits)?;
    std::fs::write(&args.out, page).with_context(|| format!("writing {}", args.out.display()))?;
    println!("wrote {} ({} run(s))", args.out.display(), runs.len());
    Ok(EXIT_OK)
}
