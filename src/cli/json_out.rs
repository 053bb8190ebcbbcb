//! The `--json` forms of `regulus probe` and `regulus size`: one JSON object each, numbers in
//! SI units (seconds, amperes, ohms, watts), written to a generic writer so they can be
//! checked byte for byte. Holds no domain logic: it only lays out what the commands found.

use crate::bench::ProbeReport;
use crate::design::sizing::Choice;
use crate::design::Expectation;
use crate::measure::Reading;
use serde_json::{json, Value};
use std::io::Write;

/// The probe report as JSON: identities, one entry per role read, and whether any failed.
pub fn write_probe_json<W: Write>(mut w: W, r: &ProbeReport) -> std::io::Result<()> {
    let identities: Vec<Value> = r
        .identities
        .iter()
        .map(|(name, id)| json!({ "instrument": name, "identity": id }))
        .collect();
    let rows: Vec<Value> = r
        .rows
        .iter()
        .map(|row| {
            let (reading, round_trip, error) = match &row.outcome {
                Ok(Some((Reading::Value(v), t))) => (json!(v), json!(t.as_secs_f64()), Value::Null),
                Ok(Some((Reading::Overrange, t))) => {
                    (json!("overrange"), json!(t.as_secs_f64()), Value::Null)
                }
                Ok(None) => (Value::Null, Value::Null, Value::Null),
                Err(e) => (Value::Null, Value::Null, json!(e.to_string())),
            };
            json!({
                "instrument": row.instrument,
                "role": row.role.map(|r| r.as_str()),
                "link": row.link,
                "reading": reading,
                "round_trip_s": round_trip,
                "error": error,
            })
        })
        .collect();
    let v = json!({ "identities": identities, "rows": rows, "failed": r.failed() });
    serde_json::to_writer_pretty(&mut w, &v)?;
    writeln!(w)
}

/// What `regulus size` was asked for, in the JSON form.
pub struct SizeAsked<'a> {
    pub max_current_a: f64,
    pub margin_pct: f64,
    pub clamp: &'a str,
    pub stage: &'a str,
    pub series: String,
}

/// The sizing as JSON: the targets, the chosen parts and the resulting bands and ratings.
pub fn write_size_json<W: Write>(
    mut w: W,
    asked: &SizeAsked<'_>,
    choice: &Choice,
    e: &Expectation,
) -> std::io::Result<()> {
    let v = json!({
        "targets": {
            "max_current_a": asked.max_current_a,
            "margin_pct": asked.margin_pct,
            "target_limit_a": asked.max_current_a * (1.0 + asked.margin_pct / 100.0),
            "clamp": asked.clamp,
            "stage": asked.stage,
            "series": asked.series,
        },
        "sense_resistor": {
            "ideal_ohms": choice.ideal_sense_ohms,
            "ohms": choice.sense_ohms,
            "tolerance_pct": choice.sense_tolerance_pct,
        },
        "clamp_diodes": choice.diodes,
        "foldback_divider": choice.divider.map(|(top, bottom)| json!({
            "top_ohms": top,
            "bottom_ohms": bottom,
            "k": bottom / (top + bottom),
            "ideal_k": choice.ideal_k,
        })),
        "limit_current": e.limit_current,
        "short_circuit_current": e.short_circuit_current,
        "dissipation": {
            "sense_resistor": e.dissipation.get("sense_resistor"),
            "pass_device": e.dissipation.get("pass_device"),
        },
        "limit_below_rated_current": e.limit_current.worst_case.min < asked.max_current_a,
    });
    serde_json::to_writer_pretty(&mut w, &v)?;
    writeln!(w)
}
