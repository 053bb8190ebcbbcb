//! Part sizing from targets: choose the sense resistor (and for foldback the divider) as
//! preferred values so the nominal limit sits a chosen margin above the rated load current,
//! then let the design model report the resulting bands and ratings. Pure.
//!
//! Formulas as in `model`: diode string V_sense = n V_F - m V_BE; transistor V_BE / R_s;
//! foldback I_sc = V_BE / (k R_s) and I_knee = (V_BE + (1 - k) V_out) / (k R_s), which give
//! 1 - k = (I_knee / I_sc - 1) V_BE / V_out.

use super::eseries::{self, Series};
use super::file::{Clamp, Design, Resistor, Stage};
use super::model::{is_adjustable, nominal_output_range, output_range};

/// How an ideal value becomes a preferred one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Rounding {
    Nearest,
    /// The next preferred value at or above the ideal one.
    Up,
    /// The next preferred value at or below the ideal one.
    Down,
}

impl Rounding {
    pub fn as_str(self) -> &'static str {
        match self {
            Rounding::Nearest => "nearest",
            Rounding::Up => "next up",
            Rounding::Down => "next down",
        }
    }
    /// Round `value` to `series` this way.
    pub fn round(self, value: f64, series: Series) -> Option<f64> {
        match self {
            Rounding::Nearest => eseries::nearest(value, series),
            Rounding::Up => eseries::next_up(value, series),
            Rounding::Down => eseries::next_down(value, series),
        }
    }
    /// The default for a clamp's sense resistor: next down for a sharp clamp (the nominal
    /// limit stays at or above the target), nearest for foldback (the divider is re-solved).
    pub fn default_for(clamp: Clamp) -> Rounding {
        match clamp {
            Clamp::DiodeString | Clamp::Transistor => Rounding::Down,
            Clamp::Foldback => Rounding::Nearest,
        }
    }
}

/// The aux rail's collector resistor to size: the share of the nominal drop it should take.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CollectorTarget {
    pub share: f64,
    pub vin_nominal: f64,
    pub aux_volts: f64,
    pub aux_current_a: f64,
}

/// The collector resistor chosen, with the share and dissipation that result.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CollectorChoice {
    pub ideal_ohms: f64,
    pub ohms: f64,
    pub share: f64,
    pub watts: f64,
}

/// What the user asks for.
#[derive(Debug, Clone, PartialEq)]
pub struct Targets {
    /// Maximum continuous load current (A).
    pub max_current_a: f64,
    /// Nominal limit this far above the maximum current (percent).
    pub margin_pct: f64,
    pub clamp: Clamp,
    pub stage: Stage,
    /// Diode-string clamp: diodes in the string (default: pass junctions + 1).
    pub diodes: Option<u32>,
    /// Junction drop of clamp diodes / limiter transistor / pass junctions at 25 degC.
    pub junction_v: f64,
    /// Foldback: wanted short-circuit current (A).
    pub short_circuit_a: Option<f64>,
    /// Foldback: output voltage at which the knee is wanted (V).
    pub vout_v: Option<f64>,
    pub series: Series,
    /// Foldback: the divider's bottom resistor (ohms), a fixed choice; the top is computed.
    pub divider_bottom_ohms: f64,
    /// How every value is rounded to the series (None: [`Rounding::default_for`] the clamp).
    pub rounding: Option<Rounding>,
    /// The aux rail's collector resistor, when the design has one to size.
    pub collector: Option<CollectorTarget>,
}

/// The parts chosen.
#[derive(Debug, Clone, PartialEq)]
pub struct Choice {
    /// The exact sense resistance the targets call for, before rounding.
    pub ideal_sense_ohms: f64,
    pub sense_ohms: f64,
    pub sense_tolerance_pct: f64,
    pub diodes: Option<u32>,
    /// Foldback divider (top, bottom) in ohms, and the ideal ratio k before rounding.
    pub divider: Option<(f64, f64)>,
    pub ideal_k: Option<f64>,
    /// The rounding used, and whether it was the clamp's default.
    pub rounding: Rounding,
    pub rounding_is_default: bool,
    pub collector: Option<CollectorChoice>,
}

/// Targets that cannot be met, with what to change.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{0}")]
pub struct SizeError(pub String);

