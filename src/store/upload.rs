//! Uploading one record folder into the store, in one transaction: the station, the design
//! (by content hash, with the design file's bytes), the unit, the run (its id unique across
//! stations; a run already in the store is left alone, so uploading twice changes nothing),
//! its instruments, every reading row by bulk COPY, its key metrics, its verdicts and its small
//! files as artifacts. A sync killed part-way leaves nothing behind: the server rolls the
//! transaction back.

use super::error::{sql, StoreError};
use crate::compare::{KeyMetric, KeyValues};
use crate::measure::Quantity;
use crate::record::{self, Cell, RecordState, Row};
use crate::station::read_station_stamp;
use bytes::Bytes;
use futures_util::SinkExt;
use sha2::{Digest, Sha256};
use std::fmt::Write as _;
use std::path::Path;
use tokio_postgres::Client;

/// What an upload did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Uploaded {
    pub run_id: String,
    /// Reading rows copied (0 when the run was already in the store).
    pub readings: u64,
    /// The run was already in the store (nothing was written).
    pub already: bool,
}

/// Files of a record kept in the store as artifacts (those that exist).
const ARTIFACTS: [&str; 7] = [
    record::RUN_FILE,
    "summary.json",
    record::DESIGN_SNAPSHOT,
    record::BENCH_SNAPSHOT,
    record::PLAN_SNAPSHOT,
    crate::station::STATION_STAMP,
    "certificate.html",
];

/// The id of a run across stations: `<station>/<unit>/<record folder>`.
pub fn run_id(station: &str, unit: &str, folder: &str) -> String {
    format!("{station}/{unit}/{folder}")
}

