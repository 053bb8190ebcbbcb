//! Part sizing from targets: choose the sense resistor (and for foldback the divider) as
//! preferred values so the nominal limit sits a chosen margin above the rated load current,
//! then let the design model report the resulting bands and ratings. Pure.
//!
//! Formulas as in `model`: diode string V_sense = n V_F - m V_BE; transistor V_BE / R_s;
//! foldback I_sc = V_BE / (k R_s) and I_knee = (V_BE + (1 - k) V_out) / (k R_s), which give
//! 1 - k = (I_knee / I_sc - 1) V_BE / V_out.

use super::eseries::{self, Series};
use super::file::{Clamp, Design, Resistor, Stage};

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
    let tol = t.series.tolerance_pct().min(5.0);
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
            // Next value down keeps the nominal limit at or above the target.
            let r = eseries::next_down(ideal, t.series)
                .ok_or_else(|| SizeError("no preferred value fits".into()))?;
            Ok(Choice {
                ideal_sense_ohms: ideal,
                sense_ohms: r,
                sense_tolerance_pct: tol,
                diodes,
                divider: None,
                ideal_k: None,
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
            let r = eseries::nearest(ideal, t.series)
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
            let top = eseries::nearest(bottom * (1.0 / k2 - 1.0), t.series)
                .ok_or_else(|| SizeError("no preferred value fits the divider".into()))?;
            Ok(Choice {
                ideal_sense_ohms: ideal,
                sense_ohms: r,
                sense_tolerance_pct: tol,
                diodes: None,
                divider: Some((top, bottom)),
                ideal_k: Some(k),
            })
        }
    }
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