/// Choose the parts.
pub fn choose(t: &Targets) -> Result<Choice, SizeError> {
    if !(t.max_current_a.is_finite() && t.max_current_a > 0.0) {
        return Err(SizeError(
            "the maximum current must be a positive number of amperes".into(),
        ));
    }
    if !(t.margin_pct.is_finite() && (0.0..=500.0).contains(&t.margin_pct)) {
        return Err(SizeError("the margin must be between 0 % and 500 %".into()));
    }
    if !(t.junction_v.is_finite() && (0.1..=1.5).contains(&t.junction_v)) {
        return Err(SizeError(format!(
            "a silicon junction drop is about 0.6-0.7 V; {} V is not plausible",
            t.junction_v
        )));
    }
    let target = t.max_current_a * (1.0 + t.margin_pct / 100.0);
    // The tolerance the series is made for (IEC 60063 usage: E12 10 %, E24 5 %, E96 1 %).
    let tol = t.series.tolerance_pct();
    let rounding = t.rounding.unwrap_or(Rounding::default_for(t.clamp));
    let collector = match &t.collector {
        Some(c) => Some(size_collector(c, t.series, rounding)?),
        None => None,
    };
    match t.clamp {
        Clamp::DiodeString | Clamp::Transistor => {
            let (vs, diodes) = if t.clamp == Clamp::DiodeString {
                let m = t.stage.junctions();
                let n = t.diodes.unwrap_or(m + 1);
                if n <= m {
                    return Err(SizeError(format!(
                        "{n} diodes cannot clamp {m} pass junction(s): the string needs at least {} diodes",
                        m + 1
                    )));
                }
                ((n - m) as f64 * t.junction_v, Some(n))
            } else {
                (t.junction_v, None)
            };
            let ideal = vs / target;
            let r = rounding
                .round(ideal, t.series)
                .ok_or_else(|| SizeError("no preferred value fits".into()))?;
            Ok(Choice {
                ideal_sense_ohms: ideal,
                sense_ohms: r,
                sense_tolerance_pct: tol,
                diodes,
                divider: None,
                ideal_k: None,
                rounding,
                rounding_is_default: t.rounding.is_none(),
                collector,
            })
        }
        Clamp::Foldback => {
            let isc = t.short_circuit_a.ok_or_else(|| {
                SizeError(
                    "foldback sizing needs the wanted short-circuit current (--short-circuit)"
                        .into(),
                )
            })?;
            let vout = t.vout_v.ok_or_else(|| {
                SizeError("foldback sizing needs the output voltage (--vout)".into())
            })?;
            if !(isc.is_finite() && isc > 0.0 && isc < target) {
                return Err(SizeError(format!(
                    "the short-circuit current must be positive and below the knee ({target:.3} A): foldback brings the current down into a short"
                )));
            }
            if !(vout.is_finite() && vout > 0.0) {
                return Err(SizeError("the output voltage must be positive".into()));
            }
            let vbe = t.junction_v;
            let one_minus_k = (target / isc - 1.0) * vbe / vout;
            let k = 1.0 - one_minus_k;
            if !(k > 0.05 && k < 1.0) {
                return Err(SizeError(format!(
                    "a knee of {target:.3} A with {isc:.3} A into a short at {vout} V needs a divider ratio k = {k:.3}, outside 0.05-1: raise the short-circuit current or the output voltage"
                )));
            }
            let ideal = vbe / (k * isc);
            let r = rounding
                .round(ideal, t.series)
                .ok_or_else(|| SizeError("no preferred value fits".into()))?;
            // Re-solve k for the rounded sense resistor so the knee stays on target:
            // I_knee k R = V_BE + (1 - k) V  =>  k = (V_BE + V) / (I_knee R + V).
            let k2 = (vbe + vout) / (target * r + vout);
            let bottom = t.divider_bottom_ohms;
            if !(bottom.is_finite() && bottom > 0.0) {
                return Err(SizeError(
                    "the divider's bottom resistor must be positive".into(),
                ));
            }
            let top = rounding
                .round(bottom * (1.0 / k2 - 1.0), t.series)
                .ok_or_else(|| SizeError("no preferred value fits the divider".into()))?;
            Ok(Choice {
                ideal_sense_ohms: ideal,
                sense_ohms: r,
                sense_tolerance_pct: tol,
                diodes: None,
                divider: Some((top, bottom)),
                ideal_k: Some(k),
                rounding,
                rounding_is_default: t.rounding.is_none(),
                collector,
            })
        }
    }
}

