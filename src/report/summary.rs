//! The summary of a record (metrics, verdicts, drift flags) and the derived files written from
//! it: `summary.json`, `plots/` and `report.html`. Building the summary is pure; only
//! [`load_record`] and [`write_report`] touch files.
use super::{html, plots};
use crate::analysis::{self, AnalysisOptions, Metrics};
use crate::compare::{
    self, Comparison, DesignExpectation, DriftFlag, HistoryEntry, KeyValues, Verdict,
};
use crate::record::{self, Outcome, RecordError, RecordState, Row, RunInfo, RunRecord};
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

/// Words for a record's state in the summary: `finished`, `running` or `incomplete`.
pub fn state_word(state: RecordState) -> &'static str {
    match state {
        RecordState::Finished(_) => "finished",
        RecordState::Running => "running",
        RecordState::Incomplete => "incomplete",
    }
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
    /// Overall verdict ([`compare::record_verdict`]): the comparison's, or fail when the run
    /// did not finish.
    pub verdict: Option<Verdict>,
}

/// Options of a report.
#[derive(Debug, Clone, Default)]
pub struct ReportOptions {
    pub analysis: AnalysisOptions,
    /// Earlier records of the same unit, oldest first, for drift flags.
    pub earlier: Vec<HistoryEntry>,
    /// Also write PNG files beside the SVG plots.
    pub png: bool,
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
    let metrics = analysis::analyse(rows, &aopts);
    let comparison = exp.map(|e| compare::compare(&metrics, e));
    let verdict =
        compare::record_verdict(info.outcome, state, comparison.as_ref().map(|c| c.verdict));
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
        verdict,
    }
}

fn record_name_of(info: &RunInfo) -> String {
    format!("{}_{}", info.started_utc, info.plan_name)
}

pub(super) fn outcome_str(o: Outcome) -> &'static str {
    match o {
        Outcome::Running => "running",
        Outcome::Completed => "completed",
        Outcome::Aborted => "aborted",
        Outcome::Failed => "failed",
    }
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
    // Write a temporary file and rename it so a reader never sees half a report.
    let tmp = path.with_extension("tmp");
    std::fs::write(&tmp, bytes)
        .and_then(|_| std::fs::rename(&tmp, path))
        .map_err(|source| ReportError::Write {
            path: path.to_path_buf(),
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
    let mut summary = summarize_record(&rec.info, Some(rec.state), &rec.rows, exp, opts);
    summary.record_state = state_word(rec.state).to_string();
    // Drift flags name the record by its folder.
    let folder = dir
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    for f in &mut summary.drift {
        f.record = folder.clone();
    }
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
