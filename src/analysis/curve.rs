//! Metrics of the output characteristic: curve points from the rows, no-load and full-load
//! points, load regulation, output resistance over the regulation region and the limit knee by
//! two methods; [`analyse`] puts every metric together. Pure.

use super::fit::{linear_fit, robust_fit};
use super::line::line_regulation;
use super::metrics::*;
use super::short::short_circuit;
use super::soak::soak;
use crate::measure::Quantity;
use crate::record::{Flag, Row, StepKind};

pub(super) fn is_curve_kind(k: StepKind) -> bool {
    matches!(
        k,
        StepKind::LoadSweep | StepKind::LimitTrace | StepKind::KneeSearch
    )
}

pub(super) fn curve_point(r: &Row) -> Option<CurvePoint> {
    if r.load_mode.is_off() && r.step_kind != StepKind::LoadSweep {
        return None;
    }
    let v = r.value(Quantity::OutputVoltage)?;
    let i = r.value(Quantity::OutputCurrent)?;
    (v.is_finite() && i.is_finite()).then_some(CurvePoint {
        current: i,
        voltage: v,
    })
}

/// Points of the V-I curve (load sweep, limit trace, knee search) in record order.
pub fn curve_points(rows: &[Row]) -> Vec<CurvePoint> {
    rows.iter()
        .filter(|r| is_curve_kind(r.step_kind) && !r.has_flag(Flag::Interlock))
        .filter_map(curve_point)
        .collect()
}

