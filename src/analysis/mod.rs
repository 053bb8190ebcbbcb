//! Metrics from one record's readings: no-load and full-load voltage, load regulation (with the
//! reference voltage used as denominator), output resistance from a least-squares fit with its
//! standard uncertainty, the limit knee by two methods, short-circuit current over the dwell with
//! its drift and a fitted first-order time constant, the foldback ratio and line regulation.
//! Pure: rows in, metrics out. This module must not read files or print; the report and the CLI
//! do that.
//!
//! Definitions used here (all documented in the summary as well):
//! - *no-load point*: the `load_sweep` row with the smallest output current;
//! - *threshold* for the fixed-drop knee: `(1 - d) * V_NL` with `d` = [`DEFAULT_KNEE_DROP`]
//!   (2 %, a project choice: well above meter noise on a regulated output, well below the
//!   collapse of a limiting output);
//! - *full-load point*: the load current given in the options (interpolated along the load
//!   sweep), otherwise the highest-current `load_sweep` row still at or above the threshold;
//! - *regulation region*: curve rows at or above the threshold carrying no more than
//!   [`DEFAULT_REGULATION_SPAN`] of the fixed-drop knee current (keeps the soft knee out of the
//!   output-resistance fit);
//! - *limit line*: curve rows below `(1 - 3d) * V_NL` and above 0 V, fitted as current against
//!   voltage (the limit line is near vertical on a V-I plot).

use crate::measure::Quantity;
use crate::record::{Flag, Row, StepKind};
use serde::{Deserialize, Serialize};

mod fit;
pub use fit::{fit_exponential, linear_fit, robust_fit, ExpFit, LineFit};

/// Default fractional drop `d` of the fixed-drop knee criterion (2 %).
pub const DEFAULT_KNEE_DROP: f64 = 0.02;
/// Default fraction of the knee current that bounds the regulation region (80 %).
pub const DEFAULT_REGULATION_SPAN: f64 = 0.8;

/// Which voltage divides a regulation figure.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RegulationReference {
    /// Full-load output voltage (the common textbook definition for load regulation).
    FullLoad,
    /// No-load output voltage.
    NoLoad,
    /// The design's nominal output voltage.
    Nominal,
    /// Mean output over the line sweep (line regulation only, when nothing better exists).
    LineSweepMean,
}

/// Options of the analysis; `Default` gives the documented defaults.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisOptions {
    /// Fractional drop `d` of the fixed-drop knee criterion.
    pub knee_drop: f64,
    /// Fraction of the knee current bounding the regulation region.
    pub regulation_span: f64,
    /// Denominator of load regulation.
    pub reference: RegulationReference,
    /// The design's nominal output voltage (needed for [`RegulationReference::Nominal`]).
    pub nominal_voltage: Option<f64>,
    /// Rated full-load current; when absent the last regulating sweep point is full load.
    pub full_load_current: Option<f64>,
}

impl RegulationReference {
    /// Words for people: `full-load`, `no-load`, `nominal`, `line-sweep mean`.
    pub fn label(self) -> &'static str {
        match self {
            RegulationReference::FullLoad => "full-load",
            RegulationReference::NoLoad => "no-load",
            RegulationReference::Nominal => "nominal",
            RegulationReference::LineSweepMean => "line-sweep mean",
        }
    }
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        AnalysisOptions {
            knee_drop: DEFAULT_KNEE_DROP,
            regulation_span: DEFAULT_REGULATION_SPAN,
            reference: RegulationReference::FullLoad,
            nominal_voltage: None,
            full_load_current: None,
        }
    }
}

/// One point of a V-I curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CurvePoint {
    pub current: f64,
    pub voltage: f64,
}

/// Load regulation with its denominator.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LoadRegulation {
    /// (V_NL - V_FL) / V_ref * 100.
    pub percent: f64,
    pub reference: RegulationReference,
    pub reference_voltage: f64,
}

