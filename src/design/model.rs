//! The circuit model of one as-built unit: element values ([`Params`]) in, expected operating
//! values ([`Point`]) out. Textbook idealisations: fixed junction drops that move linearly with
//! temperature, a sharp clamp, an ideal error amplifier. Pure and fast (well under a microsecond
//! per evaluation); tolerance analysis and the simulated unit are built on it.
//!
//! Formulas (textbook relation; common practice):
//! - output: V_out = V_ref,eff (1 + R_top / R_bottom)
//! - diode string: V_sense = n V_F - m V_BE, I_lim = V_sense / R_sense (m = 1 single, 2 Darlington)
//! - transistor limiter: I_lim = V_BE / R_sense
//! - foldback, k = R_b / (R_t + R_b): I_sc = V_BE / (k R_s), I_knee = (V_BE + (1 - k) V_out) / (k R_s)
//! - full-wave reservoir ripple: dV = I / (2 f C)

use super::file::{Clamp, Design, InputKind, ReferenceAdjust};
use crate::rng::Rng;
use serde::{Deserialize, Serialize};

/// Element values of one unit (nominal, a tolerance corner, or a random draw).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Params {
    /// Reference voltage (full, before any wiper).
    pub vref: f64,
    /// Feedback divider elements (a potentiometer's value is its full resistance).
    pub fb_top: f64,
    pub fb_bottom: f64,
    pub r_sense: f64,
    /// Diodes in a diode-string clamp (as built: a fault may add or remove one).
    pub diodes: u32,
    /// Junction drops at 25 degC: clamp diodes, limiter transistor, and each pass junction.
    pub diode_vf: f64,
    pub limiter_vbe: f64,
    pub pass_vbe: f64,
    /// Foldback divider.
    pub fold_top: f64,
    pub fold_bottom: f64,
    /// Ambient, pass-device junction and clamp junction temperatures (degC).
    pub ambient_c: f64,
    pub pass_junction_c: f64,
    pub clamp_junction_c: f64,
    /// Line factor (1.0 = nominal line; 0.9 = 10 % low).
    pub line: f64,
    /// Reservoir capacitance in farads (full-wave input).
    pub reservoir_f: f64,
}

/// Expected operating values of one unit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Point {
    pub vout_min: f64,
    pub vout_max: f64,
    /// Output at the evaluated setting.
    pub vout_set: f64,
    /// Clamp threshold across the sense resistor (for foldback: the limiter's V_BE).
    pub sense_v: f64,
    /// Knee current at the evaluated setting.
    pub limit_current: f64,
    pub short_circuit_current: f64,
    /// Input with no load at this corner's line (peak of a rectified input).
    pub vin_no_load: f64,
    /// Input at full load at the bottom of the ripple.
    pub vin_trough: f64,
    pub ripple_v: f64,
}

/// Drop of a silicon junction at a temperature, from its 25 degC value and the coefficient.
pub fn junction_at(v25: f64, tempco_mv_per_c: f64, temp_c: f64) -> f64 {
    v25 + tempco_mv_per_c * 1e-3 * (temp_c - 25.0)
}

fn gain(top: f64, bottom: f64) -> f64 {
    1.0 + top / bottom
}

/// Output range (lowest, highest) for the given element values.
pub fn output_range(d: &Design, vref: f64, fb_top: f64, fb_bottom: f64) -> (f64, f64) {
    let (wlo, whi) = match d.reference.adjust {
        ReferenceAdjust::Fixed => (1.0, 1.0),
        ReferenceAdjust::Wiper => (
            d.reference.wiper_min_pct / 100.0,
            d.reference.wiper_max_pct / 100.0,
        ),
    };
    let t = &d.feedback.top;
    let b = &d.feedback.bottom;
    let (top_lo, top_hi) = if t.pot {
        (t.min_ohms * fb_top / t.ohms, fb_top)
    } else {
        (fb_top, fb_top)
    };
    let (bot_lo, bot_hi) = if b.pot {
        (b.min_ohms * fb_bottom / b.ohms, fb_bottom)
    } else {
        (fb_bottom, fb_bottom)
    };
    (
        vref * wlo * gain(top_lo, bot_hi),
        vref * whi * gain(top_hi, bot_lo),
    )
}

/// Nominal output range of a design (used in validation).
pub fn nominal_output_range(d: &Design) -> (f64, f64) {
    output_range(
        d,
        d.reference.volts,
        d.feedback.top.ohms,
        d.feedback.bottom.ohms,
    )
}

