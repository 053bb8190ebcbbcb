//! The simulated unit's vocabulary: physical constants, the model constants the design file
//! does not give, built-in faults, the bench's settings on the unit, operating points and the
//! true values tests check against. Pure data and formulas.

use crate::design::{Clamp, Design, Params};
use crate::measure::LoadMode;
use serde::Serialize;

/// Boltzmann constant, J/K (SI 2019 definition, exact).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Elementary charge, C (SI 2019 definition, exact).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;

/// Thermal voltage kT/q at a temperature in degrees Celsius.
pub fn thermal_voltage(temp_c: f64) -> f64 {
    BOLTZMANN * (temp_c + 273.15) / ELEMENTARY_CHARGE
}

/// First-order step: the value after `dt` seconds moving towards `target` with time constant
/// `tau` (exact for a constant target).
pub fn first_order_step(value: f64, target: f64, tau: f64, dt: f64) -> f64 {
    if tau <= 0.0 {
        return target;
    }
    target + (value - target) * (-dt / tau).exp()
}

/// Physical constants of the simulated unit that the design file does not give.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnitModel {
    /// Output resistance in the regulation region, ohms (5-20 milliohm is typical of an
    /// op-amp regulated supply measured at its terminals; common practice).
    pub output_resistance: f64,
    /// Deficit at which the error amplifier saturates, as a fraction of the set output.
    pub knee_sat_fraction: f64,
    /// Emission coefficient N of the clamp law (1 for an ideal junction).
    pub emission: f64,
    /// Saturation voltage of the pass stage: about 0.2 V for one transistor and 0.9 V for a
    /// Darlington (from memory). `None`: chosen from the design's stage.
    pub vce_sat: Option<f64>,
    /// Pass device thermal time constant, seconds (junction plus heatsink, lumped).
    pub pass_tau_s: f64,
    /// Heatsink used when the design has not chosen one yet, degC/W.
    pub default_theta_sa: f64,
    /// Current the unit draws from its input besides the load (amplifier, reference), amperes.
    pub quiescent_a: f64,
    /// Input rejection: volts of output change per volt of input change (1e-4 is 80 dB, usual
    /// for an op-amp error amplifier; from memory). Gives a small, nonzero line regulation.
    pub line_rejection: f64,
    /// Room temperature, degC; `None`: the design's nominal ambient.
    pub ambient_c: Option<f64>,
    /// How the pass device heats.
    pub heat: HeatModel,
    /// How wide the clamp's soft knee is.
    pub knee: KneeModel,
}

/// How the simulated pass device heats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum HeatModel {
    /// One lumped first-order stage (theta_jc + theta_cs + theta_sa, `pass_tau_s`); `simple`
    /// on the command line and in the true values.
    #[serde(rename = "simple")]
    Lumped,
    /// The design's three-stage network (junction, case, heatsink) when the design states its
    /// thermal masses (`[pass.thermal_mass]`), as the design model computes a short's dwell;
    /// lumped otherwise, with the reason in [`HeatInUse::note`].
    #[default]
    Network,
}

impl HeatModel {
    pub fn as_str(self) -> &'static str {
        match self {
            HeatModel::Lumped => "simple",
            HeatModel::Network => "network",
        }
    }

    /// Parse the `regulus sim --heat` value: `simple` (one lumped stage) or `network`.
    pub fn parse(s: &str) -> Option<HeatModel> {
        match s.trim() {
            "simple" => Some(HeatModel::Lumped),
            "network" => Some(HeatModel::Network),
            _ => None,
        }
    }
}

/// The heat model a unit actually runs: the one asked for, or the simple one with why.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct HeatInUse {
    pub model: HeatModel,
    /// Why the network was asked for and not used (the design lacks its thermal data).
    pub note: Option<String>,
}

/// How wide the simulated clamp's knee is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum KneeModel {
    /// One junction's N kT/q whatever the clamp.
    OneJunction,
    /// N kT/q per junction that sets the threshold ([`knee_width_v`]): a string of n diodes is
    /// n times as wide.
    #[default]
    PerJunction,
}

impl Default for UnitModel {
    fn default() -> Self {
        UnitModel {
            output_resistance: 0.010,
            knee_sat_fraction: 0.03,
            emission: 1.0,
            vce_sat: None,
            pass_tau_s: 8.0,
            default_theta_sa: 2.0,
            quiescent_a: 0.008,
            line_rejection: 1e-4,
            ambient_c: None,
            heat: HeatModel::Network,
            knee: KneeModel::PerJunction,
        }
    }
}