/// Analyse a record's rows.
pub fn analyse(rows: &[Row], opts: &AnalysisOptions) -> Metrics {
    let mut notes = Vec::new();
    let d = if opts.knee_drop > 0.0 && opts.knee_drop < 0.5 {
        opts.knee_drop
    } else {
        notes.push(format!(
            "knee drop {} out of range (0, 0.5); used {DEFAULT_KNEE_DROP}",
            opts.knee_drop
        ));
        DEFAULT_KNEE_DROP
    };
    let curve = curve_points(rows);
    // A reading that tripped an interlock is a stop, not a point of the characteristic.
    let sweep: Vec<CurvePoint> = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::LoadSweep && !r.has_flag(Flag::Interlock))
        .filter_map(curve_point)
        .collect();

    let no_load = sweep
        .iter()
        .chain(if sweep.is_empty() {
            curve.iter()
        } else {
            [].iter()
        })
        .copied()
        .min_by(|a, b| a.current.total_cmp(&b.current));
    // Without a load sweep or a curve (a run stopped at its pre-flight check), the pre-flight
    // reading is all there is of the unit's unloaded output (its load input was off).
    let preflight_no_load = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::Preflight)
        .find_map(|r| {
            let v = r.value(Quantity::OutputVoltage).filter(|v| v.is_finite())?;
            let i = r
                .value(Quantity::OutputCurrent)
                .filter(|i| i.is_finite())
                .unwrap_or(0.0);
            Some(CurvePoint {
                current: i,
                voltage: v,
            })
        });
    if no_load.is_none() {
        notes.push(match preflight_no_load {
            Some(_) => "no load-sweep or curve rows: only the pre-flight reading of the \
                        unloaded output"
                .into(),
            None => "no load-sweep or curve rows with output voltage and current".into(),
        });
    }

    let mut knee = no_load.map(|nl| knee_metrics(&curve, nl.voltage, d, opts.regulation_span));
    // A reading that tripped an interlock is no point of the characteristic, but when the
    // output still regulated there it shows that the limit lies above its current.
    if let Some(k) = knee.as_mut() {
        let tripped = rows
            .iter()
            .filter(|r| is_curve_kind(r.step_kind) && r.has_flag(Flag::Interlock))
            .filter_map(curve_point)
            .filter(|p| p.voltage >= k.threshold_voltage)
            .max_by(|a, b| a.current.total_cmp(&b.current));
        if let Some(t) = tripped {
            if k.highest_regulating.is_none_or(|h| t.current > h.current) {
                k.highest_regulating = Some(t);
            }
        }
    }
    if let Some(k) = &knee {
        if k.fixed_drop.is_none() {
            notes.push(format!(
                "no curve point fell below {:.4} V ({} % under no load): the limit was not reached",
                k.threshold_voltage,
                d * 100.0
            ));
        } else if k.two_segment.is_none() {
            notes.push(
                "two-segment knee: needs two regulation points and two limit-line points whose \
                 lines meet inside the measured range"
                    .into(),
            );
        }
    }
    let threshold = knee.as_ref().map(|k| k.threshold_voltage);

    let full_load = match (threshold, opts.full_load_current) {
        (Some(thr), Some(i_fl)) => match interpolate_at_current(&sweep, i_fl) {
            Some(p) => Some(p),
            None => {
                // The rated load was not reached: regulation at the highest regulating point,
                // and a note of which load that was and why.
                let reached = sweep
                    .iter()
                    .filter(|p| p.voltage >= thr)
                    .copied()
                    .max_by(|a, b| a.current.total_cmp(&b.current));
                let top = sweep.iter().map(|p| p.current).fold(0.0, f64::max);
                if let Some(p) = reached {
                    notes.push(format!(
                        "load regulation taken at {:.4} A, the highest regulating load-sweep \
                         point, not at the rated load {i_fl} A: the sweep went up to {top:.4} A",
                        p.current
                    ));
                } else {
                    notes.push(format!(
                        "full-load current {i_fl} A lies outside the load sweep"
                    ));
                }
                reached
            }
        },
        (Some(thr), None) => sweep
            .iter()
            .filter(|p| p.voltage >= thr)
            .copied()
            .max_by(|a, b| a.current.total_cmp(&b.current)),
        _ => None,
    };

    let load_regulation = match (no_load, full_load) {
        (Some(nl), Some(fl)) if fl.current > nl.current => {
            let reference_voltage = match opts.reference {
                RegulationReference::FullLoad => Some(fl.voltage),
                RegulationReference::NoLoad => Some(nl.voltage),
                RegulationReference::Nominal => opts.nominal_voltage,
                RegulationReference::LineSweepMean => None,
            };
            match reference_voltage {
                Some(vr) if vr != 0.0 => Some(LoadRegulation {
                    percent: load_regulation_percent(nl.voltage, fl.voltage, vr),
                    reference: opts.reference,
                    reference_voltage: vr,
                }),
                _ => {
                    notes.push(format!(
                        "load regulation needs a {:?} reference voltage",
                        opts.reference
                    ));
                    None
                }
            }
        }
        _ => None,
    };

    let output_resistance = match (&knee, threshold) {
        (Some(k), Some(thr)) => {
            let wide = regulation_region(&curve, thr, k.fixed_drop, opts.regulation_span);
            let region = before_knee_onset(&wide, no_load.map(|p| p.voltage).unwrap_or(0.0));
            if region.len() < wide.len() {
                let top = region.iter().map(|p| p.current).fold(0.0, f64::max);
                notes.push(format!(
                    "output resistance fitted up to {top:.4} A: {} higher point(s) fell below \
                     the regulation line (knee onset) and were left out",
                    wide.len() - region.len()
                ));
            }
            let xs: Vec<f64> = region.iter().map(|p| p.current).collect();
            let ys: Vec<f64> = region.iter().map(|p| p.voltage).collect();
            linear_fit(&xs, &ys).map(|f| OutputResistance {
                ohms: -f.slope,
                std_uncertainty: f.slope_u,
                points: f.n,
                max_current: xs.iter().copied().fold(f64::NEG_INFINITY, f64::max),
                intercept_voltage: f.intercept,
            })
        }
        _ => None,
    };

    let recovery_threshold = threshold.or(opts.nominal_voltage.map(|v| (1.0 - d) * v));
    let short_circuit = short_circuit(rows, recovery_threshold);
    let foldback_ratio = match (&short_circuit, knee.as_ref().and_then(|k| k.fixed_drop)) {
        (Some(sc), Some(kp)) if kp.current > 0.0 => Some(sc.start_current / kp.current),
        _ => None,
    };

    let line_regulation = line_regulation(rows, opts, no_load.map(|p| p.voltage));

    // At the knee; when the limit was not reached, at the highest regulating point (which
    // bounds the limit from below, at the junction temperature it had there).
    let knee_conditions = knee
        .as_ref()
        .and_then(|k| k.two_segment.or(k.fixed_drop).or(k.highest_regulating))
        .and_then(|kp| knee_conditions(rows, kp));

    let soak = soak(rows);
    if soak.is_none() && rows.iter().any(|r| r.step_kind == StepKind::Soak) {
        notes.push("soak: fewer than two soak readings with an output voltage".into());
    }

    let max_temperature = rows
        .iter()
        .filter_map(|r| r.value(Quantity::Temperature))
        .filter(|t| t.is_finite())
        .reduce(f64::max);

    Metrics {
        rows: rows.len(),
        no_load,
        full_load,
        load_regulation,
        output_resistance,
        knee,
        short_circuit,
        foldback_ratio,
        line_regulation,
        max_temperature,
        knee_conditions,
        soak,
        preflight: if no_load.is_none() {
            preflight_no_load
        } else {
            None
        },
        notes,
    }
}