/// Upload the record in `dir`. `station` names the station when the record carries no
/// station stamp. A record still being written is refused (it is not finished).
pub async fn upload_record(
    client: &mut Client,
    dir: &Path,
    station: Option<&str>,
) -> Result<Uploaded, StoreError> {
    let bad = |message: String| StoreError::Record {
        path: dir.to_path_buf(),
        message,
    };
    let info = record::read_info(dir).map_err(|e| bad(e.to_string()))?;
    let state = record::record_state(dir, &info);
    if state == RecordState::Running {
        return Err(bad(
            "the run is still being written; sync it once it finishes".into(),
        ));
    }
    let rows =
        record::read_rows(&dir.join(record::READINGS_FILE)).map_err(|e| bad(e.to_string()))?;
    let stamp = read_station_stamp(dir);
    let station_id = stamp
        .as_ref()
        .map(|s| s.station.clone())
        .or_else(|| station.map(str::to_string))
        .ok_or_else(|| {
            bad("the record has no station stamp (station.json): give sync a station file".into())
        })?;
    let folder = dir
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .ok_or_else(|| bad("not a record folder".into()))?;
    let id = run_id(&station_id, &info.unit, &folder);

    let summary: Option<serde_json::Value> = std::fs::read_to_string(dir.join("summary.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok());
    let metrics: Option<crate::analysis::Metrics> = summary
        .as_ref()
        .and_then(|s| s.get("metrics"))
        .and_then(|m| serde_json::from_value(m.clone()).ok());
    let verdict = summary
        .as_ref()
        .and_then(|s| s.get("verdict"))
        .and_then(|v| serde_json::from_value::<Option<crate::compare::Verdict>>(v.clone()).ok())
        .flatten();
    let comparison = summary
        .as_ref()
        .and_then(|s| s.get("comparison"))
        .and_then(|c| serde_json::from_value::<crate::compare::Comparison>(c.clone()).ok());
    let result = match &summary {
        Some(_) => crate::floor::from_verdict(verdict),
        None => crate::floor::floor_result(
            info.outcome,
            Some(state),
            comparison.as_ref().map(|c| c.verdict),
        ),
    };
    let state_word = state.as_str();
    let design_bytes = std::fs::read(dir.join(record::DESIGN_SNAPSHOT)).ok();
    let revision = design_bytes
        .as_deref()
        .and_then(|b| std::str::from_utf8(b).ok())
        .and_then(crate::station::design_revision);

    let tx = client
        .transaction()
        .await
        .map_err(sql("start the upload"))?;
    tx.execute(
        "INSERT INTO station (id) VALUES ($1) ON CONFLICT DO NOTHING",
        &[&station_id],
    )
    .await
    .map_err(sql("add the station"))?;
    tx.execute(
        "INSERT INTO design (sha256, name, revision, content) VALUES ($1, $2, $3, $4) \
         ON CONFLICT DO NOTHING",
        &[
            &info.design.sha256,
            &info.design.name,
            &revision,
            &design_bytes,
        ],
    )
    .await
    .map_err(sql("add the design"))?;
    tx.execute(
        "INSERT INTO unit (serial) VALUES ($1) ON CONFLICT DO NOTHING",
        &[&info.unit],
    )
    .await
    .map_err(sql("add the unit"))?;
    let outcome_word = serde_json::to_value(info.outcome)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default();
    let row_count = rows.len() as i64;
    let inserted = tx
        .execute(
            "INSERT INTO run (run_id, station_id, unit_serial, design_sha256, folder, plan_name, \
             started_utc, ended_utc, outcome, record_state, verdict, result, operator, reason, \
             row_count, tool_version) VALUES ($1, $2, $3, $4, $5, $6, $7::text::timestamptz, \
             $8::text::timestamptz, $9, $10, $11, $12, $13, $14, $15, $16) \
             ON CONFLICT (run_id) DO NOTHING",
            &[
                &id,
                &station_id,
                &info.unit,
                &info.design.sha256,
                &folder,
                &info.plan_name,
                &info.started_utc,
                &info.ended_utc,
                &outcome_word,
                &state_word,
                &verdict.map(|v| v.as_str()),
                &result.as_str(),
                &info.operator,
                &info.reason,
                &row_count,
                &info.tool_version,
            ],
        )
        .await
        .map_err(sql("add the run"))?;
    if inserted == 0 {
        tx.rollback().await.map_err(sql("end the upload"))?;
        return Ok(Uploaded {
            run_id: id,
            readings: 0,
            already: true,
        });
    }

    // Instruments, in a fixed order so that concurrent uploads take row locks alike.
    let mut instruments = info.instruments.clone();
    instruments.sort_by(|a, b| a.identity.cmp(&b.identity).then(a.name.cmp(&b.name)));
    for inst in &instruments {
        let instrument_id: Option<i64> = match &inst.identity {
            Some(identity) => Some(
                tx.query_one(
                    "INSERT INTO instrument (identity) VALUES ($1) ON CONFLICT (identity) \
                     DO UPDATE SET identity = EXCLUDED.identity RETURNING id",
                    &[identity],
                )
                .await
                .map_err(sql("add an instrument"))?
                .get(0),
            ),
            None => None,
        };
        let roles: Vec<&str> = inst.roles.iter().map(|r| r.as_str()).collect();
        tx.execute(
            "INSERT INTO run_instrument (run_id, name, roles, link, instrument_id) \
             VALUES ($1, $2, $3, $4, $5)",
            &[
                &id,
                &inst.name,
                &roles.join(","),
                &inst.link,
                &instrument_id,
            ],
        )
        .await
        .map_err(sql("add a run's instrument"))?;
    }

    let columns = reading_columns();
    let sink = tx
        .copy_in(&format!("COPY reading ({columns}) FROM STDIN"))
        .await
        .map_err(sql("start copying the readings"))?;
    futures_util::pin_mut!(sink);
    let mut buf = String::with_capacity(1024 * 1024 + 512);
    for (seq, row) in rows.iter().enumerate() {
        copy_line(&mut buf, &id, seq, row);
        if buf.len() >= 1024 * 1024 {
            // Queue the chunk without waiting for the server to take it (finish flushes).
            let chunk = Bytes::from(std::mem::take(&mut buf));
            sink.feed(chunk).await.map_err(sql("copy the readings"))?;
        }
    }
    if !buf.is_empty() {
        sink.send(Bytes::from(buf))
            .await
            .map_err(sql("copy the readings"))?;
    }
    let copied = sink
        .finish()
        .await
        .map_err(sql("finish copying the readings"))?;

    if let Some(m) = &metrics {
        let kv = KeyValues::from_metrics(m);
        for k in KeyMetric::ALL {
            tx.execute(
                "INSERT INTO metric (run_id, name, value) VALUES ($1, $2, $3)",
                &[&id, &k.as_str(), &kv.get(k)],
            )
            .await
            .map_err(sql("add a metric"))?;
        }
    }
    if let Some(c) = &comparison {
        for ch in &c.checks {
            tx.execute(
                "INSERT INTO verdict (run_id, metric, measured, lower, upper, unit, verdict) \
                 VALUES ($1, $2, $3, $4, $5, $6, $7)",
                &[
                    &id,
                    &ch.metric,
                    &ch.measured,
                    &ch.worst_case.min,
                    &ch.worst_case.max,
                    &ch.unit,
                    &ch.verdict.as_str(),
                ],
            )
            .await
            .map_err(sql("add a verdict"))?;
        }
    }
    for name in ARTIFACTS {
        let Ok(content) = std::fs::read(dir.join(name)) else {
            continue;
        };
        let hash = format!("{:x}", Sha256::digest(&content));
        tx.execute(
            "INSERT INTO artifact (run_id, name, sha256, content) VALUES ($1, $2, $3, $4)",
            &[&id, &name, &hash, &content],
        )
        .await
        .map_err(sql("add an artifact"))?;
    }
    tx.commit().await.map_err(sql("commit the upload"))?;
    Ok(Uploaded {
        run_id: id,
        readings: copied,
        already: false,
    })
}

/// The reading table's columns in COPY order.
fn reading_columns() -> String {
    let mut c = String::from(
        "run_id, seq, utc, elapsed_s, step, step_kind, point, load_mode, setpoint, \
         source_volts, samples",
    );
    for q in Quantity::ALL {
        let _ = write!(c, ", {0}, {0}_spread", q.as_str());
    }
    c.push_str(", flags");
    c
}

/// Text for COPY's text format: backslash, tab, newline and carriage return escaped.
fn push_text(buf: &mut String, s: &str) {
    for ch in s.chars() {
        match ch {
            '\\' => buf.push_str("\\\\"),
            '\t' => buf.push_str("\\t"),
            '\n' => buf.push_str("\\n"),
            '\r' => buf.push_str("\\r"),
            _ => buf.push(ch),
        }
    }
}

fn push_num(buf: &mut String, v: Option<f64>) {
    match v {
        None => buf.push_str("\\N"),
        Some(x) if x.is_nan() => buf.push_str("NaN"),
        Some(x) if x == f64::INFINITY => buf.push_str("Infinity"),
        Some(x) if x == f64::NEG_INFINITY => buf.push_str("-Infinity"),
        // Rust's shortest round-trip form: the value reads back bit for bit.
        Some(x) => {
            let _ = write!(buf, "{x:?}");
        }
    }
}

/// One COPY line of a reading row. An overrange cell is stored as +Infinity (its spread as
/// NULL), beside the row's `overrange` flag.
pub(super) fn copy_line(buf: &mut String, run_id: &str, seq: usize, r: &Row) {
    push_text(buf, run_id);
    let _ = write!(buf, "\t{seq}\t");
    push_text(buf, &r.utc);
    buf.push('\t');
    push_num(buf, Some(r.elapsed_s));
    let _ = write!(
        buf,
        "\t{}\t{}\t{}\t{}\t",
        r.step,
        r.step_kind.as_str(),
        r.point,
        r.load_mode.as_str()
    );
    push_num(buf, r.setpoint);
    buf.push('\t');
    push_num(buf, r.source_volts);
    let _ = write!(buf, "\t{}", r.samples);
    for q in Quantity::ALL {
        let (mean, spread) = match r.cell(q) {
            None => (None, None),
            Some(Cell::Overrange) => (Some(f64::INFINITY), None),
            Some(Cell::Value { mean, spread }) => (Some(mean), Some(spread)),
        };
        buf.push('\t');
        push_num(buf, mean);
        buf.push('\t');
        push_num(buf, spread);
    }
    buf.push('\t');
    push_text(buf, &r.flags.join(";"));
    buf.push('\n');
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn copy_text_escapes_and_nulls() {
        // PostgreSQL COPY text format: tab-separated, \N for NULL, backslash escapes.
        let mut b = String::new();
        push_text(&mut b, "a\tb\\c\nd");
        assert_eq!(b, "a\\tb\\\\c\\nd");
        let mut b = String::new();
        push_num(&mut b, None);
        push_num(&mut b, Some(0.1));
        push_num(&mut b, Some(f64::INFINITY));
        assert_eq!(b, "\\N0.1Infinity");
        assert_eq!(reading_columns().split(", ").count(), 11 + 10 + 1);
    }
}
