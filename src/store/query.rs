//! Reading runs back from the store across stations: a unit's runs for its history, or a
//! design's runs for the dashboard and compare, with their key metrics.

use super::error::{sql, StoreError};
use crate::compare::{HistoryEntry, KeyMetric, KeyValues, Verdict};
use crate::station::FloorResult;
use tokio_postgres::Client;

/// One run as the store holds it.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreRun {
    pub run_id: String,
    pub station: String,
    pub unit: String,
    pub folder: String,
    pub plan_name: String,
    pub design_name: String,
    pub design_sha256: String,
    /// RFC 3339 UTC with milliseconds.
    pub started_utc: String,
    pub outcome: String,
    pub record_state: String,
    pub verdict: Option<Verdict>,
    pub result: FloorResult,
    pub readings: i64,
    pub values: KeyValues,
}

impl StoreRun {
    pub fn history_entry(&self) -> HistoryEntry {
        let outcome = if self.record_state == "incomplete" {
            "incomplete".to_string()
        } else {
            self.outcome.clone()
        };
        HistoryEntry {
            record: self.folder.clone(),
            started_utc: self.started_utc.clone(),
            outcome,
            verdict: self.verdict,
            values: self.values.clone(),
        }
    }
}

/// Runs of a unit (`unit`) and/or a design (`design`: name or content hash), oldest first.
pub async fn store_runs(
    client: &Client,
    unit: Option<&str>,
    design: Option<&str>,
) -> Result<Vec<StoreRun>, StoreError> {
    let mut metric_cols = String::new();
    for k in KeyMetric::ALL {
        metric_cols.push_str(&format!(
            ", (SELECT value FROM metric m WHERE m.run_id = r.run_id AND m.name = '{}')",
            k.as_str()
        ));
    }
    let q = format!(
        "SELECT r.run_id, r.station_id, r.unit_serial, r.folder, r.plan_name, d.name, \
         r.design_sha256, to_char(r.started_utc AT TIME ZONE 'UTC', \
         'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"'), r.outcome, r.record_state, r.verdict, r.result, \
         (SELECT count(*) FROM reading g WHERE g.run_id = r.run_id){metric_cols} \
         FROM run r JOIN design d ON d.sha256 = r.design_sha256 \
         WHERE ($1::text IS NULL OR r.unit_serial = $1) \
         AND ($2::text IS NULL OR d.name = $2 OR d.sha256 = $2) \
         ORDER BY r.started_utc, r.run_id"
    );
    let rows = client
        .query(&q, &[&unit, &design])
        .await
        .map_err(sql("read runs"))?;
    Ok(rows
        .iter()
        .map(|r| {
            let verdict: Option<String> = r.get(10);
            let result: String = r.get(11);
            let values = KeyMetric::ALL
                .iter()
                .enumerate()
                .map(|(i, k)| (*k, r.get::<_, Option<f64>>(13 + i)))
                .collect();
            StoreRun {
                run_id: r.get(0),
                station: r.get(1),
                unit: r.get(2),
                folder: r.get(3),
                plan_name: r.get(4),
                design_name: r.get(5),
                design_sha256: r.get(6),
                started_utc: r.get(7),
                outcome: r.get(8),
                record_state: r.get(9),
                verdict: verdict.as_deref().and_then(|v| {
                    [
                        Verdict::Pass,
                        Verdict::Marginal,
                        Verdict::Incomplete,
                        Verdict::Fail,
                        Verdict::Error,
                    ]
                    .into_iter()
                    .find(|x| x.as_str() == v)
                }),
                result: FloorResult::parse(&result).unwrap_or(FloorResult::Incomplete),
                readings: r.get(12),
                values: KeyValues(values),
            }
        })
        .collect())
}

/// The design file's bytes the store keeps for a content hash.
pub async fn design_content(client: &Client, sha256: &str) -> Result<Option<Vec<u8>>, StoreError> {
    let row = client
        .query_opt("SELECT content FROM design WHERE sha256 = $1", &[&sha256])
        .await
        .map_err(sql("read a design"))?;
    Ok(row.and_then(|r| r.get::<_, Option<Vec<u8>>>(0)))
}

/// One run from the store, for judging against a design without its files.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreMetrics {
    pub run_id: String,
    pub unit: String,
    pub started_utc: String,
    pub design_sha256: String,
    pub outcome: crate::record::Outcome,
    pub state: crate::record::RecordState,
    /// The metrics of its summary; `None` when the store holds no summary for it.
    pub metrics: Option<crate::analysis::Metrics>,
    /// What its plan snapshot promised and limited, and its reason; `None` when the store
    /// holds no plan snapshot that reads, or the summary was analysed with settings other
    /// than the defaults.
    pub judging: Option<crate::compare::Judging>,
}

/// Every run (or one unit's), oldest first, with its summary's metrics and what its plan
/// snapshot promised.
pub async fn store_metrics(
    client: &Client,
    unit: Option<&str>,
) -> Result<Vec<StoreMetrics>, StoreError> {
    use crate::record::RecordState;
    let rows = client
        .query(
            "SELECT r.run_id, r.unit_serial, \
             to_char(r.started_utc AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"'), \
             r.design_sha256, r.outcome, r.record_state, r.reason, s.content, p.content \
             FROM run r \
             LEFT JOIN artifact s ON s.run_id = r.run_id AND s.name = 'summary.json' \
             LEFT JOIN artifact p ON p.run_id = r.run_id AND p.name = $2 \
             WHERE ($1::text IS NULL OR r.unit_serial = $1) ORDER BY r.started_utc, r.run_id",
            &[&unit, &crate::record::PLAN_SNAPSHOT],
        )
        .await
        .map_err(sql("read run summaries"))?;
    Ok(rows
        .iter()
        .map(|r| {
            let (outcome, state) =
                RecordState::from_words(&r.get::<_, String>(4), &r.get::<_, String>(5));
            let summary: Option<serde_json::Value> = r
                .get::<_, Option<Vec<u8>>>(7)
                .and_then(|c| serde_json::from_slice(&c).ok());
            let metrics = summary
                .as_ref()
                .and_then(|v| serde_json::from_value(v.get("metrics")?.clone()).ok());
            let defaults = summary
                .as_ref()
                .and_then(|v| v.get("settings"))
                .is_some_and(settings_are_defaults);
            let steps = r
                .get::<_, Option<Vec<u8>>>(8)
                .and_then(|c| String::from_utf8(c).ok())
                .and_then(|t| crate::plan::outline(&t, crate::record::PLAN_SNAPSHOT).ok());
            let judging = steps
                .filter(|_| defaults)
                .map(|s| crate::floor::judging_of(&s, r.get(6)));
            StoreMetrics {
                run_id: r.get(0),
                unit: r.get(1),
                started_utc: r.get(2),
                design_sha256: r.get(3),
                outcome,
                state,
                metrics,
                judging,
            }
        })
        .collect())
}

/// True when a summary's `settings` are the default analysis settings.
fn settings_are_defaults(v: &serde_json::Value) -> bool {
    let d = crate::analysis::AnalysisOptions::default();
    let reference = serde_json::to_value(d.reference).ok();
    v.get("knee_drop").and_then(|x| x.as_f64()) == Some(d.knee_drop)
        && v.get("regulation_span").and_then(|x| x.as_f64()) == Some(d.regulation_span)
        && v.get("load_regulation_reference").cloned() == reference
}
