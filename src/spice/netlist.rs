//! SPICE netlist of a design, for a DC load sweep from open circuit to short. Pure text
//! generation: a [`Design`] in, a [`Netlist`] (text plus the matched junction models) out. It
//! runs nothing and touches no files.
//!
//! The circuit (node names in brackets):
//! - input `Vin` [in]: DC at nominal; a full-wave input is replaced by its no-load DC value;
//! - reference `Vref` [ref], through a wiper (two fixed resistors) [refw] when adjustable;
//! - feedback divider `Rfbt` [out-fb], `Rfbb` [fb-0] at the evaluated output setting;
//! - error amplifier: `Bamp` [ea], a behavioural voltage with finite gain whose output swings
//!   from 0 V to its supply (aux rail, else the input) less the swing loss; `Bdrv` feeds the
//!   drive node [drive] from that supply through a small output resistance with a current limit
//!   (the amplifier's short-circuit current, which the clamp sinks when it takes over);
//! - pass stage: `Qp1` (and `Qp2` for a Darlington) from [in] to the emitter node [e];
//! - sense resistor `Rsense` [e-out];
//! - clamp: diode string [drive .. out], transistor `Qlim` (base [e]), or foldback `Qlim` with
//!   base on the divider `Rfdt` [e-fbk], `Rfdb` [fbk-0];
//! - load: `Vmeas` (0 V, measures the load current) and `Bload`, a resistance
//!   R = R_knee (1 - s) / s controlled by the swept source `Vsw` [sw], s swept from 1 (short)
//!   down to 0 (open circuit). Every load line through the origin crosses the supply's V-I
//!   curve once, including the foldback line, so the sweep traces the whole curve through the
//!   knee with no fight between a constant-current load and the limit. The sweep starts at the
//!   short because the simulator finds that operating point directly; started at open circuit
//!   it could settle on a false operating point (seen with a Darlington at 40 degC: output near
//!   the input, the driver saturated) and carry it along the sweep.

use crate::design::file::{Clamp, Design, InputKind, ReferenceAdjust, Stage};
use crate::design::model::{evaluate, Params};
use std::fmt::Write as _;

/// Boltzmann constant over the elementary charge, V/K (CODATA 2018, exact SI values).
pub const K_OVER_Q: f64 = 8.617_333_262e-5;
/// 0 degC in kelvin.
pub const ZERO_C_IN_K: f64 = 273.15;
/// Temperature at which the junction models are matched (the design file states its drops at
/// 25 degC); written as the simulator's TNOM.
pub const MATCH_TEMP_C: f64 = 25.0;
/// Open-loop gain of the error amplifier (100 dB; general-purpose op-amps have 100-106 dB,
/// from memory).
pub const AMP_GAIN: f64 = 1e5;
/// Output current limit of the error amplifier (a general-purpose op-amp's rated output
/// current is about 10 mA, from memory). Raised to [`DRIVE_MARGIN`] times the pass stage's
/// base current at the limit when the pass stage needs more.
pub const AMP_CURRENT_LIMIT_A: f64 = 0.010;
/// How many times the pass stage's base current at the limit the drive can deliver, at least.
pub const DRIVE_MARGIN: f64 = 3.0;
/// Output resistance of the error amplifier below its current limit, ohms.
pub const AMP_OUTPUT_OHMS: f64 = 10.0;
/// Swing loss used when the design has no aux rail (the design file's default).
pub const DEFAULT_SWING_LOSS_V: f64 = 1.5;
/// Current gain of the pass transistors in the matched models (a round illustrative value; the
/// textbook model ignores base currents, so it matters only through small currents).
pub const PASS_BETA: f64 = 100.0;
/// Current gain of the limiter transistor in the matched models (a small-signal transistor;
/// hFE 200-450 is a common gain group, from memory).
pub const LIMITER_BETA: f64 = 300.0;
/// Reference potentiometer value used for a wiper (not in the design file; the amplifier input
/// draws no current, so the value does not change the result).
pub const WIPER_POT_OHMS: f64 = 10_000.0;
/// Sweep step of the load parameter s (0 = open circuit, 1 = short): 2001 points.
pub const SWEEP_STEP: f64 = 0.0005;
/// Smallest resistance written (a fixed resistor of zero ohms is not valid SPICE).
const MIN_OHMS: f64 = 1e-3;