/// A fault built into the simulated unit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub enum UnitFault {
    /// A sense resistor of this value fitted instead of the designed one (ohms).
    SenseOhms(f64),
    /// Diodes in the clamp string differ from the design by this many (+1: one extra).
    DiodeDelta(i32),
    /// The pass device has no heatsink (only its case to ambient: this theta_sa, degC/W).
    ThetaSa(f64),
    /// The reference is this many volts instead of its drawn value.
    ReferenceVolts(f64),
    /// Another part differs from the design (feedback, foldback divider, pass stage).
    Part(super::parts::PartFault),
}

impl UnitFault {
    /// Parse `sense=0.56`, `diodes=+1`, `diodes=-1`, `theta_sa=12`, `vref=5.3`.
    pub fn parse(spec: &str) -> Result<UnitFault, String> {
        let (key, value) = spec
            .split_once('=')
            .ok_or_else(|| format!("fault '{spec}': expected KEY=VALUE"))?;
        let num = |v: &str| -> Result<f64, String> {
            v.trim()
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite() && *x > 0.0)
                .ok_or_else(|| format!("fault '{spec}': '{v}' is not a positive number"))
        };
        match key.trim() {
            "sense" => Ok(UnitFault::SenseOhms(num(value)?)),
            "theta_sa" => Ok(UnitFault::ThetaSa(num(value)?)),
            "vref" => Ok(UnitFault::ReferenceVolts(num(value)?)),
            "diodes" => {
                let v = value.trim();
                let delta: i32 = v.trim_start_matches('+').parse().map_err(|_| {
                    format!("fault '{spec}': diodes takes +N or -N (one extra: +1)")
                })?;
                if !(v.starts_with('+') || v.starts_with('-')) || delta == 0 {
                    return Err(format!(
                        "fault '{spec}': diodes takes a signed change such as +1 or -1"
                    ));
                }
                Ok(UnitFault::DiodeDelta(delta))
            }
            other => Err(format!(
                "fault '{spec}': unknown unit fault '{other}' (sense, diodes, theta_sa, vref; \
                 a port fault names its instrument, e.g. dmm:drop=3)"
            )),
        }
    }

    /// Short description for people.
    pub fn describe(&self) -> String {
        match self {
            UnitFault::SenseOhms(r) => format!("sense resistor fitted: {r} ohm"),
            UnitFault::DiodeDelta(n) => format!("clamp string has {n:+} diode(s)"),
            UnitFault::ThetaSa(t) => format!("heatsink missing: theta_sa {t} degC/W"),
            UnitFault::ReferenceVolts(v) => format!("reference at {v} V"),
            UnitFault::Part(p) => p.describe(),
        }
    }
}

/// The electronic load's settings (a setpoint per mode, as real loads keep them).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct LoadSetting {
    pub mode: LoadMode,
    pub current: f64,
    pub voltage: f64,
    pub resistance: f64,
    pub input_on: bool,
}

impl Default for LoadSetting {
    fn default() -> Self {
        LoadSetting {
            mode: LoadMode::ConstantCurrent,
            current: 0.0,
            voltage: 0.0,
            resistance: 1.0e6,
            input_on: false,
        }
    }
}

/// The programmable source feeding the unit's input. Until it is first commanded it is not
/// "in use" and the unit runs from the design's own input (transformer, rectifier, reservoir).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct SourceSetting {
    pub in_use: bool,
    pub volts: f64,
    pub output_on: bool,
}

/// Everything the bench sets on the unit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct Controls {
    pub load: LoadSetting,
    pub source: SourceSetting,
}

/// Junction temperatures of the unit (degC), and the pass device's case and heatsink (with
/// the design's thermal masses the three-stage network heats them in turn; otherwise their
/// shares of the lumped rise). The clamp junctions follow the design's `clamp_mount`: at
/// ambient or at the heatsink's temperature.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Thermal {
    pub pass_junction_c: f64,
    pub clamp_junction_c: f64,
    pub case_c: f64,
    pub sink_c: f64,
}

/// The pass device's thermal network (junction, case, heatsink heat capacities in J/degC and
/// theta_jc, theta_cs, theta_sa in degC/W), from the design's `[pass.thermal_mass]` with the
/// unit's own heatsink; None without thermal masses (the lumped first-order model is used).
pub fn pass_network(d: &Design, theta_sa: f64) -> Option<([f64; 3], [f64; 3])> {
    let mut d2 = d.clone();
    d2.pass.theta_sa = Some(theta_sa);
    crate::design::dwell::network(&d2)
}

