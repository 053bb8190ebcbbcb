//! Short-circuit metrics: the dwell series, the current over the dwell with its drift and a
//! fitted first-order time constant, and the foldback ratio. Pure.

use super::fit::fit_exponential;
use super::metrics::*;
use crate::measure::Quantity;
use crate::record::{Flag, Row, StepKind};

/// Output voltage, as a fraction of the regulated output, below which a short-circuit row
/// counts as shorted (10 %: a project choice well above the drop across leads and load).
pub const SHORTED_FRACTION: f64 = 0.1;

/// Short-circuit rows of the dwell as (t from the first shorted reading, current).
pub fn dwell_series(rows: &[Row]) -> Vec<(f64, f64)> {
    let sc: Vec<&Row> = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::ShortCircuit && !r.has_flag(Flag::Recovery))
        .collect();
    let start = sc
        .iter()
        .position(|r| r.has_flag(Flag::DwellStart))
        .unwrap_or(0);
    let end = sc
        .iter()
        .rposition(|r| r.has_flag(Flag::DwellEnd))
        .unwrap_or(sc.len().saturating_sub(1));
    if sc.is_empty() || end < start {
        return Vec::new();
    }
    // A reading flagged at the start of the dwell can straddle the moment the short is
    // applied and still show the regulated output: keep only rows whose output is actually
    // shorted (below SHORTED_FRACTION of the highest load-sweep voltage), or whose voltage
    // was not measured.
    let v_max = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::LoadSweep)
        .filter_map(|r| r.value(Quantity::OutputVoltage))
        .filter(|v| v.is_finite())
        .fold(f64::NEG_INFINITY, f64::max);
    let shorted = |r: &Row| match r.value(Quantity::OutputVoltage) {
        Some(v) if v_max > 0.0 => v < SHORTED_FRACTION * v_max,
        _ => true,
    };
    let pts: Vec<(f64, f64)> = sc[start..=end]
        .iter()
        .filter(|r| shorted(r))
        .filter_map(|r| Some((r.elapsed_s, r.value(Quantity::OutputCurrent)?)))
        .filter(|(t, i)| t.is_finite() && i.is_finite())
        .collect();
    let t0 = pts.first().map(|p| p.0).unwrap_or(0.0);
    pts.into_iter().map(|(t, i)| (t - t0, i)).collect()
}

pub(super) fn short_circuit(rows: &[Row], threshold: Option<f64>) -> Option<ShortCircuit> {
    let pts = dwell_series(rows);
    let (first, last) = (*pts.first()?, *pts.last()?);
    let dwell = last.0 - first.0;
    let drift_a_per_s = if dwell > 0.0 {
        (last.1 - first.1) / dwell
    } else {
        0.0
    };
    let drift_percent = if first.1 != 0.0 {
        (last.1 - first.1) / first.1 * 100.0
    } else {
        0.0
    };
    let ts: Vec<f64> = pts.iter().map(|p| p.0).collect();
    let is: Vec<f64> = pts.iter().map(|p| p.1).collect();
    let peak_temperature = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::ShortCircuit && !r.has_flag(Flag::Recovery))
        .filter_map(|r| r.value(Quantity::Temperature))
        .reduce(f64::max);
    let recovery_voltage = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::ShortCircuit && r.has_flag(Flag::Recovery))
        .filter_map(|r| r.value(Quantity::OutputVoltage))
        .next_back();
    let recovered = recovery_voltage.and_then(|v| threshold.map(|thr| v >= thr));
    Some(ShortCircuit {
        start_current: first.1,
        end_current: last.1,
        dwell_s: dwell,
        drift_a_per_s,
        drift_percent,
        time_constant: fit_exponential(&ts, &is),
        peak_temperature,
        recovered,
        recovery_voltage,
        recovery_threshold: threshold,
        points: pts.len(),
    })
}