/// Output resistance -dV/dI over the regulation region.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct OutputResistance {
    pub ohms: f64,
    /// Standard uncertainty of the fitted slope (None with only two points).
    pub std_uncertainty: Option<f64>,
    pub points: usize,
    /// Highest load current among the fitted points, A.
    pub max_current: f64,
    /// The fitted line's output voltage at zero current, V.
    pub intercept_voltage: f64,
}

/// The limit knee by both methods.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KneeMetrics {
    /// The fractional drop `d` used.
    pub drop_fraction: f64,
    /// `(1 - d) * V_NL`.
    pub threshold_voltage: f64,
    /// First crossing below the threshold, linearly interpolated.
    pub fixed_drop: Option<CurvePoint>,
    /// Intersection of the regulation line and the limit line.
    pub two_segment: Option<CurvePoint>,
}

/// Short-circuit current over the dwell.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ShortCircuit {
    pub start_current: f64,
    pub end_current: f64,
    pub dwell_s: f64,
    /// (end - start) / dwell, A/s.
    pub drift_a_per_s: f64,
    /// (end - start) / start * 100.
    pub drift_percent: f64,
    /// None when no first-order settling is seen within the dwell.
    pub time_constant: Option<ExpFit>,
    /// Highest temperature read during the dwell, degC.
    pub peak_temperature: Option<f64>,
    /// True when the output came back above the knee threshold after the short was removed;
    /// None when no recovery rows exist.
    pub recovered: Option<bool>,
    pub points: usize,
}

/// Line regulation from a line sweep.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LineRegulation {
    pub input_low: f64,
    pub input_high: f64,
    /// Fitted output change over the input range, V.
    pub delta_output: f64,
    /// delta_output / V_ref * 100.
    pub percent: f64,
    /// Percent per volt of input change.
    pub percent_per_volt: f64,
    pub reference: RegulationReference,
    pub reference_voltage: f64,
    pub points: usize,
}

/// Everything the analysis found in one record. Absent metrics are `None`, with a note in
/// `notes` saying why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Metrics {
    pub rows: usize,
    pub no_load: Option<CurvePoint>,
    pub full_load: Option<CurvePoint>,
    pub load_regulation: Option<LoadRegulation>,
    pub output_resistance: Option<OutputResistance>,
    pub knee: Option<KneeMetrics>,
    pub short_circuit: Option<ShortCircuit>,
    /// I_sc (start of dwell) / I_knee (fixed-drop knee).
    pub foldback_ratio: Option<f64>,
    pub line_regulation: Option<LineRegulation>,
    pub max_temperature: Option<f64>,
    /// Conditions of the curve row nearest the knee (for reading the limit model hot).
    pub knee_conditions: Option<KneeConditions>,
    pub notes: Vec<String>,
}

/// What the pass device saw at the knee: its case temperature and dissipation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KneeConditions {
    /// Thermometer reading (pass device case), degC.
    pub case_temperature: Option<f64>,
    /// (V_in - V_out) * I_out, W; V_in measured, or the programmed source voltage.
    pub pass_watts: Option<f64>,
}

impl Metrics {
    /// The limit current used for comparison: the two-segment knee when it exists (closest to
    /// the clamp's onset), otherwise the fixed-drop knee.
    pub fn limit_current(&self) -> Option<f64> {
        let k = self.knee.as_ref()?;
        k.two_segment.or(k.fixed_drop).map(|p| p.current)
    }
}

fn is_curve_kind(k: StepKind) -> bool {
    matches!(
        k,
        StepKind::LoadSweep | StepKind::LimitTrace | StepKind::KneeSearch
    )
}

