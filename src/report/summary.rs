//! The summary of a record (metrics, verdicts, drift flags) and the derived files written from
//! it: `summary.json`, `plots/` and `report.html`. Building the summary is pure; only
//! [`load_record`] and [`write_report`] touch files.
use super::{html, plots, plots_line};
use crate::analysis::{self, AnalysisOptions, Metrics};
use crate::compare::{
    self, Comparison, DesignExpectation, DriftFlag, HistoryEntry, KeyValues, Verdict,
};
use crate::record::{self, Outcome, RecordError, RecordState, Row, RunInfo, RunRecord, StepKind};
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Version of the `summary.json` layout.
pub const SUMMARY_SCHEMA_VERSION: u32 = 1;

/// A report problem, phrased so the user knows which file to check.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// The record could not be read (file, line and what to check come from the record).
    #[error(transparent)]
    Record(#[from] RecordError),
    #[error("{path}: cannot write: {source}")]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(transparent)]
    Plot(#[from] plots::PlotError),
}

/// Read `run.json` of a record folder.
pub fn load_run_info(dir: &Path) -> Result<RunInfo, ReportError> {
    Ok(record::read_info(dir)?)
}

/// Read a record folder (run.json, its state, readings.csv) through the record module.
pub fn load_record(dir: &Path) -> Result<RunRecord, ReportError> {
    Ok(record::read_run(dir)?)
}

/// Analysis settings recorded in the summary.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnalysisSettings {
    pub knee_drop: f64,
    pub regulation_span: f64,
    pub load_regulation_reference: analysis::RegulationReference,
}

/// Content of `summary.json`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Summary {
    pub schema_version: u32,
    pub tool_version: String,
    pub unit: String,
    pub plan_name: String,
    pub design_name: String,
    pub started_utc: String,
    pub outcome: Outcome,
    /// `finished`, `running` (a live writer holds the record) or `incomplete` (the run
    /// stopped without finishing run.json).
    pub record_state: String,
    pub settings: AnalysisSettings,
    pub metrics: Metrics,
    pub comparison: Option<Comparison>,
    pub drift: Vec<DriftFlag>,
    /// The metrics the plan's steps promise (all required), and where the steps were read.
    pub promised: Vec<compare::Promised>,
    pub promised_from: PromisedFrom,
    /// Promised metrics the record lacks, with why.
    pub missing: Vec<compare::Missing>,
    /// Overall outcome ([`compare::judge`]): pass, marginal, fail, incomplete or error;
    /// `null` only for a finished record judged against no design.
    pub verdict: Option<Verdict>,
    /// Why the outcome is not a plain pass.
    pub reasons: Vec<String>,
    /// Steps the plan let go beyond the design (`beyond_design`), with why.
    pub beyond_design: Vec<String>,
}

/// Where a summary found the plan's steps.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum PromisedFrom {
    /// Given by the caller (the run that just ended).
    Plan,
    /// The record's plan.toml snapshot.
    PlanSnapshot,
    /// The step kinds seen in readings.csv (no readable plan snapshot: a step that never
    /// wrote a row is not known).
    Readings,
}

/// Options of a report.
#[derive(Debug, Clone, Default)]
pub struct ReportOptions {
    pub analysis: AnalysisOptions,
    /// Earlier records of the same unit, oldest first, for drift flags.
    pub earlier: Vec<HistoryEntry>,
    /// Also write PNG files beside the SVG plots.
    pub png: bool,
    /// The kinds of the plan's steps, in order (what the plan promises). `None`: read them
    /// from the record's plan.toml snapshot ([`write_report`]), else from its rows.
    pub plan_steps: Option<Vec<StepKind>>,
    /// Limits the plan sets on metrics the design has no band for (line regulation, soak
    /// drift and temperature rise). `None`: read them from the plan.toml snapshot.
    pub plan_limits: Option<compare::MetricLimits>,
}

