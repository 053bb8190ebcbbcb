//! The as-built bands a record is judged by, taken at the temperatures the record gives: the
//! cold band moved by the junction law to the pass junction at the knee and at the short, and
//! the observations the diagnosis fits, with the junction ranges they stand for. Pure.
use super::expectation::{DesignExpectation, ExpectedBand};
use crate::analysis::Metrics;

/// A band moved by the change the junction law gives between the design's ambient and the
/// temperatures a reading was taken at: the low edges by the smallest change, the high edges
/// by the largest, the nominal and mean by the estimate's.
fn moved(b: &ExpectedBand, (lo, hi): (f64, f64), est: f64) -> ExpectedBand {
    let mut m = *b;
    m.nominal += est;
    m.worst_case.min += lo;
    m.worst_case.max += hi;
    m.monte_carlo.mean += est;
    m.monte_carlo.p_low += lo;
    m.monte_carlo.p_high += hi;
    m
}

/// Temperatures in words: "48 degC" or "48 .. 61 degC".
fn span_words((lo, hi): (f64, f64)) -> String {
    if (hi - lo).abs() < 0.5 {
        format!("{lo:.0} degC")
    } else {
        format!("{lo:.0} .. {hi:.0} degC")
    }
}

/// Where the clamp parts sat while the pass device's case read `case` and dissipated `watts`:
/// at the design's ambient, or on the heatsink (between the case less P theta_cs and the case).
fn clamp_span(d: &crate::design::Design, ambient: f64, case: (f64, f64), watts: f64) -> (f64, f64) {
    match d.limit.clamp_mount {
        crate::design::ClampMount::Ambient => (ambient, ambient),
        crate::design::ClampMount::Heatsink => (
            (case.0 - watts * d.pass.theta_cs).max(ambient),
            case.1.max(ambient),
        ),
    }
}

/// Where an as-built band that did not move was taken: at the design's room and input.
pub(super) fn unmoved_basis(ambient_c: f64) -> String {
    format!(
        "as built: part tolerances at {} and the nominal input",
        crate::quantity::eng(ambient_c, "degC")
    )
}

/// A dissipation reading, finite and non-negative (none reads as 0 W).
fn watts(w: Option<f64>) -> f64 {
    w.filter(|w| w.is_finite()).unwrap_or(0.0).max(0.0)
}

/// Smallest change in `(lo, hi)` below which a band is not said to move (A).
const SHIFT_FLOOR_A: f64 = 1e-6;

/// The as-built band a knee reading is judged by, and the conditions it stands for. With a
/// case reading at the knee, the cold band moves to the pass junction between the case and
/// the case plus P theta_jc (thermal Ohm's law; common practice); without one, the band spans
/// a cold unit to its settled self-heated knee.
pub(super) fn knee_band(m: &Metrics, exp: &DesignExpectation) -> (ExpectedBand, Option<String>) {
    let (Some(d), Some(a)) = (exp.design.as_deref(), exp.as_built.as_ref()) else {
        return (exp.limit_current, None);
    };
    let room = crate::quantity::eng(a.ambient_c, "degC");
    let reading = m.knee_conditions.and_then(|k| {
        let case = k.case_temperature.filter(|t| t.is_finite())?;
        Some((case, watts(k.pass_watts)))
    });
    let Some((case, watts)) = reading else {
        let heats =
            a.limit_current_heated.worst_case.max - a.limit_current.worst_case.max > SHIFT_FLOOR_A;
        let basis = if heats {
            format!(
                "as built at {room}; no case reading at the knee, so from a cold unit to its \
                 settled self-heated knee (pass junction up to {:.0} degC)",
                a.knee_settled_junction_c
            )
        } else {
            unmoved_basis(a.ambient_c)
        };
        return (exp.limit_current, Some(basis));
    };
    let pass = (case, case + watts * d.pass.theta_jc);
    let clamp = clamp_span(d, a.ambient_c, (case, case), watts);
    let vset = a.vout.nominal;
    let range = crate::design::limit_shift_range(d, vset, pass, clamp);
    if range.0.abs().max(range.1.abs()) <= SHIFT_FLOOR_A {
        return (a.limit_current, Some(unmoved_basis(a.ambient_c)));
    }
    let est = crate::design::limit_shift(d, vset, pass.1, clamp.0);
    let mut basis = format!(
        "as built at {room}, moved to the pass junction at {} (case reading {case:.1} degC + \
         {watts:.1} W x theta_jc {:.2} degC/W)",
        span_words(pass),
        d.pass.theta_jc
    );
    if d.limit.clamp_mount == crate::design::ClampMount::Heatsink {
        basis.push_str(&format!(", clamp on the heatsink at {}", span_words(clamp)));
    }
    (moved(&a.limit_current, range, est), Some(basis))
}