fn curve_point(r: &Row) -> Option<CurvePoint> {
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
    let sweep: Vec<CurvePoint> = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::LoadSweep)
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
    if no_load.is_none() {
        notes.push("no load-sweep or curve rows with output voltage and current".into());
    }

    let knee = no_load.map(|nl| knee_metrics(&curve, nl.voltage, d, opts.regulation_span));
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
        (Some(_), Some(i_fl)) => {
            let p = interpolate_at_current(&sweep, i_fl);
            if p.is_none() {
                notes.push(format!(
                    "full-load current {i_fl} A lies outside the load sweep"
                ));
            }
            p
        }
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
            let region = regulation_region(&curve, thr, k.fixed_drop, opts.regulation_span);
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

    let short_circuit = short_circuit(rows, threshold);
    let foldback_ratio = match (&short_circuit, knee.as_ref().and_then(|k| k.fixed_drop)) {
        (Some(sc), Some(kp)) if kp.current > 0.0 => Some(sc.start_current / kp.current),
        _ => None,
    };

    let line_regulation = line_regulation(rows, opts, no_load.map(|p| p.voltage));

    let knee_conditions = knee
        .as_ref()
        .and_then(|k| k.two_segment.or(k.fixed_drop))
        .and_then(|kp| knee_conditions(rows, kp.current));

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
        notes,
    }
}