/// True when the output can be adjusted (a wiper or a potentiometer in the divider).
pub fn is_adjustable(d: &Design) -> bool {
    d.reference.adjust == ReferenceAdjust::Wiper || d.feedback.top.pot || d.feedback.bottom.pot
}

impl Params {
    /// All elements at their nominal values, at the nominal ambient and line.
    pub fn nominal(d: &Design) -> Params {
        let mut p = Params {
            vref: d.reference.volts,
            fb_top: d.feedback.top.ohms,
            fb_bottom: d.feedback.bottom.ohms,
            r_sense: d.limit.sense.ohms,
            diodes: d.limit.diodes.unwrap_or(0),
            diode_vf: d.limit.diode_vf_v,
            limiter_vbe: d.limit.vbe_v,
            pass_vbe: d.pass.vbe_v,
            fold_top: d.limit.divider_top.as_ref().map_or(1.0, |r| r.ohms),
            fold_bottom: d.limit.divider_bottom.as_ref().map_or(1.0, |r| r.ohms),
            ambient_c: 0.0,
            pass_junction_c: 0.0,
            clamp_junction_c: 0.0,
            line: 1.0,
            reservoir_f: d.input.reservoir_uf.unwrap_or(0.0) * 1e-6,
        };
        p.set_ambient(d.environment.ambient_c);
        p
    }

    /// Set the ambient temperature, with both junction groups at ambient (no self-heating).
    pub fn set_ambient(&mut self, t: f64) {
        self.ambient_c = t;
        self.pass_junction_c = t;
        self.clamp_junction_c = t;
    }

    /// One random unit: every element drawn within its tolerance (read as +-3 sigma, normal),
    /// ambient and line uniform over their ranges.
    pub fn draw(d: &Design, rng: &mut Rng) -> Params {
        Params::draw_from(&Params::nominal(d), &spreads(d), rng)
    }

    /// Like [`Params::draw`], from a precomputed nominal and spread list (fast in loops).
    pub fn draw_from(nominal: &Params, spreads: &[Spread], rng: &mut Rng) -> Params {
        let mut p = nominal.clone();
        for s in spreads {
            let v = match s.dist {
                Dist::Normal if s.parts > 1 => {
                    let sum: f64 = (0..s.parts)
                        .map(|_| rng.within(s.nominal, (s.hi - s.lo) / 2.0))
                        .sum();
                    sum / s.parts as f64
                }
                Dist::Normal => rng.within(s.nominal, (s.hi - s.lo) / 2.0),
                Dist::Uniform => rng.range(s.lo, s.hi),
            };
            (s.set)(&mut p, v);
        }
        p
    }
}

/// How a parameter varies across units.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dist {
    /// Tolerance band read as +-3 sigma of a normal distribution (truncated at the band).
    Normal,
    /// Anywhere in the range with equal likelihood (ambient temperature, line).
    Uniform,
}

/// Whether a parameter is a part's tolerance or the unit's surroundings.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Scope {
    /// A part's tolerance: fixed once the unit is built.
    Part,
    /// The operating envelope: ambient temperature and line.
    Environment,
}

/// One uncertain parameter: its range and how to apply a value to [`Params`].
#[derive(Clone, Copy)]
pub struct Spread {
    pub name: &'static str,
    pub nominal: f64,
    pub lo: f64,
    pub hi: f64,
    pub dist: Dist,
    /// Parts drawn independently whose mean the parameter is (the diodes of a string: the
    /// string's drop is n times the mean of n independent drops); 1 for a single part.
    pub parts: u32,
    pub scope: Scope,
    pub set: fn(&mut Params, f64),
}

fn tol(v: f64, pct: f64) -> (f64, f64) {
    (v * (1.0 - pct / 100.0), v * (1.0 + pct / 100.0))
}