/// Which junction models the netlist uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ModelMode {
    /// Saturation currents computed so that each junction gives the design file's drop at the
    /// current it carries at the designed limit.
    #[default]
    Matched,
    /// The simulator's default diode and NPN models (no parameters).
    SimulatorDefaults,
}

impl ModelMode {
    pub fn describe(self) -> &'static str {
        match self {
            ModelMode::Matched => "junction models matched to the design's drops",
            ModelMode::SimulatorDefaults => "the simulator's default junction models",
        }
    }
}

/// Options for [`build`].
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct NetlistOptions {
    pub models: ModelMode,
}

/// One junction model and the operating point it was matched at.
#[derive(Debug, Clone, PartialEq)]
pub struct JunctionMatch {
    /// SPICE model name (`QP1`, `QP2`, `QLIM`, `DCLAMP`).
    pub model: String,
    /// What the junction is, for people.
    pub role: String,
    /// The design file's drop, volts.
    pub drop_v: f64,
    /// The current the junction carries at the limit (collector current for a transistor),
    /// amperes.
    pub current_a: f64,
    /// Saturation current written to the model (None with simulator defaults).
    pub is_a: Option<f64>,
    /// Forward current gain written to the model (transistors; None with simulator defaults).
    pub beta: Option<f64>,
}

/// Operating values the netlist was built for.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NetlistPoint {
    pub vin_v: f64,
    pub vout_set_v: f64,
    pub limit_current_a: f64,
    pub short_circuit_current_a: f64,
    /// Load resistance at s = 0.5: the nominal knee.
    pub knee_ohms: f64,
    /// Error-amplifier supply and its highest output.
    pub amp_supply_v: f64,
    pub amp_high_v: f64,
    /// Error-amplifier output current limit.
    pub drive_limit_a: f64,
    pub temp_c: f64,
}

/// A generated netlist.
#[derive(Debug, Clone, PartialEq)]
pub struct Netlist {
    pub text: String,
    pub models: Vec<JunctionMatch>,
    pub point: NetlistPoint,
    pub mode: ModelMode,
}

/// The netlist cannot be built for this design.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NetlistError {
    #[error("the design's nominal {what} is {value}; the netlist needs a positive value (check the design file)")]
    NotPositive { what: &'static str, value: f64 },
}

/// A departure of the simulated circuit from the textbook model, estimated in closed form.
#[derive(Debug, Clone, PartialEq)]
pub struct Departure {
    /// What causes it, for people.
    pub text: String,
    /// Estimated effect on the knee and on the short-circuit current, percent (None when it
    /// cannot be put as a number).
    pub knee_pct: Option<f64>,
    pub short_circuit_pct: Option<f64>,
}

