//! Reports derived from a record: `summary.json` (metrics, verdicts, drift flags, schema
//! version), plots (`plots/*.svg` and `.png`) and a self-contained `report.html`; plus the
//! history listing of a unit. Everything here can be regenerated from the record; this module
//! never writes into `readings.csv` or `run.json`. Building the summary and rendering are pure
//! (generic writers); file access is limited to [`load_record`], [`write_report`] and
//! [`history`].

pub mod font;
pub mod html;
pub mod plots;

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

fn outcome_str(o: Outcome) -> &'static str {
    match o {
        Outcome::Running => "running",
        Outcome::Completed => "completed",
        Outcome::Aborted => "aborted",
        Outcome::Failed => "failed",
    }
}

fn entry_for(record: &str, info: &RunInfo, m: &Metrics, verdict: Option<Verdict>) -> HistoryEntry {
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
    let charts = charts_for(&curve, &dwell, &summary.metrics, exp);
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

/// History entries of the same unit that started before the record in `dir` (the record's
/// folder sits in `<records>/<unit>/`), oldest first, for drift flags. Unreadable siblings
/// are skipped; no siblings give an empty list.
pub fn earlier_entries(dir: &Path, opts: &AnalysisOptions) -> Vec<HistoryEntry> {
    let Ok(info) = load_run_info(dir) else {
        return Vec::new();
    };
    let Some(unit_dir) = dir.parent() else {
        return Vec::new();
    };
    let (Some(unit), Some(root)) = (unit_dir.file_name(), unit_dir.parent()) else {
        return Vec::new();
    };
    history(root, &unit.to_string_lossy(), opts)
        .map(|h| {
            h.entries
                .into_iter()
                .filter(|e| e.started_utc < info.started_utc)
                .collect()
        })
        .unwrap_or_default()
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
        });
        v.push(plots::Chart::Regulation { curve, metrics });
    }
    if !dwell.is_empty() {
        v.push(plots::Chart::ShortCircuit {
            series: dwell,
            fit: metrics.short_circuit.and_then(|s| s.time_constant),
        });
    }
    v
}

// ---------------------------------------------------------------------------------------
// History
// ---------------------------------------------------------------------------------------

/// A unit's history: dated entries (oldest first) and the drift flags between them.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct History {
    pub unit: String,
    pub entries: Vec<HistoryEntry>,
    pub drift: Vec<DriftFlag>,
    /// Record folders that could not be read, with the reason.
    pub unreadable: Vec<String>,
}

/// Build the history from entries (pure): sorts by start time and computes drift flags.
pub fn history_from_entries(unit: &str, mut entries: Vec<HistoryEntry>) -> History {
    entries.sort_by(|a, b| {
        a.started_utc
            .cmp(&b.started_utc)
            .then(a.record.cmp(&b.record))
    });
    let drift = compare::unit_drift(&entries, &[]);
    History {
        unit: unit.to_string(),
        entries,
        drift,
        unreadable: Vec::new(),
    }
}

/// Read a unit's records under `records/<unit>/` (listed by the record module, oldest
/// first). Each record's `summary.json` is used when present (it is derived from the
/// readings); otherwise the readings are analysed. A run whose writer died reads as
/// `incomplete`; folders without a readable run.json are listed in `unreadable`.
pub fn history(records: &Path, unit: &str, opts: &AnalysisOptions) -> Result<History, ReportError> {
    let runs = record::list_runs(records, unit)?;
    let mut entries = Vec::with_capacity(runs.len());
    let mut unreadable = Vec::new();
    for run in runs {
        let name = run
            .dir
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let result = match run.info {
            Ok(info) => entry_from_dir(&run.dir, &name, &info, opts).map(|mut e| {
                if run.state == Some(RecordState::Incomplete) {
                    e.outcome = "incomplete".to_string();
                }
                e
            }),
            Err(err) => Err(err.into()),
        };
        match result {
            Ok(e) => entries.push(e),
            Err(e) => unreadable.push(format!("{name}: {e}")),
        }
    }
    let mut h = history_from_entries(unit, entries);
    h.unreadable = unreadable;
    Ok(h)
}

#[derive(serde::Deserialize)]
struct SummaryLite {
    metrics: Metrics,
    verdict: Option<Verdict>,
}