/// The uncertain parameters of a design (only those that matter for its topology and vary).
pub fn spreads(d: &Design) -> Vec<Spread> {
    let mut out = Vec::new();
    let diodes = match d.limit.clamp {
        Clamp::DiodeString => d.limit.diodes.unwrap_or(1).max(1),
        _ => 1,
    };
    let mut push = |name, nominal: f64, (lo, hi): (f64, f64), dist, set: fn(&mut Params, f64)| {
        if hi > lo {
            let scope = match name {
                "ambient" | "line" => Scope::Environment,
                _ => Scope::Part,
            };
            out.push(Spread {
                name,
                nominal,
                lo,
                hi,
                dist,
                parts: if name == "diode_vf" { diodes } else { 1 },
                scope,
                set,
            });
        }
    };
    let r = &d.reference;
    push(
        "reference",
        r.volts,
        tol(r.volts, r.tolerance_pct),
        Dist::Normal,
        |p, v| p.vref = v,
    );
    let t = &d.feedback.top;
    push(
        "feedback_top",
        t.ohms,
        tol(t.ohms, t.tolerance_pct),
        Dist::Normal,
        |p, v| p.fb_top = v,
    );
    let b = &d.feedback.bottom;
    push(
        "feedback_bottom",
        b.ohms,
        tol(b.ohms, b.tolerance_pct),
        Dist::Normal,
        |p, v| p.fb_bottom = v,
    );
    let s = &d.limit.sense;
    push(
        "sense",
        s.ohms,
        tol(s.ohms, s.tolerance_pct),
        Dist::Normal,
        |p, v| p.r_sense = v,
    );
    let l = &d.limit;
    match l.clamp {
        Clamp::DiodeString => {
            push(
                "diode_vf",
                l.diode_vf_v,
                (
                    l.diode_vf_v - l.diode_vf_spread_v,
                    l.diode_vf_v + l.diode_vf_spread_v,
                ),
                Dist::Normal,
                |p, v| p.diode_vf = v,
            );
            let pv = &d.pass;
            push(
                "pass_vbe",
                pv.vbe_v,
                (pv.vbe_v - pv.vbe_spread_v, pv.vbe_v + pv.vbe_spread_v),
                Dist::Normal,
                |p, v| p.pass_vbe = v,
            );
        }
        Clamp::Transistor | Clamp::Foldback => {
            push(
                "limiter_vbe",
                l.vbe_v,
                (l.vbe_v - l.vbe_spread_v, l.vbe_v + l.vbe_spread_v),
                Dist::Normal,
                |p, v| p.limiter_vbe = v,
            );
        }
    }
    if l.clamp == Clamp::Foldback {
        if let (Some(ft), Some(fb)) = (&l.divider_top, &l.divider_bottom) {
            push(
                "foldback_top",
                ft.ohms,
                tol(ft.ohms, ft.tolerance_pct),
                Dist::Normal,
                |p, v| p.fold_top = v,
            );
            push(
                "foldback_bottom",
                fb.ohms,
                tol(fb.ohms, fb.tolerance_pct),
                Dist::Normal,
                |p, v| p.fold_bottom = v,
            );
        }
    }
    let e = &d.environment;
    push(
        "ambient",
        e.ambient_c,
        (e.ambient_min_c, e.ambient_max_c),
        Dist::Uniform,
        |p, v| p.set_ambient(v),
    );
    let lt = d.input.line_tolerance_pct / 100.0;
    push("line", 1.0, (1.0 - lt, 1.0 + lt), Dist::Uniform, |p, v| {
        p.line = v
    });
    if d.input.kind == InputKind::FullWave {
        let c = d.input.reservoir_uf.unwrap_or(0.0) * 1e-6;
        push(
            "reservoir",
            c,
            tol(c, d.input.reservoir_tolerance_pct),
            Dist::Normal,
            |p, v| p.reservoir_f = v,
        );
    }
    out
}

/// Clamp threshold across the sense resistor, with junctions at their temperatures.
pub fn sense_voltage(d: &Design, p: &Params) -> f64 {
    let tc = d.environment.junction_tempco_mv_per_c;
    match d.limit.clamp {
        Clamp::DiodeString => {
            p.diodes as f64 * junction_at(p.diode_vf, tc, p.clamp_junction_c)
                - d.pass.stage.junctions() as f64 * junction_at(p.pass_vbe, tc, p.pass_junction_c)
        }
        Clamp::Transistor | Clamp::Foldback => junction_at(p.limiter_vbe, tc, p.clamp_junction_c),
    }
}

/// Foldback divider ratio k = R_b / (R_t + R_b) (1.0 for other clamps).
pub fn foldback_ratio(d: &Design, p: &Params) -> f64 {
    match d.limit.clamp {
        Clamp::Foldback => p.fold_bottom / (p.fold_top + p.fold_bottom),
        _ => 1.0,
    }
}