/// Collector resistor R_c = share (V_in - V_aux) / I_aux (Ohm's law), as a preferred value, with
/// the share and I^2 R dissipation that result.
pub fn size_collector(
    c: &CollectorTarget,
    series: Series,
    rounding: Rounding,
) -> Result<CollectorChoice, SizeError> {
    let drop = c.vin_nominal - c.aux_volts;
    if !(c.share.is_finite() && (0.0..=0.9).contains(&c.share)) {
        return Err(SizeError(
            "the collector share must be between 0 and 0.9".into(),
        ));
    }
    if !(drop > 0.0 && c.aux_current_a > 0.0) {
        return Err(SizeError(format!(
            "the nominal input ({:.2} V) does not exceed the aux rail ({} V): there is no drop for a collector resistor to take",
            c.vin_nominal, c.aux_volts
        )));
    }
    let ideal = c.share * drop / c.aux_current_a;
    let ohms = rounding
        .round(ideal, series)
        .ok_or_else(|| SizeError("no preferred value fits the collector resistor".into()))?;
    Ok(CollectorChoice {
        ideal_ohms: ideal,
        ohms,
        share: ohms * c.aux_current_a / drop,
        watts: c.aux_current_a * c.aux_current_a * ohms,
    })
}

/// How the output was set for `--vout`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum OutputChange {
    /// An adjustable design: the evaluated setting moved to this output.
    Setting(f64),
    /// A fixed design: the feedback top resistor set (exactly) for this output.
    FeedbackTop { ohms: f64, vout: f64 },
}

/// Make the design evaluate at `vout`: the setting of an adjustable design, or the feedback
/// top of a fixed one (V_out = V_ref (1 + top / bottom), non-inverting gain).
pub fn set_output(d: &mut Design, vout: f64) -> Result<OutputChange, SizeError> {
    if !(vout.is_finite() && vout > 0.0) {
        return Err(SizeError("the output voltage must be positive".into()));
    }
    if is_adjustable(d) {
        let (lo, hi) = nominal_output_range(d);
        if vout < lo - 1e-9 || vout > hi + 1e-9 {
            return Err(SizeError(format!(
                "this adjustable design reaches {lo:.3} V to {hi:.3} V, not {vout} V"
            )));
        }
        d.load.output_setting_v = Some(vout);
        return Ok(OutputChange::Setting(vout));
    }
    let (v1, _) = output_range(d, d.reference.volts, 0.0, d.feedback.bottom.ohms);
    let top = d.feedback.bottom.ohms * (vout / v1 - 1.0);
    if !top.is_finite() || top <= 0.0 {
        return Err(SizeError(format!(
            "{vout} V is at or below the {v1} V the reference gives at unity gain: a non-inverting amplifier cannot reach it"
        )));
    }
    d.feedback.top.ohms = top;
    Ok(OutputChange::FeedbackTop { ohms: top, vout })
}

