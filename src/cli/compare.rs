//! `regulus compare --design D RECORD...`: re-evaluate records against a design (for instance a
//! new revision) without rewriting them; across several units, flag outliers and give Cpk.
//! Exit 1 when any verdict fails.

use super::options::AnalysisArgs;
use super::report::load_expectation;
use super::usage;
use crate::compare::{self, KeyMetric, KeyValues};
use anyhow::Context;
use std::io::Write;
use std::path::PathBuf;

/// Options of `regulus compare`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Design file to judge the records against.
    #[arg(long, value_name = "FILE")]
    pub design: PathBuf,
    /// Record folders.
    #[arg(required_unless_present_any = ["index", "store"], value_name = "RECORD")]
    pub records: Vec<PathBuf>,
    /// Judge the runs of this records folder's index instead (all, or those of --unit).
    #[arg(long, value_name = "DIR")]
    pub index: Option<PathBuf>,
    /// Judge the runs of every station in this store instead (PostgreSQL URL).
    #[arg(long, value_name = "URL", conflicts_with = "index")]
    pub store: Option<String>,
    /// With --index or --store: only this unit's runs.
    #[arg(long, value_name = "SERIAL")]
    pub unit: Option<String>,
    /// Outlier limit on |z| across units.
    #[arg(long, default_value_t = compare::DEFAULT_OUTLIER_Z)]
    pub z_limit: f64,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Draw a histogram of each specified metric across the records into DIR (SVG).
    #[arg(long, value_name = "DIR")]
    pub plot_dir: Option<PathBuf>,
    #[command(flatten)]
    pub analysis: AnalysisArgs,
}

#[derive(serde::Serialize)]
struct Judged {
    record: String,
    unit: String,
    comparison: compare::Comparison,
}

#[derive(serde::Serialize)]
struct Output {
    design: String,
    records: Vec<Judged>,
    population: compare::Population,
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let aopts = args.analysis.options().map_err(usage)?;
    if args.z_limit.is_nan() || args.z_limit <= 0.0 {
        return Err(usage("--z-limit must be positive (default 3)"));
    }
    let exp = load_expectation(&args.design)?;
    let mut judged = Vec::new();
    let mut units: Vec<(String, KeyValues)> = Vec::new();
    let indexed = match (&args.index, &args.store) {
        (Some(root), _) => super::index::indexed_metrics(root, args.unit.as_deref(), &aopts)?,
        (None, Some(url)) => super::sync::store_metrics(url, args.unit.as_deref(), &aopts)?,
        (None, None) => Vec::new(),
    };
    {
        for (record, unit, m, outcome, state) in indexed {
            let mut c = compare::compare(&m, &exp);
            if let Some(v) = compare::record_verdict(outcome, Some(state), Some(c.verdict)) {
                c.verdict = v;
            }
            units.push((unit.clone(), KeyValues::from_metrics(&m)));
            judged.push(Judged {
                record,
                unit,
                comparison: c,
            });
        }
    }
    for r in &args.records {
        let rec = crate::report::load_record(r)
            .with_context(|| format!("reading record {}", r.display()))?;
        let mut ao = aopts.clone();
        ao.nominal_voltage.get_or_insert(exp.vout.nominal);
        let m = crate::analysis::analyse(&rec.rows, &ao);
        let mut c = compare::compare(&m, &exp);
        // As in `regulus report`: a run that did not finish cannot pass.
        if let Some(v) = compare::record_verdict(rec.info.outcome, Some(rec.state), Some(c.verdict))
        {
            c.verdict = v;
        }
        units.push((rec.info.unit.clone(), KeyValues::from_metrics(&m)));
        judged.push(Judged {
            record: r.display().to_string(),
            unit: rec.info.unit.clone(),
            comparison: c,
        });
    }
    let specs = vec![
        (KeyMetric::OutputVoltage, exp.vout.worst_case),
        (KeyMetric::LimitCurrent, exp.limit_current.worst_case),
    ]
    .into_iter()
    .chain(
        exp.short_circuit_current
            .map(|b| (KeyMetric::ShortCircuitCurrent, b.worst_case)),
    )
    .collect::<Vec<_>>();
    let population = compare::population(&units, &specs, args.z_limit);
    if let Some(dir) = &args.plot_dir {
        std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
        for (metric, spec) in &specs {
            let values: Vec<f64> = units.iter().filter_map(|(_, kv)| kv.get(*metric)).collect();
            let chart = crate::report::plots::Chart::Histogram {
                metric: *metric,
                values: &values,
                spec: Some(*spec),
            };
            let svg = chart.to_svg(crate::report::plots::SIZE)?;
            let path = dir.join(format!("{}.svg", metric.as_str()));
            std::fs::write(&path, svg).with_context(|| format!("writing {}", path.display()))?;
        }
    }
    let code = super::for_verdicts(judged.iter().map(|j| Some(j.comparison.verdict)));
    let out = Output {
        design: exp.design_name.clone(),
        records: judged,
        population,
    };
    let mut w = std::io::stdout().lock();
    if args.json {
        serde_json::to_writer_pretty(&mut w, &out)?;
        writeln!(w)?;
    } else {
        write_table(&mut w, &out)?;
    }
    Ok(code)
}

fn write_table<W: Write>(mut w: W, out: &Output) -> std::io::Result<()> {
    writeln!(w, "design {}", out.design)?;
    for j in &out.records {
        let checks: Vec<String> = j
            .comparison
            .checks
            .iter()
            .map(|c| {
                format!(
                    "{} {} ({})",
                    c.metric,
                    crate::quantity::eng(c.measured, &c.unit),
                    c.verdict.as_str()
                )
            })
            .collect();
        writeln!(
            w,
            "{:<9} {}  {}: {}",
            j.comparison.verdict.as_str().to_uppercase(),
            j.unit,
            j.record,
            checks.join(", ")
        )?;
        for cause in &j.comparison.likely_causes {
            writeln!(w, "          likely cause: {cause}")?;
        }
    }
    for s in &out.population.stats {
        let cpk = match (s.cpk, s.spec) {
            (Some(c), _) => format!("Cpk {c:.2}"),
            (None, Some(_)) => format!("Cpk needs {}+ units", compare::MIN_UNITS_FOR_CPK),
            (None, None) => "no spec limits".to_string(),
        };
        writeln!(
            w,
            "{:<22} n {:>3}  mean {:>10}  sigma {:>10}  {cpk}",
            s.metric.as_str(),
            s.n,
            crate::quantity::eng(s.mean, s.metric.unit()),
            crate::quantity::eng(s.sigma, s.metric.unit())
        )?;
    }
    for o in &out.population.outliers {
        writeln!(
            w,
            "OUTLIER {}: {} = {} (z = {:+.1})",
            o.unit,
            o.metric.as_str(),
            crate::quantity::eng(o.value, o.metric.unit()),
            o.z
        )?;
    }
    Ok(())
}