/// The most current the clamp allows when the output sits at `vout` volts (on the limit line).
pub fn limit_current_at(d: &Design, p: &Params, vout: f64) -> f64 {
    let vs = sense_voltage(d, p);
    match d.limit.clamp {
        Clamp::DiodeString | Clamp::Transistor => vs / p.r_sense,
        Clamp::Foldback => {
            let k = foldback_ratio(d, p);
            (vs + (1.0 - k) * vout.max(0.0)) / (k * p.r_sense)
        }
    }
}

/// The output setting at which limits and tests are evaluated for these element values.
pub fn output_setting(d: &Design, vout_max: f64) -> f64 {
    match d.load.output_setting_v {
        Some(v) if is_adjustable(d) => v,
        _ => vout_max,
    }
}

/// Evaluate one unit.
pub fn evaluate(d: &Design, p: &Params) -> Point {
    let (vout_min, vout_max) = output_range(d, p.vref, p.fb_top, p.fb_bottom);
    let vout_set = output_setting(d, vout_max);
    let sense_v = sense_voltage(d, p);
    let limit_current = limit_current_at(d, p, vout_set);
    let short_circuit_current = limit_current_at(d, p, 0.0);
    let (vin_no_load, ripple_v) = match d.input.kind {
        InputKind::Dc => (d.input.volts.unwrap_or(0.0) * p.line, 0.0),
        InputKind::FullWave => {
            // With a stated regulation the no-load secondary is higher than the rated-load one.
            let reg = d.input.regulation_pct.unwrap_or(0.0) / 100.0;
            let peak = d.input.secondary_vrms.unwrap_or(0.0)
                * (1.0 + reg)
                * std::f64::consts::SQRT_2
                * p.line
                - d.input.rectifier_drop_v;
            let ripple = if p.reservoir_f > 0.0 {
                d.load.max_current_a / (2.0 * d.input.mains_hz * p.reservoir_f)
            } else {
                0.0
            };
            (peak, ripple)
        }
    };
    // The trough at full load starts from the rated-load (not the no-load) peak.
    let full_load_peak = match d.input.kind {
        InputKind::FullWave => {
            vin_no_load
                - d.input.secondary_vrms.unwrap_or(0.0) * d.input.regulation_pct.unwrap_or(0.0)
                    / 100.0
                    * std::f64::consts::SQRT_2
                    * p.line
        }
        InputKind::Dc => vin_no_load,
    };
    Point {
        vout_min,
        vout_max,
        vout_set,
        sense_v,
        limit_current,
        short_circuit_current,
        vin_no_load,
        vin_trough: full_load_peak - ripple_v,
        ripple_v,
    }
}

/// Which operating condition stresses the pass device most.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PassStress {
    /// On the limit line (short circuit, or a foldback point between knee and short).
    Limit,
    /// Full rated load at the lowest output setting.
    FullLoadLowOutput,
}

/// Pass-device dissipation in watts at the worst operating point of this unit, with the input
/// at its no-load value (the highest it reaches: conservative). Along the limit line the device
/// drops V_in - V_out - I R_s at current I(V_out).
pub fn pass_dissipation(d: &Design, p: &Params, pt: &Point) -> (f64, PassStress, f64) {
    let vin = pt.vin_no_load;
    let mut best = (0.0f64, PassStress::Limit, 0.0f64);
    let steps = match d.limit.clamp {
        Clamp::Foldback => 64,
        _ => 1,
    };
    for i in 0..steps {
        let v = pt.vout_set * i as f64 / steps as f64;
        let i_lim = limit_current_at(d, p, v);
        let w = ((vin - v - i_lim * p.r_sense) * i_lim).max(0.0);
        if w > best.0 {
            best = (w, PassStress::Limit, i_lim);
        }
    }
    let i = d.load.max_current_a.min(pt.limit_current.max(0.0));
    let w = ((vin - pt.vout_min - i * p.r_sense) * i).max(0.0);
    if w > best.0 {
        best = (w, PassStress::FullLoadLowOutput, i);
    }
    best
}

/// An expected V-I curve: points (current, voltage) from no load through the knee to short.
pub fn vi_curve(d: &Design, p: &Params) -> Vec<(f64, f64)> {
    let pt = evaluate(d, p);
    let mut out = vec![(0.0, pt.vout_set), (pt.limit_current, pt.vout_set)];
    match d.limit.clamp {
        Clamp::Foldback => {
            let n = 16;
            for i in (0..n).rev() {
                let v = pt.vout_set * i as f64 / n as f64;
                out.push((limit_current_at(d, p, v), v));
            }
        }
        _ => out.push((pt.short_circuit_current, 0.0)),
    }
    out
}
