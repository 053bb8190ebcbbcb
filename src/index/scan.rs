//! Reading one record folder into an index row: run.json, the record's state, the station
//! stamp and, when present, summary.json (metrics and verdict, derived from the readings).
//! Reads only.

use super::prejudged::{prejudged_key, Expectations, Prejudged};
use super::types::{IndexError, IndexedRun};
use crate::analysis::Metrics;
use crate::compare::{KeyValues, Verdict};
use crate::floor::floor_result;
use crate::record::{self, RecordState};
use crate::station::read_station_stamp;
use serde::Deserialize;
use std::path::Path;

#[derive(Deserialize)]
struct SummaryPart {
    metrics: Metrics,
    verdict: Option<Verdict>,
    #[serde(default)]
    settings: Option<SettingsPart>,
    #[serde(default)]
    comparison: Option<ComparisonPart>,
}

#[derive(Deserialize)]
struct SettingsPart {
    knee_drop: f64,
    regulation_span: f64,
    load_regulation_reference: crate::analysis::RegulationReference,
}

impl SettingsPart {
    fn are_defaults(&self) -> bool {
        let d = crate::analysis::AnalysisOptions::default();
        self.knee_drop == d.knee_drop
            && self.regulation_span == d.regulation_span
            && self.load_regulation_reference == d.reference
    }
}

#[derive(Deserialize)]
struct ComparisonPart {
    verdict: Verdict,
}

pub(super) fn mtime_ns(path: &Path) -> i64 {
    std::fs::metadata(path)
        .and_then(|m| m.modified())
        .ok()
        .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
        .map(|d| d.as_nanos() as i64)
        .unwrap_or(0)
}

/// Read a record folder `<root>/<unit>/<folder>` into an index row; `designs` keeps the
/// expectations of the designs met so far (see [`Prejudged`]).
pub(super) fn scan_record(
    dir: &Path,
    designs: &mut Expectations,
) -> Result<IndexedRun, IndexError> {
    let info = record::read_info(dir).map_err(|e| IndexError::Record(Box::new(e)))?;
    let state = record::record_state(dir, &info);
    let folder = dir
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .ok_or_else(|| IndexError::NotARecord(dir.to_path_buf()))?;
    let summary: Option<SummaryPart> = std::fs::read_to_string(dir.join("summary.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok());
    let (values, metrics_json, comparison) = match &summary {
        Some(s) => (
            KeyValues::from_metrics(&s.metrics),
            serde_json::to_string(&s.metrics).ok(),
            s.comparison.as_ref().map(|c| c.verdict),
        ),
        // No summary (its derived files were never written): analyse the readings with the
        // default settings, as the folder history does.
        None => match record::read_rows(&dir.join(record::READINGS_FILE)) {
            Ok(rows) => {
                let m =
                    crate::analysis::analyse(&rows, &crate::analysis::AnalysisOptions::default());
                (
                    KeyValues::from_metrics(&m),
                    serde_json::to_string(&m).ok(),
                    None,
                )
            }
            Err(_) => (KeyValues(Vec::new()), None, None),
        },
    };
    // The verdict as the summary judged it (summary.json applies the same finished rule);
    // without a summary, only what run.json alone decides.
    let verdict = match &summary {
        Some(s) => s.verdict,
        None => crate::compare::record_verdict(info.outcome, None, None),
    };
    let result = match &summary {
        Some(s) => crate::floor::from_verdict(s.verdict),
        None => floor_result(info.outcome, Some(state), comparison.or(verdict)),
    };
    // What re-judging without the files needs, only where it decides exactly as the folder
    // would: a summary analysed with the default settings (its metrics then are those the
    // folder's readings give against the record's own design) and a plan snapshot that reads
    // (the promised metrics and the plan's limits come from it, as they do from the folder).
    let judging = summary
        .as_ref()
        .filter(|s| s.settings.as_ref().is_some_and(SettingsPart::are_defaults))
        .and_then(|_| crate::plan::snapshot_outline(dir))
        .map(|steps| crate::floor::judging_of(&steps, info.reason.clone()));
    // The run judged against its own design snapshot, when the snapshot is the design run.json
    // names (same content hash): what `compare --index` against that design then needs.
    let prejudged = match (&summary, &judging) {
        (Some(s), Some(j)) => designs
            .of_record(dir)
            .filter(|(sha, _)| *sha == info.design.sha256)
            .and_then(|(sha, exp)| {
                let bin = Prejudged::make(&s.metrics, exp, j).encode()?;
                Some((prejudged_key(&sha), bin))
            }),
        _ => None,
    };
    let stamp = read_station_stamp(dir);
    let state_word = state.as_str();
    let mut outcome = info.outcome.as_str().to_string();
    if state == RecordState::Incomplete {
        outcome = "incomplete".into();
    }
    Ok(IndexedRun {
        unit: info.unit.clone(),
        folder,
        station: stamp.as_ref().map(|s| s.station.clone()),
        operator: info
            .operator
            .clone()
            .or_else(|| stamp.and_then(|s| s.operator)),
        design_name: info.design.name.clone(),
        design_sha256: info.design.sha256.clone(),
        plan_name: info.plan_name.clone(),
        started_utc: info.started_utc.clone(),
        ended_utc: info.ended_utc.clone(),
        outcome,
        state: state_word.to_string(),
        verdict,
        result,
        rows: info.rows as i64,
        values,
        metrics_json,
        judging_json: judging.and_then(|j| serde_json::to_string(&j).ok()),
        metrics_bin: summary.as_ref().and_then(|s| compact(&s.metrics)),
        prejudged_key: prejudged.as_ref().map(|p| p.0.clone()),
        prejudged_bin: prejudged.map(|p| p.1),
        run_mtime: mtime_ns(&dir.join(record::RUN_FILE)),
        summary_mtime: mtime_ns(&dir.join("summary.json")),
    })
}

/// Metrics without their notes, compact: what re-judging reads for every run.
pub(super) fn compact(m: &Metrics) -> Option<Vec<u8>> {
    let m = Metrics {
        notes: Vec::new(),
        ..m.clone()
    };
    postcard::to_allocvec(&m).ok()
}
