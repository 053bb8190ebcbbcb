//! A unit's history: its dated records with key metrics and drift flags, as a table, CSV or
//! JSON. Only [`history`] reads the records folder.

use super::summary::*;
use crate::analysis::{self, AnalysisOptions, Metrics};
use crate::compare::{self, DriftFlag, HistoryEntry, Verdict};
use crate::record::{self, RecordState, RunInfo};
use serde::Serialize;
use std::io::Write;
use std::path::Path;

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

/// A unit's history: dated entries (oldest first) and the drift flags between them.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct History {
    pub unit: String,
    pub entries: Vec<HistoryEntry>,
    pub drift: Vec<DriftFlag>,
    /// Record folders that could not be read, with the reason.
    pub unreadable: Vec<String>,
    /// The plan each record ran, by record folder name (when known).
    #[serde(skip_serializing_if = "std::collections::BTreeMap::is_empty")]
    pub plans: std::collections::BTreeMap<String, String>,
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
        plans: Default::default(),
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
    let mut plans = std::collections::BTreeMap::new();
    for run in runs {
        let name = run
            .dir
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let result = match run.info {
            Ok(info) => entry_from_dir(&run.dir, &name, &info, opts).map(|mut e| {
                plans.insert(name.clone(), info.plan_name.clone());
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
    h.plans = plans;
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
        "{:<20} {:<14} {:<10} {:<9} {:>10} {:>9} {:>10} {:>10} {:>8}  drift",
        "started (UTC)", "plan", "outcome", "verdict", "V out", "reg %", "I limit", "I sc", "sc %"
    )?;
    for e in &h.entries {
        let g = |k| e.values.get(k);
        let eng = |v: Option<f64>, u: &str| {
            v.map(|x| crate::quantity::eng(x, u))
                .unwrap_or_else(|| "-".into())
        };
        writeln!(
            w,
            "{:<20} {:<14} {:<10} {:<9} {:>10} {:>9} {:>10} {:>10} {:>8}  {}",
            e.started_utc.chars().take(19).collect::<String>(),
            h.plans.get(&e.record).map(String::as_str).unwrap_or("-"),
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