/// The as-built band a short's first reading is judged by, and the conditions it stands for:
/// with case readings, the cold band moved to the pass junction range at the short's first
/// reading; without them, the band spanning a cold unit and one running at its rated load.
pub(super) fn short_band(
    m: &Metrics,
    exp: &DesignExpectation,
    obs: Option<&super::Observations>,
) -> Option<(ExpectedBand, Option<String>)> {
    let general = exp.short_circuit_current?;
    let (Some(d), Some(a)) = (exp.design.as_deref(), exp.as_built.as_ref()) else {
        return Some((general, None));
    };
    let room = crate::quantity::eng(a.ambient_c, "degC");
    let Some(pass) = obs.and_then(|o| o.short_junction_c) else {
        let basis = format!(
            "as built at {room}; no case reading, so from a cold unit to one running at its \
             rated load when the short is applied"
        );
        return Some((general, Some(basis)));
    };
    // The sink sits below the case before the short (by the knee's P theta_cs) and at most
    // at the case's peak during it.
    let knee_watts = watts(m.knee_conditions.and_then(|k| k.pass_watts));
    let peak = m
        .short_circuit
        .and_then(|s| s.peak_temperature)
        .filter(|t| t.is_finite())
        .unwrap_or(pass.0)
        .max(pass.0);
    let clamp = clamp_span(d, a.ambient_c, (pass.0, peak), knee_watts);
    let range = crate::design::limit_shift_range(d, 0.0, pass, clamp);
    if range.0.abs().max(range.1.abs()) <= SHIFT_FLOOR_A {
        return Some((
            a.short_circuit_current_cold,
            Some(unmoved_basis(a.ambient_c)),
        ));
    }
    let est = 0.5 * (range.0 + range.1);
    let mut basis = format!(
        "as built at {room}, moved to the pass junction at {} at the short's first reading \
         (from the case readings)",
        span_words(pass)
    );
    if d.limit.clamp_mount == crate::design::ClampMount::Heatsink {
        basis.push_str(&format!(", clamp on the heatsink at {}", span_words(clamp)));
    }
    Some((
        moved(&a.short_circuit_current_cold, range, est),
        Some(basis),
    ))
}

/// What the diagnosis fits: the no-load output (2 mV or 100 ppm, whichever is larger: about a
/// 4.5-digit meter's reading; project choice), the limit knee (0.5 %, or half the distance
/// between the two knee methods when larger), the short-circuit current at the start of the
/// dwell (0.5 %), and where the pass junction is at the knee: between the case reading and the
/// case reading plus dissipation times theta_jc (settled against the case).
pub fn observations(m: &Metrics, d: &crate::design::Design) -> super::Observations {
    use super::Observed;
    let vout = m.no_load.or(m.preflight).map(|p| Observed {
        value: p.voltage,
        u: (2e-3f64).max(1e-4 * p.voltage.abs()),
    });
    let limit = m.limit_current().map(|i| {
        let spread = m
            .knee
            .and_then(|k| Some((k.two_segment?.current - k.fixed_drop?.current).abs() / 2.0))
            .unwrap_or(0.0);
        Observed {
            value: i,
            u: (0.005 * i.abs()).max(spread),
        }
    });
    let short = m.short_circuit.map(|s| Observed {
        value: s.start_current,
        u: 0.005 * s.start_current.abs(),
    });
    let pass_junction_c = m
        .knee_conditions
        .and_then(|k| Some(k.case_temperature? + k.pass_watts.unwrap_or(0.0) * d.pass.theta_jc));
    let pass_case_c = m.knee_conditions.and_then(|k| k.case_temperature);
    let limit_at_least = match limit {
        Some(_) => None,
        None => m.knee.and_then(|k| k.highest_regulating).map(|p| Observed {
            value: p.current,
            u: 0.005 * p.current.abs(),
        }),
    };
    // At the short's first reading the junction is between the case before the short (the
    // knee's case reading) and the case's peak plus the short's dissipation, V_in I_sc, times
    // theta_jc (thermal Ohm's law; common practice).
    let short_junction_c = m.short_circuit.and_then(|s| {
        let lo = pass_case_c.or(s.peak_temperature)?;
        let case_hi = s.peak_temperature.unwrap_or(lo).max(lo);
        let p = crate::design::Params::nominal(d);
        let vin = crate::design::model::evaluate(d, &p).vin_no_load;
        let watts = (vin * s.start_current).max(0.0);
        Some((lo, case_hi + watts * d.pass.theta_jc))
    });
    super::Observations {
        vout,
        limit,
        short,
        pass_junction_c,
        pass_case_c,
        limit_at_least,
        short_junction_c,
    }
}