/// Conditions of the curve row whose current is nearest `i_knee` (among rows with V and I).
fn knee_conditions(rows: &[Row], i_knee: f64) -> Option<KneeConditions> {
    let r = rows
        .iter()
        .filter(|r| is_curve_kind(r.step_kind))
        .filter(|r| curve_point(r).is_some())
        .min_by(|a, b| {
            let da = (a.value(Quantity::OutputCurrent).unwrap_or(f64::INFINITY) - i_knee).abs();
            let db = (b.value(Quantity::OutputCurrent).unwrap_or(f64::INFINITY) - i_knee).abs();
            da.total_cmp(&db)
        })?;
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

fn interpolate_at_current(points: &[CurvePoint], i: f64) -> Option<CurvePoint> {
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

fn regulation_region(
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

fn knee_metrics(curve: &[CurvePoint], v_nl: f64, d: f64, span: f64) -> KneeMetrics {
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
    }
}

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

fn short_circuit(rows: &[Row], threshold: Option<f64>) -> Option<ShortCircuit> {
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
    let recovered = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::ShortCircuit && r.has_flag(Flag::Recovery))
        .filter_map(|r| r.value(Quantity::OutputVoltage))
        .next_back()
        .and_then(|v| threshold.map(|thr| v >= thr));
    Some(ShortCircuit {
        start_current: first.1,
        end_current: last.1,
        dwell_s: dwell,
        drift_a_per_s,
        drift_percent,
        time_constant: fit_exponential(&ts, &is),
        peak_temperature,
        recovered,
        points: pts.len(),
    })
}

fn line_regulation(
    rows: &[Row],
    opts: &AnalysisOptions,
    v_no_load: Option<f64>,
) -> Option<LineRegulation> {
    let pts: Vec<(f64, f64)> = rows
        .iter()
        .filter(|r| r.step_kind == StepKind::LineSweep)
        .filter_map(|r| {
            let vin = r.value(Quantity::InputVoltage).or(r.source_volts)?;
            let vout = r.value(Quantity::OutputVoltage)?;
            Some((vin, vout))
        })
        .collect();
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::measure::LoadMode;
    use crate::record::{Cell, Flags, LoadState};

    fn row(kind: StepKind, t: f64, v: f64, i: f64) -> Row {
        Row {
            utc: "2026-12-01T10:00:00.000Z".into(),
            elapsed_s: t,
            step: 0,
            step_kind: kind,
            point: 0,
            load_mode: LoadState::On(LoadMode::ConstantCurrent),
            setpoint: Some(i),
            source_volts: Some(18.0),
            samples: 1,
            cells: [
                (
                    Quantity::OutputVoltage,
                    Some(Cell::Value {
                        mean: v,
                        spread: 0.0,
                    }),
                ),
                (
                    Quantity::OutputCurrent,
                    Some(Cell::Value {
                        mean: i,
                        spread: 0.0,
                    }),
                ),
            ]
            .into(),
            flags: Flags::new(),
        }
    }

    /// Ideal piecewise-linear supply: V = 12 - 0.05 I up to 1.0 A, then a vertical limit line
    /// at 1.0 A down to 0 V.
    fn ideal_curve() -> Vec<Row> {
        let mut rows = Vec::new();
        for k in 0..=9 {
            let i = k as f64 * 0.1;
            rows.push(row(StepKind::LoadSweep, k as f64, 12.0 - 0.05 * i, i));
        }
        for k in 1..=10 {
            let v = 11.95 - k as f64 * 1.1;
            rows.push(row(StepKind::LimitTrace, 10.0 + k as f64, v, 1.0));
        }
        rows
    }

    #[test]
    fn load_regulation_textbook_worked_example() {
        // Common textbook definition: load regulation = (V_NL - V_FL) / V_FL x 100 %.
        // Worked example: V_NL = 12.00 V, V_FL = 11.76 V -> 0.24 / 11.76 = 2.0408 %.
        let p = load_regulation_percent(12.0, 11.76, 11.76);
        assert!((p - 2.040_816).abs() < 1e-5, "{p}");
    }

    #[test]
    fn ideal_curve_gives_known_answers() {
        let m = analyse(&ideal_curve(), &AnalysisOptions::default());
        let nl = m.no_load.unwrap();
        assert_eq!(nl.current, 0.0);
        assert!((nl.voltage - 12.0).abs() < 1e-12);
        // Output resistance: slope of the regulation line, 0.05 ohm.
        let r = m.output_resistance.unwrap();
        assert!((r.ohms - 0.05).abs() < 1e-9, "{}", r.ohms);
        // Two-segment intersection: V = 12 - 0.05 I meets I = 1.0 at (1.0 A, 11.95 V).
        let k = m.knee.unwrap();
        let ts = k.two_segment.unwrap();
        assert!((ts.current - 1.0).abs() < 1e-9, "{ts:?}");
        assert!((ts.voltage - 11.95).abs() < 1e-9);
        // Fixed-drop: threshold 11.76 V; between (0.9 A, 11.955 V) and (1.0 A, 10.85 V):
        // t = (11.955 - 11.76) / (11.955 - 10.85) -> I = 0.9 + 0.1 t.
        let fd = k.fixed_drop.unwrap();
        let t = (11.955 - 11.76) / (11.955 - 10.85);
        assert!((fd.current - (0.9 + 0.1 * t)).abs() < 1e-9);
        assert!((fd.voltage - 11.76).abs() < 1e-12);
        // Full load: last sweep point in regulation (0.9 A, 11.955 V); textbook regulation.
        let lr = m.load_regulation.unwrap();
        assert_eq!(lr.reference, RegulationReference::FullLoad);
        assert!((lr.percent - (0.045 / 11.955 * 100.0)).abs() < 1e-9);
    }

    #[test]
    fn knee_at_known_current_with_foldback_limit_line() {
        // Regulation V = 15 V flat to 2 A; foldback limit line I = 0.5 + 0.1 V below it,
        // which meets V = 15 at I = 2.0 A.
        let mut rows = Vec::new();
        for k in 0..=15 {
            let i = k as f64 * 0.1;
            rows.push(row(StepKind::LoadSweep, k as f64, 15.0, i));
        }
        for k in 1..=12 {
            let v = 15.0 - k as f64 * 1.2;
            rows.push(row(StepKind::LimitTrace, 20.0 + k as f64, v, 0.5 + 0.1 * v));
        }
        let m = analyse(&rows, &AnalysisOptions::default());
        let ts = m.knee.unwrap().two_segment.unwrap();
        assert!((ts.current - 2.0).abs() < 1e-9, "{ts:?}");
        assert!((ts.voltage - 15.0).abs() < 1e-9);
    }

    #[test]
    fn short_circuit_drift_and_foldback_ratio() {
        let mut rows = ideal_curve();
        for k in 0..=20 {
            let t = k as f64;
            let mut r = row(StepKind::ShortCircuit, 100.0 + t, 0.01, 0.6 - 0.005 * t);
            if k == 0 {
                r.flags.insert(Flag::DwellStart);
            }
            if k == 20 {
                r.flags.insert(Flag::DwellEnd);
            }
            rows.push(r);
        }
        let mut rec = row(StepKind::ShortCircuit, 125.0, 11.9, 0.0);
        rec.flags.insert(Flag::Recovery);
        rows.push(rec);
        let m = analyse(&rows, &AnalysisOptions::default());
        let sc = m.short_circuit.unwrap();
        assert!((sc.start_current - 0.6).abs() < 1e-12);
        assert!((sc.end_current - 0.5).abs() < 1e-12);
        assert!((sc.drift_a_per_s + 0.005).abs() < 1e-12);
        assert!((sc.drift_percent + 100.0 / 6.0).abs() < 1e-9);
        assert_eq!(sc.recovered, Some(true));
        let knee = m.knee.unwrap().fixed_drop.unwrap().current;
        assert!((m.foldback_ratio.unwrap() - 0.6 / knee).abs() < 1e-12);
    }

    #[test]
    fn line_regulation_from_sweep() {
        // Vout = 12 + 0.002 (Vin - 15) over 15..25 V: 20 mV change, 0.1667 % of 12 V.
        let rows: Vec<Row> = (0..=10)
            .map(|k| {
                let vin = 15.0 + k as f64;
                let mut r = row(
                    StepKind::LineSweep,
                    k as f64,
                    12.0 + 0.002 * (vin - 15.0),
                    0.5,
                );
                r.source_volts = Some(vin);
                r
            })
            .collect();
        let opts = AnalysisOptions {
            nominal_voltage: Some(12.0),
            ..AnalysisOptions::default()
        };
        let lr = analyse(&rows, &opts).line_regulation.unwrap();
        assert_eq!(lr.reference, RegulationReference::Nominal);
        assert!((lr.delta_output - 0.02).abs() < 1e-12);
        assert!((lr.percent - 0.02 / 12.0 * 100.0).abs() < 1e-9);
    }

    #[test]
    fn empty_record_gives_notes_not_panics() {
        let m = analyse(&[], &AnalysisOptions::default());
        assert!(m.no_load.is_none() && m.knee.is_none() && m.short_circuit.is_none());
        assert!(!m.notes.is_empty());
    }

    #[test]
    fn sweep_that_never_limits_has_no_knee_and_says_why() {
        let rows: Vec<Row> = (0..10)
            .map(|k| {
                let i = k as f64 * 0.1;
                row(StepKind::LoadSweep, k as f64, 12.0 - 0.05 * i, i)
            })
            .collect();
        let m = analyse(&rows, &AnalysisOptions::default());
        let k = m.knee.unwrap();
        assert!(k.fixed_drop.is_none() && k.two_segment.is_none());
        assert!(m.limit_current().is_none());
        assert!(m.notes.iter().any(|n| n.contains("limit was not reached")));
        // The regulation figures still exist.
        assert!((m.output_resistance.unwrap().ohms - 0.05).abs() < 1e-9);
    }

    #[test]
    fn dwell_ignores_a_start_reading_taken_before_the_output_collapsed() {
        // The first row flagged dwell_start still shows 12 V (the short was applied during
        // the reading); the dwell starts at the first shorted row.
        let mut rows = ideal_curve();
        let mut first = row(StepKind::ShortCircuit, 100.0, 11.95, 0.4);
        first.flags.insert(Flag::DwellStart);
        rows.push(first);
        for k in 1..=10 {
            let mut r = row(
                StepKind::ShortCircuit,
                100.0 + k as f64,
                0.05,
                1.0 + 0.01 * k as f64,
            );
            if k == 10 {
                r.flags.insert(Flag::DwellEnd);
            }
            rows.push(r);
        }
        let sc = analyse(&rows, &AnalysisOptions::default())
            .short_circuit
            .unwrap();
        assert_eq!(sc.points, 10);
        assert!((sc.start_current - 1.01).abs() < 1e-12);
        assert!((sc.dwell_s - 9.0).abs() < 1e-12);
    }
}
