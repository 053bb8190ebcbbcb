//! Line regulation: the output's change over the line sweep, referred to the regulation
//! reference voltage. Pure.

use super::fit::linear_fit;
use super::metrics::*;
use crate::measure::Quantity;
use crate::record::{Row, StepKind};

/// The (input voltage, output voltage) points of the line sweep: the measured input voltage,
/// else the programmed source voltage. The points [`line_regulation`] fits, and the plot draws.
pub fn line_points(rows: &[Row]) -> Vec<(f64, f64)> {
    rows.iter()
        .filter(|r| r.step_kind == StepKind::LineSweep)
        .filter_map(|r| {
            let vin = r.value(Quantity::InputVoltage).or(r.source_volts)?;
            let vout = r.value(Quantity::OutputVoltage)?;
            Some((vin, vout))
        })
        .collect()
}

pub(super) fn line_regulation(
    rows: &[Row],
    opts: &AnalysisOptions,
    v_no_load: Option<f64>,
) -> Option<LineRegulation> {
    let pts = line_points(rows);
    let xs: Vec<f64> = pts.iter().map(|p| p.0).collect();
    let ys: Vec<f64> = pts.iter().map(|p| p.1).collect();
    let fit = linear_fit(&xs, &ys)?;
    let lo = xs.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (reference, vref) = match (opts.nominal_voltage, v_no_load) {
        (Some(v), _) => (RegulationReference::Nominal, v),
        (None, Some(v)) => (RegulationReference::NoLoad, v),
        (None, None) => (
            RegulationReference::LineSweepMean,
            ys.iter().sum::<f64>() / ys.len() as f64,
        ),
    };
    if vref == 0.0 {
        return None;
    }
    let delta = fit.slope * (hi - lo);
    Some(LineRegulation {
        input_low: lo,
        input_high: hi,
        delta_output: delta,
        percent: delta / vref * 100.0,
        percent_per_volt: fit.slope / vref * 100.0,
        reference,
        reference_voltage: vref,
        points: pts.len(),
    })
}
