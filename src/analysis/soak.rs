//! Soak metrics: how far the output moved while the load was held, and how much the unit's
//! temperature rose. Pure.

use super::metrics::Soak;
use crate::measure::Quantity;
use crate::record::{Flag, Row, StepKind};

/// The output's drift and the temperature rise over the soak rows (first reading to last;
/// rise from the first reading to the highest). `None` without two soak rows with an output
/// voltage.
pub(super) fn soak(rows: &[Row]) -> Option<Soak> {
    let soak: Vec<&Row> = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::Soak && !r.has_flag(Flag::Interlock))
        .collect();
    let volts: Vec<(f64, f64)> = soak
        .iter()
        .filter_map(|r| Some((r.elapsed_s, r.value(Quantity::OutputVoltage)?)))
        .filter(|(_, v)| v.is_finite())
        .collect();
    if volts.len() < 2 {
        return None;
    }
    let (t0, v0) = volts[0];
    let (t1, v1) = volts[volts.len() - 1];
    let temps: Vec<f64> = soak
        .iter()
        .filter_map(|r| r.value(Quantity::Temperature))
        .filter(|t| t.is_finite())
        .collect();
    let temperature_rise = temps
        .first()
        .map(|first| temps.iter().copied().fold(*first, f64::max) - first);
    Some(Soak {
        start_voltage: v0,
        end_voltage: v1,
        drift_v: v1 - v0,
        drift_percent: if v0 != 0.0 {
            (v1 - v0) / v0 * 100.0
        } else {
            0.0
        },
        duration_s: t1 - t0,
        temperature_rise,
        points: volts.len(),
    })
}