/// Conditions of the curve row nearest the knee point (among rows with V and I), nearest in
/// the V-I plane with each axis scaled by the knee's own value: in the limit region the
/// current hardly changes while the output falls, so the current alone would as readily pick
/// a point deep in the limit, where the pass device dissipates far more than at the knee.
pub(super) fn knee_conditions(rows: &[Row], knee: CurvePoint) -> Option<KneeConditions> {
    let scale = |x: f64| if x.abs() > 0.0 { x.abs() } else { 1.0 };
    let (si, sv) = (scale(knee.current), scale(knee.voltage));
    let distance = |r: &Row| match (
        r.value(Quantity::OutputCurrent),
        r.value(Quantity::OutputVoltage),
    ) {
        (Some(i), Some(v)) => ((i - knee.current) / si).hypot((v - knee.voltage) / sv),
        _ => f64::INFINITY,
    };
    let r = rows
        .iter()
        .filter(|r| is_curve_kind(r.step_kind))
        .filter(|r| curve_point(r).is_some())
        .min_by(|a, b| distance(a).total_cmp(&distance(b)))?;
    let v = r.value(Quantity::OutputVoltage)?;
    let i = r.value(Quantity::OutputCurrent)?;
    let pass_watts = r
        .value(Quantity::InputVoltage)
        .or(r.source_volts)
        .map(|vin| (vin - v) * i)
        .filter(|w| w.is_finite() && *w >= 0.0);
    Some(KneeConditions {
        case_temperature: r.value(Quantity::Temperature).filter(|t| t.is_finite()),
        pass_watts,
    })
}

/// Load regulation in percent: (V_NL - V_FL) / V_ref * 100.
pub fn load_regulation_percent(v_no_load: f64, v_full_load: f64, v_ref: f64) -> f64 {
    (v_no_load - v_full_load) / v_ref * 100.0
}

pub(super) fn interpolate_at_current(points: &[CurvePoint], i: f64) -> Option<CurvePoint> {
    let mut pts: Vec<CurvePoint> = points.to_vec();
    pts.sort_by(|a, b| a.current.total_cmp(&b.current));
    pts.windows(2).find_map(|w| {
        let (a, b) = (w[0], w[1]);
        if i >= a.current && i <= b.current && b.current > a.current {
            let t = (i - a.current) / (b.current - a.current);
            Some(CurvePoint {
                current: i,
                voltage: a.voltage + t * (b.voltage - a.voltage),
            })
        } else {
            None
        }
    })
}

/// Fewest points from the bottom of the regulation region that seed the knee-onset test.
const ONSET_SEED: usize = 3;

/// The regulation region cut before the knee onset: seeded with the lower half of the points
/// (at least [`ONSET_SEED`]), it grows point by point up the current while each point stays
/// on the seed's regulation line within three residual standard deviations (at least 50 ppm
/// of the output, about a count of a 5.5-digit meter: project choice); it stops at the first
/// two points in a row that fall below the line, where the clamp starts to take over.
pub(super) fn before_knee_onset(region: &[CurvePoint], v_out: f64) -> Vec<CurvePoint> {
    let mut pts = region.to_vec();
    pts.sort_by(|a, b| a.current.total_cmp(&b.current));
    let n = pts.len();
    let seed = (n.div_ceil(2)).max(ONSET_SEED);
    if n <= seed + 1 {
        return pts;
    }
    let xs: Vec<f64> = pts[..seed].iter().map(|p| p.current).collect();
    let ys: Vec<f64> = pts[..seed].iter().map(|p| p.voltage).collect();
    let Some(fit) = linear_fit(&xs, &ys) else {
        return pts;
    };
    let tol = (3.0 * fit.residual_sd.unwrap_or(0.0)).max(50e-6 * v_out.abs());
    let below = |p: &CurvePoint| p.voltage < fit.intercept + fit.slope * p.current - tol;
    let mut keep = seed;
    while keep < n {
        if below(&pts[keep]) && pts.get(keep + 1).is_none_or(below) {
            break;
        }
        keep += 1;
    }
    pts.truncate(keep);
    pts
}