fn entry_from_dir(
    d: &Path,
    name: &str,
    info: &RunInfo,
    opts: &AnalysisOptions,
) -> Result<HistoryEntry, ReportError> {
    let sp = d.join("summary.json");
    if let Ok(text) = std::fs::read_to_string(&sp) {
        if let Ok(s) = serde_json::from_str::<SummaryLite>(&text) {
            return Ok(entry_for(name, info, &s.metrics, s.verdict));
        }
    }
    let rows = record::read_rows(&d.join(record::READINGS_FILE))?;
    let m = analysis::analyse(&rows, opts);
    let verdict = compare::record_verdict(info.outcome, None, None);
    Ok(entry_for(name, info, &m, verdict))
}

fn fmt_opt(v: Option<f64>, decimals: usize) -> String {
    v.map(|x| format!("{:.*}", decimals, x)).unwrap_or_default()
}

/// Columns of the history table and CSV: (header, key metric, decimals).
const HISTORY_COLUMNS: [(&str, compare::KeyMetric, usize); 6] = [
    ("output_voltage [V]", compare::KeyMetric::OutputVoltage, 4),
    ("load_regulation [%]", compare::KeyMetric::LoadRegulation, 3),
    (
        "output_resistance [ohm]",
        compare::KeyMetric::OutputResistance,
        4,
    ),
    ("limit_current [A]", compare::KeyMetric::LimitCurrent, 4),
    (
        "short_circuit_current [A]",
        compare::KeyMetric::ShortCircuitCurrent,
        4,
    ),
    (
        "short_circuit_drift [%]",
        compare::KeyMetric::ShortCircuitDrift,
        2,
    ),
];

fn drift_words(h: &History, record: &str) -> String {
    h.drift
        .iter()
        .filter(|f| f.record == record)
        .map(|f| f.metric.as_str())
        .collect::<Vec<_>>()
        .join(";")
}

/// Write the history as CSV (one row per record, drift flags as `;`-separated metric names).
pub fn write_history_csv<W: Write>(mut w: W, h: &History) -> std::io::Result<()> {
    let mut header = vec!["record", "started_utc", "outcome", "verdict"];
    header.extend(HISTORY_COLUMNS.iter().map(|c| c.0));
    header.push("drift");
    writeln!(w, "{}", header.join(","))?;
    for e in &h.entries {
        let mut f = vec![
            e.record.replace(',', " "),
            e.started_utc.clone(),
            e.outcome.clone(),
            e.verdict
                .map(|v| v.as_str().to_string())
                .unwrap_or_default(),
        ];
        f.extend(
            HISTORY_COLUMNS
                .iter()
                .map(|(_, k, d)| fmt_opt(e.values.get(*k), *d)),
        );
        f.push(drift_words(h, &e.record));
        writeln!(w, "{}", f.join(","))?;
    }
    Ok(())
}

/// Write the history as pretty JSON with a trailing newline.
pub fn write_history_json<W: Write>(mut w: W, h: &History) -> std::io::Result<()> {
    serde_json::to_writer_pretty(&mut w, h)?;
    w.write_all(b"\n")
}

/// Write the history as a table for people.
pub fn write_history_table<W: Write>(mut w: W, h: &History) -> std::io::Result<()> {
    writeln!(w, "unit {}: {} record(s)", h.unit, h.entries.len())?;
    writeln!(
        w,
        "{:<20} {:<10} {:<9} {:>10} {:>9} {:>10} {:>10} {:>8}  drift",
        "started (UTC)", "outcome", "verdict", "V out", "reg %", "I limit", "I sc", "sc %"
    )?;
    for e in &h.entries {
        let g = |k| e.values.get(k);
        let eng = |v: Option<f64>, u: &str| {
            v.map(|x| crate::quantity::eng(x, u))
                .unwrap_or_else(|| "-".into())
        };
        writeln!(
            w,
            "{:<20} {:<10} {:<9} {:>10} {:>9} {:>10} {:>10} {:>8}  {}",
            e.started_utc.chars().take(19).collect::<String>(),
            e.outcome,
            e.verdict.map(|v| v.as_str()).unwrap_or("-"),
            eng(g(compare::KeyMetric::OutputVoltage), "V"),
            g(compare::KeyMetric::LoadRegulation)
                .map(|x| format!("{x:.3}"))
                .unwrap_or_else(|| "-".into()),
            eng(g(compare::KeyMetric::LimitCurrent), "A"),
            eng(g(compare::KeyMetric::ShortCircuitCurrent), "A"),
            g(compare::KeyMetric::ShortCircuitDrift)
                .map(|x| format!("{x:+.1}"))
                .unwrap_or_else(|| "-".into()),
            drift_words(h, &e.record)
        )?;
    }
    for f in &h.drift {
        writeln!(w, "DRIFT {}: {}", f.record, f.message)?;
    }
    for u in &h.unreadable {
        writeln!(w, "skipped {u}")?;
    }
    Ok(())
}
