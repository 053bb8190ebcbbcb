//! The index's row type and its error, shared by the folder scan and the database.

use super::prejudged::Prejudged;
use crate::analysis::Metrics;
use crate::compare::{HistoryEntry, Judging, KeyValues, Verdict};
use crate::record::{Outcome, RecordError, RecordState};
use crate::station::FloorResult;
use std::path::{Path, PathBuf};

/// An index problem, saying what to check.
#[derive(Debug, thiserror::Error)]
pub enum IndexError {
    #[error("{path}: the records index cannot be used: {source} (delete it and run `regulus index --rebuild --records {records}`)", records = .path.parent().map(|p| p.display().to_string()).unwrap_or_default())]
    Sqlite {
        path: PathBuf,
        #[source]
        source: rusqlite::Error,
    },
    #[error("{0}: not a record folder (expected <records>/<unit>/<run>)")]
    NotARecord(PathBuf),
    #[error(transparent)]
    Record(Box<RecordError>),
    #[error("{path}: cannot list the records folder: {source}")]
    List {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
}

/// One indexed run.
#[derive(Debug, Clone, PartialEq)]
pub struct IndexedRun {
    pub unit: String,
    pub folder: String,
    pub station: Option<String>,
    pub operator: Option<String>,
    pub design_name: String,
    pub design_sha256: String,
    pub plan_name: String,
    pub started_utc: String,
    pub ended_utc: Option<String>,
    /// run.json's outcome word (`incomplete` for a run cut short).
    pub outcome: String,
    /// `finished`, `running` or `incomplete`.
    pub state: String,
    pub verdict: Option<Verdict>,
    pub result: FloorResult,
    pub rows: i64,
    pub values: KeyValues,
    /// The summary's full metrics as JSON, when the run has a summary.
    pub metrics_json: Option<String>,
    /// [`Judging`] as JSON: present only for a run whose summary says what its plan promised
    /// (its metrics were then analysed against the record's own design).
    pub judging_json: Option<String>,
    /// The same metrics without their notes, compact (postcard): what `compare --index`
    /// reads for every run.
    pub metrics_bin: Option<Vec<u8>>,
    /// What the run's judgement against its own design was made under
    /// ([`super::prejudged_key`]: the design's content hash, tool version, index schema).
    pub prejudged_key: Option<String>,
    /// That judgement before the one rule ([`Prejudged`], compact).
    pub prejudged_bin: Option<Vec<u8>>,
    pub run_mtime: i64,
    pub summary_mtime: i64,
}

impl IndexedRun {
    /// The run as a history entry.
    pub fn history_entry(&self) -> HistoryEntry {
        HistoryEntry {
            record: self.folder.clone(),
            started_utc: self.started_utc.clone(),
            outcome: self.outcome.clone(),
            verdict: self.verdict,
            values: self.values.clone(),
        }
    }

    /// run.json's outcome and the record's state, as indexed.
    pub fn record_outcome(&self) -> (Outcome, RecordState) {
        IndexedRun::outcome_of(&self.outcome, &self.state)
    }

    /// The outcome and state from their indexed words.
    pub fn outcome_of(outcome: &str, state: &str) -> (Outcome, RecordState) {
        RecordState::from_words(outcome, state)
    }

    /// The summary's full metrics, when the run has them.
    pub fn metrics(&self) -> Option<Metrics> {
        serde_json::from_str(self.metrics_json.as_deref()?).ok()
    }

    /// The record folder under `records`.
    pub fn dir(&self, records: &Path) -> PathBuf {
        records.join(&self.unit).join(&self.folder)
    }
}

/// One indexed run as `compare --index` re-judges it.
#[derive(Debug, Clone, PartialEq)]
pub struct JudgingRow {
    pub unit: String,
    pub folder: String,
    pub started_utc: String,
    pub design_sha256: String,
    pub outcome: Outcome,
    pub state: RecordState,
    /// `None` for a run without a summary: it is re-judged from its folder. Without its
    /// notes unless a promised metric is missing (the notes say why).
    pub metrics: Option<Box<Metrics>>,
    /// `None` for a run whose summary does not say what its plan promised.
    pub judging: Option<Judging>,
    /// The run judged against the design asked about before the one rule, when the index
    /// holds that (metrics and judging are then not read).
    pub prejudged: Option<Prejudged>,
}

/// A run's metrics for re-judging: unit, record folder, outcome, state, metrics.
pub type MetricsRow = (String, String, Outcome, RecordState, Metrics);