/// Advance the network by `dt` seconds at `watts` into the pass junction (exact for constant
/// power; `design::dwell::network_step`).
pub fn step_network(
    net: &([f64; 3], [f64; 3]),
    t: &mut Thermal,
    ambient_c: f64,
    watts: f64,
    dt: f64,
) {
    let th = [
        t.pass_junction_c - ambient_c,
        t.case_c - ambient_c,
        t.sink_c - ambient_c,
    ];
    let n = crate::design::dwell::network_step(&net.0, &net.1, th, watts, dt);
    t.pass_junction_c = ambient_c + n[0];
    t.case_c = ambient_c + n[1];
    t.sink_c = ambient_c + n[2];
}

/// Transformer sag of a full-wave input, volts of rectified peak per ampere of load: the
/// secondary falls from its no-load to its rated-load value, (V_nl - V_fl) sqrt(2) x line,
/// over the rated current (a linear winding resistance; common practice). 0 without a stated
/// regulation or for a DC input.
pub fn transformer_sag_per_a(d: &Design, line: f64) -> f64 {
    let inp = &d.input;
    match (inp.kind, inp.secondary_vrms, inp.regulation_pct) {
        (crate::design::InputKind::FullWave, Some(v), Some(r)) if d.load.max_current_a > 0.0 => {
            v * r / 100.0 * std::f64::consts::SQRT_2 * line / d.load.max_current_a
        }
        _ => 0.0,
    }
}

/// Width of the clamp's soft knee in volts across the sense resistor: N kT/q per junction
/// whose drop sets the threshold (a string of `diodes` diodes: n N kT/q, Shockley's law for
/// junctions in series; a limiter transistor: N kT/q). `diodes` is the string as built (a unit
/// with a diode too many has a wider knee than its design).
pub fn knee_width_v(clamp: Clamp, diodes: u32, emission: f64, clamp_temp_c: f64) -> f64 {
    let junctions = match clamp {
        Clamp::DiodeString => diodes.max(1) as f64,
        _ => 1.0,
    };
    emission * junctions * thermal_voltage(clamp_temp_c)
}

/// One operating point of the unit with its load.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct OperatingPoint {
    /// Output voltage and current.
    pub vout: f64,
    pub iout: f64,
    /// Mean input voltage and input current.
    pub vin: f64,
    pub iin: f64,
    /// Pass device dissipation, watts.
    pub pass_w: f64,
    /// Share of the clamp's full drive current it carries (0 = off, 1 = clamping).
    pub clamp_share: f64,
    /// Pass device case temperature, degC.
    pub case_c: f64,
    /// A CC load asks for more than the unit delivers: the output has collapsed to 0 V. It
    /// stays down until the set current is one the unit can deliver at 0 V (latch-up).
    pub collapsed: bool,
}

/// The true values of an as-built unit, for checking what the bench measured.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Truth {
    /// Regulated output at the as-built setting, V_ref (1 + Rt/Rb), unloaded and unlimited.
    pub regulated_v: f64,
    /// Output with no load (the regulated value, or lower if the input is too low).
    pub no_load_v: f64,
    /// Output resistance in the regulation region, ohms.
    pub output_resistance: f64,
    /// Knee: the current at which the output has fallen 2 % below its no-load value, with all
    /// junctions at ambient.
    pub knee_current: f64,
    /// Output current into a short (0 V), junctions at ambient.
    pub short_circuit_current: f64,
    /// The design's limit line at the set output with these element values (sharp model).
    pub limit_line_current: f64,
    /// Clamp threshold across the sense resistor at ambient, volts.
    pub sense_v: f64,
    pub ambient_c: f64,
    /// Thermal path of the pass device: junction to ambient, degC/W, and time constant.
    pub pass_theta: f64,
    pub pass_tau_s: f64,
    /// The heat model the unit runs (and why not the network when it was asked for).
    pub heat: HeatInUse,
    /// With the network: the time constants theta x C of its junction, case and heatsink
    /// stages, seconds.
    pub pass_stage_tau_s: Option<[f64; 3]>,
    /// How wide the clamp's knee is, and its width across the sense resistor at ambient, volts
    /// (the e-folding of the clamp's exponential, n N kT/q).
    pub knee_model: KneeModel,
    pub knee_width_v: f64,
    /// Where the clamp's junctions sit thermally (the design's `clamp_mount`).
    pub clamp_mount: crate::design::ClampMount,
    /// The as-built element values.
    pub params: Params,
    /// Faults built in.
    pub faults: Vec<String>,
}

/// A unit could not be built as asked.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitError {
    #[error("fault '{fault}' does not apply to this design: {why}")]
    FaultNotApplicable { fault: String, why: String },
}