/// Departures of the simulated circuit from the textbook model that follow from the netlist's
/// own elements, for people reading the comparison.
pub fn departures(d: &Design, n: &Netlist) -> Vec<Departure> {
    let mut out = Vec::new();
    let p = &n.point;
    let m = d.pass.stage.junctions() as i32;
    let base = |i_e: f64| i_e / (PASS_BETA + 1.0).powi(m);
    // The clamp carries the drive current less the pass stage's base current, which is a
    // little larger at the short when the short-circuit current is below the knee (foldback).
    let clamp_knee = p.drive_limit_a - base(p.limit_current_a);
    let clamp_sc = p.drive_limit_a - base(p.short_circuit_current_a);
    out.push(Departure {
        text: format!(
            "the clamp sinks the amplifier's drive current ({:.1} mA) and passes it to the \
             output, so the load sees the sense-resistor current plus that",
            clamp_knee * 1e3
        ),
        knee_pct: Some(100.0 * clamp_knee / p.limit_current_a),
        short_circuit_pct: Some(100.0 * clamp_sc / p.short_circuit_current_a),
    });
    if n.mode == ModelMode::SimulatorDefaults {
        out.push(Departure {
            text: "the simulator's default junctions do not give the design file's drops; \
                   match the models (leave out --spice-default-models) to see the topology alone"
                .to_string(),
            knee_pct: None,
            short_circuit_pct: None,
        });
    }
    if d.limit.clamp == Clamp::Foldback {
        if let (Some(t), Some(b)) = (&d.limit.divider_top, &d.limit.divider_bottom) {
            let k = b.ohms / (t.ohms + b.ohms);
            let r_th = t.ohms * b.ohms / (t.ohms + b.ohms);
            let beta = n
                .models
                .iter()
                .find(|j| j.model == "QLIM")
                .and_then(|j| j.beta)
                .unwrap_or(100.0);
            let vt = thermal_voltage(p.temp_c);
            let shift_knee = clamp_knee / beta * r_th;
            // At the short the limiter also carries a little more current than at the knee,
            // where its junction is matched: Shockley adds Vt ln(I_sc / I_knee).
            let shift_sc = clamp_sc / beta * r_th
                + if n.mode == ModelMode::Matched {
                    vt * (clamp_sc / clamp_knee).ln()
                } else {
                    0.0
                };
            let to_amps = |v: f64| v / (k * d.limit.sense.ohms);
            out.push(Departure {
                text: format!(
                    "the limiter's base current ({:.0} uA at gain {}) through the divider's {:.0} \
                     ohm Thevenin resistance raises its threshold by {:.1} mV at the knee, {:.1} \
                     mV at the short; a stiffer divider or a higher-gain limiter reduces it",
                    clamp_knee / beta * 1e6,
                    num(beta),
                    r_th,
                    shift_knee * 1e3,
                    shift_sc * 1e3
                ),
                knee_pct: Some(100.0 * to_amps(shift_knee) / p.limit_current_a),
                short_circuit_pct: Some(100.0 * to_amps(shift_sc) / p.short_circuit_current_a),
            });
        }
    }
    if n.mode == ModelMode::Matched && (p.temp_c - MATCH_TEMP_C).abs() > 1e-9 {
        let tc = d.environment.junction_tempco_mv_per_c * 1e-3 * (p.temp_c - MATCH_TEMP_C);
        // Change of one junction's drop relative to the textbook law, by model name.
        let delta = |model: &str| {
            n.models.iter().find(|j| j.model == model).map_or(0.0, |j| {
                spice_drop_at(j.drop_v, j.current_a, p.temp_c) - (j.drop_v + tc)
            })
        };
        let (dv, per_volt) = match d.limit.clamp {
            Clamp::DiodeString => (
                d.limit.diodes.unwrap_or(0) as f64 * delta("DCLAMP")
                    - delta("QP1")
                    - if m == 2 { delta("QP2") } else { 0.0 },
                1.0 / d.limit.sense.ohms,
            ),
            Clamp::Transistor => (delta("QLIM"), 1.0 / d.limit.sense.ohms),
            Clamp::Foldback => {
                let k = crate::design::model::foldback_ratio(d, &Params::nominal(d));
                (delta("QLIM"), 1.0 / (k * d.limit.sense.ohms))
            }
        };
        out.push(Departure {
            text: format!(
                "at {} degC the simulator moves each junction by its own temperature law \
                 (IS ~ T^{} exp(-Eg/kT), Eg = {} eV) rather than the design's {} mV/degC: the \
                 clamp threshold differs by {:+.1} mV",
                num(p.temp_c),
                num(SPICE_XTI),
                num(SPICE_EG),
                num(d.environment.junction_tempco_mv_per_c),
                dv * 1e3
            ),
            knee_pct: Some(100.0 * dv * per_volt / p.limit_current_a),
            short_circuit_pct: Some(100.0 * dv * per_volt / p.short_circuit_current_a),
        });
    }
    if p.amp_high_v
        < p.vout_set_v
            + p.limit_current_a * d.limit.sense.ohms
            + d.pass.stage.junctions() as f64 * d.pass.vbe_v
    {
        out.push(Departure {
            text:
                "the amplifier cannot drive the pass stage to the knee at this setting: the \
                   output falls before the clamp engages (check the aux rail or the input headroom)"
                    .to_string(),
            knee_pct: None,
            short_circuit_pct: None,
        });
    }
    out
}

/// SPICE's default band gap (EG, eV) and saturation-current temperature exponent (XTI) for
/// diodes and bipolar transistors (ngspice manual, model parameter tables).
pub const SPICE_EG: f64 = 1.11;
pub const SPICE_XTI: f64 = 3.0;