/// Write the chosen parts and the targets' topology into a design.
pub fn apply(d: &mut Design, t: &Targets, c: &Choice) {
    d.load.max_current_a = t.max_current_a;
    d.pass.stage = t.stage;
    d.pass.vbe_v = t.junction_v;
    let l = &mut d.limit;
    l.clamp = t.clamp;
    l.sense = Resistor {
        ohms: c.sense_ohms,
        tolerance_pct: c.sense_tolerance_pct,
        rating_w: l.sense.rating_w,
        pot: false,
        min_ohms: 0.0,
    };
    l.diodes = c.diodes;
    if let (Some(a), Some(cc)) = (d.aux.as_mut(), c.collector) {
        a.collector_ohms = Some(cc.ohms);
        a.collector_share = 0.0;
    }
    let l = &mut d.limit;
    l.diode_vf_v = t.junction_v;
    l.vbe_v = t.junction_v;
    match c.divider {
        Some((top, bottom)) => {
            let r = |ohms| Resistor {
                ohms,
                tolerance_pct: 1.0,
                rating_w: None,
                pot: false,
                min_ohms: 0.0,
            };
            l.divider_top = Some(r(top));
            l.divider_bottom = Some(r(bottom));
        }
        None => {
            l.divider_top = None;
            l.divider_bottom = None;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn targets(clamp: Clamp) -> Targets {
        Targets {
            max_current_a: 1.0,
            margin_pct: 25.0,
            clamp,
            stage: Stage::Single,
            diodes: None,
            junction_v: 0.65,
            short_circuit_a: None,
            vout_v: None,
            series: Series::E24,
            divider_bottom_ohms: 10_000.0,
            rounding: None,
            collector: None,
        }
    }

    #[test]
    fn transistor_limiter_sense_resistor() {
        // I_lim = V_BE / R_s (textbook): 1.25 A from 0.65 V needs 0.52 ohm; next E24 value down
        // is 0.51 ohm, giving 1.275 A.
        let c = choose(&targets(Clamp::Transistor)).unwrap();
        assert!((c.ideal_sense_ohms - 0.52).abs() < 1e-12);
        assert_eq!(c.sense_ohms, 0.51);
    }

    #[test]
    fn diode_string_defaults_to_one_diode_more_than_pass_junctions() {
        let mut t = targets(Clamp::DiodeString);
        t.stage = Stage::Darlington;
        let c = choose(&t).unwrap();
        assert_eq!(c.diodes, Some(3));
        t.diodes = Some(2);
        assert!(choose(&t).is_err());
    }

    #[test]
    fn foldback_divider_meets_knee_and_short_circuit() {
        // Hand check with the foldback formulas: target knee 3.75 A (3 A + 25 %), 2 A short,
        // 12 V: 1 - k = (3.75 / 2 - 1) x 0.65 / 12 = 0.0474, k = 0.9526, R_s = 0.65 / (k 2) = 0.341.
        let mut t = targets(Clamp::Foldback);
        t.max_current_a = 3.0;
        t.short_circuit_a = Some(2.0);
        t.vout_v = Some(12.0);
        let c = choose(&t).unwrap();
        assert!((c.ideal_k.unwrap() - 0.952604).abs() < 1e-5);
        assert!((c.ideal_sense_ohms - 0.34117).abs() < 1e-4);
        assert_eq!(c.sense_ohms, 0.33);
        let (top, bottom) = c.divider.unwrap();
        let k = bottom / (top + bottom);
        let knee = (0.65 + (1.0 - k) * 12.0) / (k * 0.33);
        assert!((knee / 3.75 - 1.0).abs() < 0.05, "knee {knee}");
    }

    #[test]
    fn output_is_set_by_the_feedback_top_of_a_fixed_design() {
        // Non-inverting gain 1 + top / bottom (op-amp textbook): 15 V from 5 V over 10 kohm
        // needs 20 kohm on top.
        let mut d = Design::parse(include_str!("../../config/design-template.toml"), "t").unwrap();
        let c = set_output(&mut d, 15.0).unwrap();
        assert_eq!(
            c,
            OutputChange::FeedbackTop {
                ohms: 20_000.0,
                vout: 15.0
            }
        );
        assert!(set_output(&mut d, 4.0).is_err());
    }

    #[test]
    fn collector_resistor_is_a_preferred_value() {
        // R_c = share (V_in - V_aux) / I (Ohm's law): 0.5 x 10 V / 20 mA = 250 ohm; E24 up is
        // 270 ohm (54 % of the drop, 0.02^2 x 270 = 108 mW), nearest 240 ohm.
        let t = CollectorTarget {
            share: 0.5,
            vin_nominal: 36.0,
            aux_volts: 26.0,
            aux_current_a: 0.02,
        };
        let up = size_collector(&t, Series::E24, Rounding::Up).unwrap();
        assert_eq!(up.ohms, 270.0);
        assert!((up.share - 0.54).abs() < 1e-12 && (up.watts - 0.108).abs() < 1e-12);
        assert_eq!(
            size_collector(&t, Series::E24, Rounding::Nearest)
                .unwrap()
                .ohms,
            240.0
        );
    }

    #[test]
    fn impossible_targets_say_what_to_change() {
        let mut t = targets(Clamp::Foldback);
        t.short_circuit_a = Some(5.0);
        t.vout_v = Some(12.0);
        assert!(choose(&t).unwrap_err().0.contains("below the knee"));
        let mut t = targets(Clamp::Transistor);
        t.max_current_a = -1.0;
        assert!(choose(&t).is_err());
    }
}