pub(super) fn regulation_region(
    curve: &[CurvePoint],
    threshold: f64,
    knee: Option<CurvePoint>,
    span: f64,
) -> Vec<CurvePoint> {
    let above: Vec<CurvePoint> = curve
        .iter()
        .filter(|p| p.voltage >= threshold)
        .copied()
        .collect();
    if let Some(k) = knee {
        let bounded: Vec<CurvePoint> = above
            .iter()
            .filter(|p| p.current <= span * k.current)
            .copied()
            .collect();
        if bounded.len() >= 2 {
            return bounded;
        }
    }
    above
}

pub(super) fn knee_metrics(curve: &[CurvePoint], v_nl: f64, d: f64, span: f64) -> KneeMetrics {
    let threshold = (1.0 - d) * v_nl;
    // Last regulating point: the highest current at or above the threshold. First point
    // below: the highest voltage below the threshold (the first one met going down the curve).
    let above = curve
        .iter()
        .filter(|p| p.voltage >= threshold)
        .max_by(|a, b| a.current.total_cmp(&b.current));
    let below = curve
        .iter()
        .filter(|p| p.voltage < threshold)
        .max_by(|a, b| a.voltage.total_cmp(&b.voltage));
    let fixed_drop = match (above, below) {
        (Some(a), Some(b)) if a.voltage > b.voltage => {
            let t = (a.voltage - threshold) / (a.voltage - b.voltage);
            Some(CurvePoint {
                current: a.current + t * (b.current - a.current),
                voltage: threshold,
            })
        }
        _ => None,
    };

    // Two-segment fit: regulation line V = a + s I, limit line I = c + g V.
    let two_segment = (|| {
        let reg = regulation_region(curve, threshold, fixed_drop, span);
        let rx: Vec<f64> = reg.iter().map(|p| p.current).collect();
        let ry: Vec<f64> = reg.iter().map(|p| p.voltage).collect();
        let rfit = linear_fit(&rx, &ry)?;
        let deep = (1.0 - 3.0 * d) * v_nl;
        let mut lim: Vec<CurvePoint> = curve
            .iter()
            .filter(|p| p.voltage < deep && p.voltage > 0.0)
            .copied()
            .collect();
        if lim.len() < 2 {
            lim = curve
                .iter()
                .filter(|p| p.voltage < threshold && p.voltage > 0.0)
                .copied()
                .collect();
        }
        let lv: Vec<f64> = lim.iter().map(|p| p.voltage).collect();
        let li: Vec<f64> = lim.iter().map(|p| p.current).collect();
        let lfit = robust_fit(&lv, &li)?;
        // V = a + s I ; I = c + g V  =>  I = (c + g a) / (1 - g s)
        let den = 1.0 - lfit.slope * rfit.slope;
        if den.abs() < 1e-12 {
            return None;
        }
        let i = (lfit.intercept + lfit.slope * rfit.intercept) / den;
        let v = rfit.intercept + rfit.slope * i;
        // Reject an intersection far outside the measured curve (near-parallel lines).
        let i_max = curve.iter().map(|p| p.current).fold(0.0, f64::max);
        let plausible = i > 0.0 && i <= 2.0 * i_max && v > 0.0 && v <= 1.5 * v_nl;
        (i.is_finite() && v.is_finite() && plausible).then_some(CurvePoint {
            current: i,
            voltage: v,
        })
    })();

    KneeMetrics {
        drop_fraction: d,
        threshold_voltage: threshold,
        fixed_drop,
        two_segment,
        highest_regulating: above.copied(),
    }
}