/// Drop at `temp_c` of a junction matched to `v25` at `i` (25 degC), under SPICE's
/// temperature law IS(T) = IS(T0) (T/T0)^XTI exp(EG/(k/q) (1/T0 - 1/T)) with N = 1.
pub fn spice_drop_at(v25: f64, i: f64, temp_c: f64) -> f64 {
    let t0 = MATCH_TEMP_C + ZERO_C_IN_K;
    let t = temp_c + ZERO_C_IN_K;
    let is0 = saturation_current(v25, i, thermal_voltage(MATCH_TEMP_C));
    let is_t = is0 * (t / t0).powf(SPICE_XTI) * (SPICE_EG / K_OVER_Q * (1.0 / t0 - 1.0 / t)).exp();
    junction_drop(is_t, i, thermal_voltage(temp_c))
}

/// Thermal voltage kT/q at a temperature in degC (25.69 mV at 25 degC).
pub fn thermal_voltage(temp_c: f64) -> f64 {
    K_OVER_Q * (temp_c + ZERO_C_IN_K)
}

/// Saturation current that gives a drop of `v` volts at `i` amperes (Shockley, emission
/// coefficient 1): I = IS (exp(V / Vt) - 1).
pub fn saturation_current(v: f64, i: f64, vt: f64) -> f64 {
    i / ((v / vt).exp_m1())
}

/// Drop of a junction with saturation current `is` at `i` amperes: V = Vt ln(I / IS + 1).
pub fn junction_drop(is: f64, i: f64, vt: f64) -> f64 {
    vt * (i / is).ln_1p()
}

/// A number for SPICE: up to 6 significant digits, plain for ordinary magnitudes, exponent
/// otherwise.
pub fn num(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    let rounded: f64 = format!("{x:.5e}").parse().unwrap_or(x);
    let a = rounded.abs();
    if (1e-3..1e6).contains(&a) {
        format!("{rounded}")
    } else {
        format!("{rounded:e}")
    }
}

fn one_line(s: &str) -> String {
    s.chars()
        .map(|c| if c.is_control() { ' ' } else { c })
        .collect()
}

/// Feedback elements and reference fraction at the evaluated setting.
struct Setting {
    fb_top: f64,
    fb_bottom: f64,
    wiper: Option<f64>,
}

fn setting_values(d: &Design, vref: f64, vset: f64) -> Setting {
    let t = &d.feedback.top;
    let b = &d.feedback.bottom;
    let ratio = vset / vref;
    if d.reference.adjust == ReferenceAdjust::Wiper {
        // Divider at its highest gain; the wiper takes the rest.
        let top = t.ohms;
        let bottom = if b.pot { b.min_ohms } else { b.ohms };
        let gain = 1.0 + top / bottom;
        let w = (ratio / gain).clamp(0.0, 1.0);
        return Setting {
            fb_top: top,
            fb_bottom: bottom,
            wiper: Some(w),
        };
    }
    if t.pot {
        let bottom = b.ohms;
        let top = ((ratio - 1.0) * bottom).clamp(t.min_ohms, t.ohms);
        if b.pot && (top - (ratio - 1.0) * bottom).abs() > 1e-9 * bottom {
            let bottom = (top / (ratio - 1.0)).clamp(b.min_ohms, b.ohms);
            return Setting {
                fb_top: top,
                fb_bottom: bottom,
                wiper: None,
            };
        }
        return Setting {
            fb_top: top,
            fb_bottom: bottom,
            wiper: None,
        };
    }
    if b.pot && ratio > 1.0 {
        let bottom = (t.ohms / (ratio - 1.0)).clamp(b.min_ohms, b.ohms);
        return Setting {
            fb_top: t.ohms,
            fb_bottom: bottom,
            wiper: None,
        };
    }
    Setting {
        fb_top: t.ohms,
        fb_bottom: b.ohms,
        wiper: None,
    }
}

