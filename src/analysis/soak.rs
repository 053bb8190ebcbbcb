//! Soak metrics: how far the output moved while the load was held, and how much the unit's
//! temperature rose. Pure.

use super::metrics::Soak;
use crate::measure::Quantity;
use crate::record::{Flag, Row, StepKind};

/// One soak reading: time since the run started, output voltage and temperature (either
/// may be missing).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SoakPoint {
    pub elapsed_s: f64,
    pub voltage: Option<f64>,
    pub temperature: Option<f64>,
}

/// The soak readings in order, without those that tripped an interlock (a stop, not a
/// reading of the held unit): what [`soak`] measures and the plot draws.
pub fn soak_series(rows: &[Row]) -> Vec<SoakPoint> {
    rows.iter()
        .filter(|r| r.step_kind == StepKind::Soak && !r.has_flag(Flag::Interlock))
        .map(|r| SoakPoint {
            elapsed_s: r.elapsed_s,
            voltage: r.value(Quantity::OutputVoltage),
            temperature: r.value(Quantity::Temperature),
        })
        .collect()
}

/// The output's drift and the temperature rise over the soak rows (first reading to last;
/// rise from the first reading to the highest). `None` without two soak rows with an output
/// voltage.
pub(super) fn soak(rows: &[Row]) -> Option<Soak> {
    let series = soak_series(rows);
    let volts: Vec<(f64, f64)> = series
        .iter()
        .filter_map(|p| Some((p.elapsed_s, p.voltage?)))
        .filter(|(_, v)| v.is_finite())
        .collect();
    if volts.len() < 2 {
        return None;
    }
    let (t0, v0) = volts[0];
    let (t1, v1) = volts[volts.len() - 1];
    let temps: Vec<f64> = series
        .iter()
        .filter_map(|p| p.temperature)
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