/// Build the summary of a record (pure).
pub fn summarize(
    info: &RunInfo,
    rows: &[Row],
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Summary {
    summarize_record(info, None, rows, exp, opts)
}

/// [`summarize`] with the record's state when it is known (a run cut short cannot pass).
pub fn summarize_record(
    info: &RunInfo,
    state: Option<RecordState>,
    rows: &[Row],
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Summary {
    let mut aopts = opts.analysis.clone();
    if aopts.nominal_voltage.is_none() {
        aopts.nominal_voltage = exp.map(|e| e.vout.nominal);
    }
    if aopts.full_load_current.is_none() {
        aopts.full_load_current = exp.and_then(|e| e.rated_load_a);
    }
    let metrics = analysis::analyse(rows, &aopts);
    let limits = opts.plan_limits.unwrap_or_default();
    let (kinds, promised_from) = match &opts.plan_steps {
        Some(k) => (k.clone(), PromisedFrom::Plan),
        None => {
            let mut k: Vec<StepKind> = rows.iter().map(|r| r.step_kind).collect();
            k.dedup();
            (k, PromisedFrom::Readings)
        }
    };
    let promised = compare::promised_metrics(&kinds);
    let facts = compare::RecordFacts {
        outcome: info.outcome,
        state,
        reason: info.reason.as_deref(),
    };
    let (comparison, missing, judgement) =
        compare::judge_metrics(&metrics, exp, &limits, &promised, facts);
    let verdict = judgement.verdict;
    let this = entry_for(&record_name_of(info), info, &metrics, verdict);
    let mut all = opts.earlier.clone();
    all.push(this.clone());
    let drift = compare::unit_drift(&all, &[])
        .into_iter()
        .filter(|f| f.record == this.record)
        .collect();
    Summary {
        schema_version: SUMMARY_SCHEMA_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        unit: info.unit.clone(),
        plan_name: info.plan_name.clone(),
        design_name: info.design.name.clone(),
        started_utc: info.started_utc.clone(),
        outcome: info.outcome,
        record_state: if info.outcome == Outcome::Running {
            "running"
        } else {
            "finished"
        }
        .to_string(),
        settings: AnalysisSettings {
            knee_drop: aopts.knee_drop,
            regulation_span: aopts.regulation_span,
            load_regulation_reference: aopts.reference,
        },
        metrics,
        comparison,
        drift,
        promised,
        promised_from,
        missing,
        verdict,
        reasons: judgement.reasons,
        beyond_design: Vec::new(),
    }
}

fn record_name_of(info: &RunInfo) -> String {
    format!("{}_{}", info.started_utc, info.plan_name)
}

pub(super) fn outcome_str(o: Outcome) -> &'static str {
    o.as_str()
}

pub(super) fn entry_for(
    record: &str,
    info: &RunInfo,
    m: &Metrics,
    verdict: Option<Verdict>,
) -> HistoryEntry {
    HistoryEntry {
        record: record.to_string(),
        started_utc: info.started_utc.clone(),
        outcome: outcome_str(info.outcome).to_string(),
        verdict,
        values: KeyValues::from_metrics(m),
    }
}

/// Write a summary as pretty JSON with a trailing newline.
pub fn write_summary_json<W: Write>(mut w: W, summary: &Summary) -> std::io::Result<()> {
    serde_json::to_writer_pretty(&mut w, summary)?;
    w.write_all(b"\n")
}

/// Files written by [`write_report`].
#[derive(Debug, Clone)]
pub struct Written {
    pub summary: Summary,
    pub files: Vec<PathBuf>,
}

fn write_file(path: &Path, bytes: &[u8]) -> Result<(), ReportError> {
    // Write a temporary file, sync it and rename it so a reader never sees half a report.
    let tmp = path.with_extension("tmp");
    let write = || -> std::io::Result<()> {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        drop(f);
        std::fs::rename(&tmp, path)
    };
    write().map_err(|source| {
        let _ = std::fs::remove_file(&tmp);
        ReportError::Write {
            path: path.to_path_buf(),
            source,
        }
    })
}

/// Sync a folder so the names of the files renamed into it are on disk.
fn sync_folder(dir: &Path) -> Result<(), ReportError> {
    record::sync_dir(dir).map_err(|source| ReportError::Write {
        path: dir.to_path_buf(),
        source,
    })
}

/// Analyse a finished record folder and write `summary.json`, `plots/` and `report.html`
/// into it. The runner calls this when a run ends; `regulus report` calls it again.
pub fn write_report(
    dir: &Path,
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Result<Written, ReportError> {
    let rec = load_record(dir)?;
    let summary = evaluate_loaded(&rec, dir, exp, opts);
    write_derived_files(&rec, dir, &summary, exp, opts)
}

/// The summary of a record folder without writing anything: the record read, the plan's
/// steps taken from `opts` or the record's plan.toml snapshot, judged by the one rule.
pub fn evaluate(
    dir: &Path,
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Result<Summary, ReportError> {
    let rec = load_record(dir)?;
    Ok(evaluate_loaded(&rec, dir, exp, opts))
}

/// [`evaluate`] of a record already read from `dir`.
pub fn evaluate_loaded(
    rec: &RunRecord,
    dir: &Path,
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Summary {
    let mut opts = opts.clone();
    let mut from = PromisedFrom::Plan;
    let snapshot = crate::plan::snapshot_outline(dir);
    if opts.plan_steps.is_none() {
        opts.plan_steps = snapshot
            .as_ref()
            .map(|s| s.iter().map(|o| o.kind).collect());
        from = PromisedFrom::PlanSnapshot;
    }
    if opts.plan_limits.is_none() {
        opts.plan_limits = snapshot
            .as_ref()
            .map(|s| crate::floor::metric_limits(s.iter().map(|o| o.limits)));
    }
    let mut summary = summarize_record(&rec.info, Some(rec.state), &rec.rows, exp, &opts);
    if summary.promised_from == PromisedFrom::Plan {
        summary.promised_from = from;
    }
    summary.beyond_design = snapshot
        .iter()
        .flatten()
        .enumerate()
        .filter_map(|(k, o)| {
            let why = o.beyond_design.as_ref()?;
            let label = o
                .label
                .clone()
                .unwrap_or_else(|| o.kind.as_str().to_string());
            Some(format!(
                "step {} ('{label}') ran beyond the design: {why}",
                k + 1
            ))
        })
        .collect();
    summary.record_state = rec.state.as_str().to_string();
    // Drift flags name the record by its folder.
    let folder = dir
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    for f in &mut summary.drift {
        f.record = folder.clone();
    }
    summary
}

/// Write `summary.json`, `plots/` and `report.html` of the record `rec` into `out`
/// (the record folder itself, or a re-evaluation folder beside it). Each file is written
/// to a temporary name, synced and renamed, and the folder synced, so a reader never sees
/// half a file and a written file survives a power cut.
pub fn write_derived_files(
    rec: &RunRecord,
    out: &Path,
    summary: &Summary,
    exp: Option<&DesignExpectation>,
    opts: &ReportOptions,
) -> Result<Written, ReportError> {
    let dir = out;
    std::fs::create_dir_all(dir).map_err(|source| ReportError::Write {
        path: dir.to_path_buf(),
        source,
    })?;
    let summary = summary.clone();
    let mut files = Vec::new();
    let mut json = Vec::new();
    write_summary_json(&mut json, &summary).map_err(|source| ReportError::Write {
        path: dir.join("summary.json"),
        source,
    })?;
    let p = dir.join("summary.json");
    write_file(&p, &json)?;
    files.push(p);

    let curve = analysis::curve_points(&rec.rows);
    let dwell = analysis::dwell_series(&rec.rows);
    let knee = plots::knee_search_points(&rec.rows);
    let charts = plots::with_knee_search(charts_for(&curve, &dwell, &summary.metrics, exp), &knee);
    let plots_dir = dir.join("plots");
    std::fs::create_dir_all(&plots_dir).map_err(|source| ReportError::Write {
        path: plots_dir.clone(),
        source,
    })?;
    let mut svgs = Vec::new();
    for c in &charts {
        let svg = c.to_svg(plots::SIZE)?;
        let p = plots_dir.join(format!("{}.svg", c.name()));
        write_file(&p, svg.as_bytes())?;
        files.push(p);
        if opts.png {
            let p = plots_dir.join(format!("{}.png", c.name()));
            c.to_png(&p, plots::SIZE)?;
            files.push(p);
        }
        svgs.push((c.name(), c.caption(), svg));
    }
    let line = analysis::line_points(&rec.rows);
    let soak = analysis::soak_series(&rec.rows);
    let limits = judged_limits(&summary, opts);
    for c in line_charts_for(&line, &soak, &summary.metrics, exp, &limits) {
        let svg = c.to_svg(plots::SIZE)?;
        let p = plots_dir.join(format!("{}.svg", c.name()));
        write_file(&p, svg.as_bytes())?;
        files.push(p);
        if opts.png {
            let p = plots_dir.join(format!("{}.png", c.name()));
            c.to_png(&p, plots::SIZE)?;
            files.push(p);
        }
        svgs.push((c.name(), c.caption(), svg));
    }
    let mut page = Vec::new();
    html::write_html(&mut page, &rec.info, &summary, &svgs).map_err(|source| {
        ReportError::Write {
            path: dir.join("report.html"),
            source,
        }
    })?;
    let p = dir.join("report.html");
    write_file(&p, &page)?;
    files.push(p);
    sync_folder(&plots_dir)?;
    sync_folder(dir)?;
    Ok(Written { summary, files })
}

/// [`write_report`] against a loaded design and its computed expectation (what the runner
/// holds when a run ends).
pub fn write_report_for_design(
    dir: &Path,
    design: &crate::design::Design,
    expectation: &crate::design::Expectation,
    opts: &ReportOptions,
) -> Result<Written, ReportError> {
    let exp = DesignExpectation::from_design(design, expectation);
    write_report(dir, Some(&exp), opts)
}

/// The plots a record gets (only those with data).
pub fn charts_for<'a>(
    curve: &'a [analysis::CurvePoint],
    dwell: &'a [(f64, f64)],
    metrics: &'a Metrics,
    exp: Option<&'a DesignExpectation>,
) -> Vec<plots::Chart<'a>> {
    let mut v = Vec::new();
    if !curve.is_empty() {
        v.push(plots::Chart::VoltageCurrent {
            curve,
            metrics,
            expectation: exp,
            knee_search: &[],
        });
        v.push(plots::Chart::Regulation { curve, metrics });
    }
    if !dwell.is_empty() {
        v.push(plots::Chart::ShortCircuit {
            series: dwell,
            fit: metrics.short_circuit.and_then(|s| s.time_constant),
            band: exp
                .and_then(|e| e.short_circuit_current)
                .map(|b| (b.worst_case.min, b.worst_case.max)),
        });
    }
    v
}

/// The limits a summary judged line regulation and the soak against (its checks), else the
/// plan's limits given in the options: what the line and soak plots draw.
pub fn judged_limits(summary: &Summary, opts: &ReportOptions) -> compare::MetricLimits {
    let mut l = compare::MetricLimits::default();
    for c in summary.comparison.iter().flat_map(|c| &c.checks) {
        let max = Some(c.worst_case.max);
        match c.metric.as_str() {
            "line_regulation" => l.line_regulation_percent = max,
            "soak_drift" => l.soak_drift_percent = max,
            "soak_temperature_rise" => l.soak_rise_c = max,
            _ => {}
        }
    }
    let plan = opts.plan_limits.unwrap_or_default();
    l.line_regulation_percent = l.line_regulation_percent.or(plan.line_regulation_percent);
    l.soak_drift_percent = l.soak_drift_percent.or(plan.soak_drift_percent);
    l.soak_rise_c = l.soak_rise_c.or(plan.soak_rise_c);
    l
}

/// The line-regulation and soak plots a record gets: one for a line sweep with points, one
/// for a soak with readings; none for a record without such steps.
pub fn line_charts_for<'a>(
    line: &'a [(f64, f64)],
    soak: &'a [analysis::SoakPoint],
    metrics: &Metrics,
    exp: Option<&DesignExpectation>,
    limits: &compare::MetricLimits,
) -> Vec<plots_line::LineChart<'a>> {
    let mut v = Vec::new();
    if !line.is_empty() {
        v.push(plots_line::LineChart::LineRegulation {
            points: line,
            reference_voltage: metrics.line_regulation.map(|l| l.reference_voltage),
            band: exp.map(|e| e.vout.worst_case),
            max_change_percent: limits.line_regulation_percent,
        });
    }
    if soak
        .iter()
        .any(|p| p.voltage.is_some() || p.temperature.is_some())
    {
        v.push(plots_line::LineChart::Soak {
            series: soak,
            max_drift_percent: limits.soak_drift_percent,
            max_rise_c: limits.soak_rise_c,
        });
    }
    v
}