/// Build the netlist of a design's nominal unit at its evaluated output setting.
pub fn build(d: &Design, opts: &NetlistOptions) -> Result<Netlist, NetlistError> {
    let p = Params::nominal(d);
    let pt = evaluate(d, &p);
    for (what, value) in [
        ("output at the evaluated setting", pt.vout_set),
        ("limit current", pt.limit_current),
        ("short-circuit current", pt.short_circuit_current),
        ("input voltage", pt.vin_no_load),
    ] {
        if !value.is_finite() || value <= 0.0 {
            return Err(NetlistError::NotPositive { what, value });
        }
    }
    let temp_c = d.environment.ambient_c;
    let vt = thermal_voltage(MATCH_TEMP_C);
    let stage = d.pass.stage;
    let m = stage.junctions() as i32;
    let i_lim = pt.limit_current;
    let i_max = pt.limit_current.max(pt.short_circuit_current);
    let base_current = |i_e: f64| i_e / (PASS_BETA + 1.0).powi(m);
    let drive_limit = AMP_CURRENT_LIMIT_A.max(DRIVE_MARGIN * base_current(i_max));
    let (amp_supply, swing_loss, supply_node, supply_text) = match &d.aux {
        Some(a) => (
            a.volts,
            a.amplifier_swing_loss_v,
            "aux",
            format!("the aux rail ({} V)", num(a.volts)),
        ),
        None => (
            pt.vin_no_load,
            DEFAULT_SWING_LOSS_V,
            "in",
            "the input (no aux rail in the design)".to_string(),
        ),
    };
    let amp_high = amp_supply - swing_loss;
    let knee_ohms = pt.vout_set / pt.limit_current;
    let set = setting_values(d, p.vref, pt.vout_set);
    let matched = opts.models == ModelMode::Matched;

    // Junction currents at the limit.
    let mut models = Vec::new();
    let mut junction =
        |model: &str, role: String, drop_v: f64, current_a: f64, beta: Option<f64>| {
            models.push(JunctionMatch {
                model: model.to_string(),
                role,
                drop_v,
                current_a,
                is_a: matched.then(|| saturation_current(drop_v, current_a, vt)),
                beta: if matched { beta } else { None },
            });
        };
    let alpha = PASS_BETA / (PASS_BETA + 1.0);
    match stage {
        Stage::Single => junction(
            "QP1",
            "pass transistor (emitter current = limit current)".into(),
            d.pass.vbe_v,
            i_lim * alpha,
            Some(PASS_BETA),
        ),
        Stage::Darlington => {
            junction(
                "QP1",
                "Darlington driver (emitter current = output transistor's base current)".into(),
                d.pass.vbe_v,
                i_lim / (PASS_BETA + 1.0) * alpha,
                Some(PASS_BETA),
            );
            junction(
                "QP2",
                "Darlington output transistor (emitter current = limit current)".into(),
                d.pass.vbe_v,
                i_lim * alpha,
                Some(PASS_BETA),
            );
        }
    }
    let clamp_current = drive_limit - base_current(i_lim);
    match d.limit.clamp {
        Clamp::DiodeString => junction(
            "DCLAMP",
            "clamp diode (the drive current less the pass stage's base current)".into(),
            d.limit.diode_vf_v,
            clamp_current,
            None,
        ),
        Clamp::Transistor | Clamp::Foldback => junction(
            "QLIM",
            "limiter transistor (collector sinks the drive current less the pass stage's base current)"
                .into(),
            d.limit.vbe_v,
            clamp_current,
            Some(LIMITER_BETA),
        ),
    }

    let point = NetlistPoint {
        vin_v: pt.vin_no_load,
        vout_set_v: pt.vout_set,
        limit_current_a: pt.limit_current,
        short_circuit_current_a: pt.short_circuit_current,
        knee_ohms,
        amp_supply_v: amp_supply,
        amp_high_v: amp_high,
        drive_limit_a: drive_limit,
        temp_c,
    };
    let text = render(
        d,
        &set,
        &point,
        &models,
        opts.models,
        supply_node,
        &supply_text,
        vt,
    );
    Ok(Netlist {
        text,
        models,
        point,
        mode: opts.models,
    })
}

#[allow(clippy::too_many_arguments)]
fn render(
    d: &Design,
    set: &Setting,
    pt: &NetlistPoint,
    models: &[JunctionMatch],
    mode: ModelMode,
    supply_node: &str,
    supply_text: &str,
    vt: f64,
) -> String {
    let mut s = String::new();
    // `write!` into a String cannot fail; the results are ignored on purpose.
    macro_rules! w {
        ($($arg:tt)*) => {{ let _ = writeln!(s, $($arg)*); }};
    }
    let rev = d
        .design
        .revision
        .as_deref()
        .map(|r| format!(" (revision {})", one_line(r)))
        .unwrap_or_default();
    w!(
        "* regulus: DC load sweep of \"{}\"{rev}",
        one_line(&d.design.name)
    );
    w!("*");
    w!(
        "* Generated by regulus {} from the design file. Run: ngspice -b THIS_FILE",
        env!("CARGO_PKG_VERSION")
    );
    w!(
        "* Setting: output {} V at the evaluated setting; input {} V DC{}.",
        num(pt.vout_set_v),
        num(pt.vin_v),
        match d.input.kind {
            InputKind::Dc => " (nominal)",
            InputKind::FullWave =>
                " (the full-wave input's no-load value: peak of the secondary less the rectifier drop; ripple and sag not modelled)",
        }
    );
    w!(
        "* Clamp: {}, {} pass stage. The textbook model expects the knee at {} A and {} A into a short.",
        d.limit.clamp.as_str(),
        match d.pass.stage {
            Stage::Single => "single-transistor",
            Stage::Darlington => "Darlington",
        },
        num(pt.limit_current_a),
        num(pt.short_circuit_current_a)
    );
    match mode {
        ModelMode::Matched => {
            w!(
                "* Junction models: matched. Each saturation current IS comes from V = N Vt ln(I/IS + 1)"
            );
            w!(
                "*   (N = 1, Vt = kT/q = {} mV at {} degC = TNOM) so that the junction gives the design",
                num(vt * 1e3),
                num(MATCH_TEMP_C)
            );
            w!("*   file's drop at the current it carries at the designed limit:");
            w!(
                "*   (current gains BF: {} for the pass transistors, {} for a limiter transistor)",
                num(PASS_BETA),
                num(LIMITER_BETA)
            );
            for j in models {
                w!(
                    "*   {:<7} {} V at {} A: {}",
                    j.model,
                    num(j.drop_v),
                    num(j.current_a),
                    j.role
                );
            }
        }
        ModelMode::SimulatorDefaults => {
            w!("* Junction models: the simulator's defaults (no parameters); drops will differ from the");
            w!("*   design file's, which shows how much the result depends on the parts' junctions.");
        }
    }
    w!(
        "* Error amplifier: gain {}, output 0 V to {} V (supplied from {} less {} V swing loss),",
        num(AMP_GAIN),
        num(pt.amp_high_v),
        supply_text,
        num(pt.amp_supply_v - pt.amp_high_v)
    );
    w!(
        "*   output resistance {} ohm, current limit {} A; the clamp sinks that current at the limit.",
        num(AMP_OUTPUT_OHMS),
        num(pt.drive_limit_a)
    );
    w!(
        "* Load: R = {} ohm * (1 - s) / s, s swept from 1 (short) to 0 (open circuit); s = 0.5 is the nominal knee.",
        num(pt.knee_ohms)
    );
    w!(
        "* Temperature: {} degC ambient, no self-heating (the sweep is DC). Printed: load current, output.",
        num(pt.temp_c)
    );
    w!("*");
    w!(".options tnom={}", num(MATCH_TEMP_C));
    w!(".temp {}", num(pt.temp_c));
    w!("");
    w!("* Input");
    w!("Vin in 0 DC {}", num(pt.vin_v));
    if let Some(a) = &d.aux {
        w!("* Auxiliary rail (powers the error amplifier)");
        w!("Vaux aux 0 DC {}", num(a.volts));
    }
    w!("");
    w!("* Reference");
    w!("Vref ref 0 DC {}", num(d.reference.volts));
    let amp_plus = match set.wiper {
        Some(wf) => {
            w!(
                "* Reference potentiometer at {} % of its travel ({} ohm assumed; fixed resistors for this setting)",
                num(wf * 100.0),
                num(WIPER_POT_OHMS)
            );
            w!(
                "Rwpt ref refw {}",
                num((WIPER_POT_OHMS * (1.0 - wf)).max(MIN_OHMS))
            );
            w!("Rwpb refw 0 {}", num((WIPER_POT_OHMS * wf).max(MIN_OHMS)));
            "refw"
        }
        None => "ref",
    };
    w!("");
    w!(
        "* Feedback divider at this setting: V_out = V_ref,eff (1 + Rfbt / Rfbb){}",
        if d.feedback.top.pot || d.feedback.bottom.pot {
            " (potentiometer as a fixed resistor)"
        } else {
            ""
        }
    );
    w!("Rfbt out fb {}", num(set.fb_top.max(MIN_OHMS)));
    w!("Rfbb fb 0 {}", num(set.fb_bottom.max(MIN_OHMS)));
    w!("");
    let half = pt.amp_high_v / 2.0;
    w!("* Error amplifier: a smooth limit between 0 V and its highest output");
    w!(
        "Bamp ea 0 V = {h} + {h} * (({g} * (v({amp_plus}) - v(fb)) / {h}) / sqrt(1 + ({g} * (v({amp_plus}) - v(fb)) / {h})**2))",
        h = num(half),
        g = num(AMP_GAIN)
    );
    let scale = pt.drive_limit_a * AMP_OUTPUT_OHMS;
    w!(
        "* Amplifier output stage: {} ohm below its {} A current limit, supplied from [{}]",
        num(AMP_OUTPUT_OHMS),
        num(pt.drive_limit_a),
        supply_node
    );
    w!(
        "Bdrv {supply_node} drive I = {il} * ((v(ea) - v(drive)) / {sc}) / sqrt(1 + ((v(ea) - v(drive)) / {sc})**2)",
        il = num(pt.drive_limit_a),
        sc = num(scale)
    );
    w!("");
    match d.pass.stage {
        Stage::Single => {
            w!("* Pass transistor (C B E)");
            w!("Qp1 in drive e QP1");
        }
        Stage::Darlington => {
            w!("* Darlington pass stage (C B E): driver, then output transistor");
            w!("Qp1 in drive d2 QP1");
            w!("Qp2 in d2 e QP2");
        }
    }
    w!("");
    w!("* Sense resistor");
    w!("Rsense e out {}", num(d.limit.sense.ohms));
    w!("");
    match d.limit.clamp {
        Clamp::DiodeString => {
            let n = d.limit.diodes.unwrap_or(0).max(1);
            w!(
                "* Clamp: string of {n} diodes from the drive node to the output: V_sense = n V_F - m V_BE"
            );
            for i in 1..=n {
                let a = if i == 1 {
                    "drive".to_string()
                } else {
                    format!("c{}", i - 1)
                };
                let b = if i == n {
                    "out".to_string()
                } else {
                    format!("c{i}")
                };
                w!("Dc{i} {a} {b} DCLAMP");
            }
        }
        Clamp::Transistor => {
            w!("* Clamp: limiter transistor across the drive, base-emitter across the sense resistor (C B E)");
            w!("Qlim drive e out QLIM");
        }
        Clamp::Foldback => {
            let (t, b) = (
                d.limit.divider_top.as_ref().map_or(1.0, |r| r.ohms),
                d.limit.divider_bottom.as_ref().map_or(1.0, |r| r.ohms),
            );
            w!("* Clamp: foldback limiter; its base sits on a divider from the emitter node to ground,");
            w!(
                "*   k = Rfdb / (Rfdt + Rfdb) = {}; its emitter on the output (C B E)",
                num(b / (t + b))
            );
            w!("Rfdt e fbk {}", num(t));
            w!("Rfdb fbk 0 {}", num(b));
            w!("Qlim drive fbk out QLIM");
        }
    }
    w!("");
    w!("* Load: Vmeas reads the load current; Bload is the swept resistance");
    w!("Vmeas out lo 0");
    w!("Vsw sw 0 DC 0");
    w!(
        "Bload lo 0 V = i(Vmeas) * {} * (1 - v(sw)) / max(v(sw), 1e-9)",
        num(pt.knee_ohms)
    );
    w!("");
    w!("* Junction models");
    for j in models {
        let kind = if j.model.starts_with('D') { "D" } else { "NPN" };
        match (j.is_a, j.beta) {
            (Some(is), Some(bf)) => w!(".model {} {kind}(IS={} BF={})", j.model, num(is), num(bf)),
            (Some(is), None) => w!(".model {} {kind}(IS={})", j.model, num(is)),
            _ => w!(".model {} {kind}", j.model),
        }
    }
    w!("");
    w!("* Sweep from the short to open circuit: the simulator finds the operating point at a");
    w!("*   short at once, and each later point starts from the one before.");
    w!("* Printed data: index, s, load current [A], output voltage [V]");
    w!(".dc Vsw 1 0 -{}", num(SWEEP_STEP));
    w!(".print dc i(Vmeas) v(out)");
    w!(".end");
    s
}
