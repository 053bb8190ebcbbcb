//! Physics of one simulated as-built unit: the regulated output with a small output resistance,
//! dropout at low input, a soft current-limit knee from the junction law, foldback where designed,
//! and first-order self-heating of the pass device and the clamp junctions. It also answers how
//! the unit meets an electronic load in CC, CV or CR mode. Pure: element values and settings in,
//! operating points out; time is an explicit argument (the serving code feeds wall-clock time).
//! No I/O and no clock reads live here.
//!
//! The model (behavioural, documented so that tests can check it against formulas):
//! - Regulation: `V = V_set - R_out I` (V_set from `design::evaluate`, i.e. V_ref (1 + Rt/Rb)).
//! - Dropout: `V <= V_in(I) - I R_s - V_CE(sat)` and `V <= V_aux - swing - m V_BE - I R_s`.
//! - Knee: the clamp takes drive current as `exp((I R_s - V_th(V)) / (N kT/q))` (Shockley's law);
//!   the error amplifier answers a deficit `dV` with proportionally more drive until it saturates
//!   at `dV_sat = knee_sat_fraction * V_set`. Equating the two gives, on the upper branch,
//!   `dV = dV_sat exp((I R_s - I_L(V) R_s) / (N V_T))`; once `dV > dV_sat` the unit sits on the
//!   design's limit line `I = I_L(V)` (`design::model::limit_current_at`, foldback included).
//! - Heat: `T -> T_a + P theta` with time constant tau (exact exponential step); the pass
//!   device dissipates `(V_in - V - I R_s) I`, the clamp `V_clamp I_drive` while it conducts.
//!   Junction drops follow `design::model::junction_at`, so a diode-string limit rises as the
//!   pass device heats (V_sense = n V_F - m V_BE) while a transistor limiter barely moves.
//! - Loads: CV holds V and takes what the unit gives there; CR is the highest intersection of
//!   the curve with V = I R; CC takes the highest point that delivers the set current, else the
//!   output collapses to 0 V and stays there while the setting exceeds what the unit gives at
//!   0 V (foldback latch-up).
//! - Line: the output moves by `line_rejection` volts per volt of input.
//!
//! True values for tests ([`Truth`]): the knee is the current at which the output has fallen
//! 2 % below its no-load value, all junctions at ambient, on the design's own input.

use crate::design::model::{evaluate, limit_current_at, sense_voltage};
use crate::design::{Clamp, Design, InputKind, Params, Stage};
use crate::measure::LoadMode;
use crate::rng::Rng;
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
    /// Clamp junctions: thermal resistance to ambient (small-signal parts in free air, about
    /// 250 degC/W, from memory), time constant, and the drive current they divert when clamping.
    pub clamp_theta: f64,
    pub clamp_tau_s: f64,
    pub clamp_drive_a: f64,
    /// Current the unit draws from its input besides the load (amplifier, reference), amperes.
    pub quiescent_a: f64,
    /// Input rejection: volts of output change per volt of input change (1e-4 is 80 dB, usual
    /// for an op-amp error amplifier; from memory). Gives a small, nonzero line regulation.
    pub line_rejection: f64,
    /// Room temperature, degC; `None`: the design's nominal ambient.
    pub ambient_c: Option<f64>,
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
            clamp_theta: 250.0,
            clamp_tau_s: 3.0,
            clamp_drive_a: 0.010,
            quiescent_a: 0.008,
            line_rejection: 1e-4,
            ambient_c: None,
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

/// Junction temperatures of the unit (degC).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Thermal {
    pub pass_junction_c: f64,
    pub clamp_junction_c: f64,
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

/// One simulated as-built unit and its thermal state.
#[derive(Debug, Clone)]
pub struct SimUnit {
    design: Design,
    /// As-built element values, junctions at ambient.
    params: Params,
    model: UnitModel,
    thermal: Thermal,
    faults: Vec<UnitFault>,
    /// The output collapsed under a CC load at the last step.
    latched: bool,
}

/// Where the input voltage comes from at an operating point.
#[derive(Debug, Clone, Copy, PartialEq)]
enum InputFeed {
    /// The design's input: mean `peak - I/(4 f C)`, trough `peak - I/(2 f C)` (the trough
    /// sets dropout, the mean sets dissipation).
    Design { peak: f64, ripple_per_a: f64 },
    /// A programmable source at this voltage (0 when its output is off).
    Source(f64),
}

impl InputFeed {
    fn mean(self, i: f64) -> f64 {
        match self {
            InputFeed::Design { peak, ripple_per_a } => peak - 0.5 * ripple_per_a * i,
            InputFeed::Source(v) => v,
        }
    }
}

impl SimUnit {
    /// Build an as-built unit: every element drawn within tolerance from `seed` (the line
    /// too), the room at the model's ambient (default: the design's nominal), then the faults
    /// applied.
    pub fn build(
        design: &Design,
        seed: u64,
        faults: &[UnitFault],
        model: UnitModel,
    ) -> Result<SimUnit, UnitError> {
        let mut params = Params::draw(design, &mut Rng::new(seed));
        params.set_ambient(model.ambient_c.unwrap_or(design.environment.ambient_c));
        SimUnit::from_params(design, params, faults, model)
    }

    /// Build a unit from given element values (junction temperatures reset to ambient).
    pub fn from_params(
        design: &Design,
        mut params: Params,
        faults: &[UnitFault],
        mut model: UnitModel,
    ) -> Result<SimUnit, UnitError> {
        for f in faults {
            match f {
                UnitFault::SenseOhms(r) => params.r_sense = *r,
                UnitFault::ReferenceVolts(v) => params.vref = *v,
                UnitFault::ThetaSa(t) => model.default_theta_sa = *t,
                UnitFault::DiodeDelta(n) => {
                    if design.limit.clamp != Clamp::DiodeString {
                        return Err(UnitError::FaultNotApplicable {
                            fault: f.describe(),
                            why: format!(
                                "the clamp is '{}', not a diode string",
                                design.limit.clamp.as_str()
                            ),
                        });
                    }
                    let count = params.diodes as i64 + *n as i64;
                    if count < 1 {
                        return Err(UnitFault::not_applicable(
                            f,
                            "the string would have no diode left",
                        ));
                    }
                    params.diodes = count as u32;
                }
            }
        }
        let ambient = params.ambient_c;
        params.set_ambient(ambient);
        Ok(SimUnit {
            design: design.clone(),
            params,
            model,
            thermal: Thermal {
                pass_junction_c: ambient,
                clamp_junction_c: ambient,
            },
            faults: faults.to_vec(),
            latched: false,
        })
    }

    pub fn design(&self) -> &Design {
        &self.design
    }
    pub fn params(&self) -> &Params {
        &self.params
    }
    pub fn model(&self) -> &UnitModel {
        &self.model
    }
    pub fn thermal(&self) -> Thermal {
        self.thermal
    }
    /// Set the junction temperatures (for tests and for rehearsing a hot unit).
    pub fn set_thermal(&mut self, t: Thermal) {
        self.thermal = t;
    }

    /// Element values with the junctions at their present temperatures.
    fn hot_params(&self) -> Params {
        let mut p = self.params.clone();
        p.pass_junction_c = self.thermal.pass_junction_c;
        p.clamp_junction_c = self.thermal.clamp_junction_c;
        p
    }

    /// Regulated output at the as-built setting (no load, no limit, enough input).
    pub fn regulated_v(&self) -> f64 {
        evaluate(&self.design, &self.params).vout_set
    }

    /// Junction-to-ambient thermal resistance of the pass device, degC/W.
    pub fn pass_theta(&self) -> f64 {
        let p = &self.design.pass;
        let sa = if self
            .faults
            .iter()
            .any(|f| matches!(f, UnitFault::ThetaSa(_)))
        {
            self.model.default_theta_sa
        } else {
            p.theta_sa.unwrap_or(self.model.default_theta_sa)
        };
        p.theta_jc + p.theta_cs + sa
    }

    fn vce_sat(&self) -> f64 {
        self.model.vce_sat.unwrap_or(match self.design.pass.stage {
            Stage::Single => 0.2,
            Stage::Darlington => 0.9,
        })
    }

    fn feed(&self, c: &Controls) -> InputFeed {
        if c.source.in_use {
            return InputFeed::Source(if c.source.output_on {
                c.source.volts.max(0.0)
            } else {
                0.0
            });
        }
        let pt = evaluate(&self.design, &self.params);
        let ripple_per_a = match self.design.input.kind {
            InputKind::Dc => 0.0,
            InputKind::FullWave if self.params.reservoir_f > 0.0 => {
                1.0 / (2.0 * self.design.input.mains_hz * self.params.reservoir_f)
            }
            InputKind::FullWave => 0.0,
        };
        InputFeed::Design {
            peak: pt.vin_no_load,
            ripple_per_a,
        }
    }

    /// The limit line at output `v` with the junctions at their present temperatures.
    fn limit_line(&self, p: &Params, v: f64) -> f64 {
        limit_current_at(&self.design, p, v).max(0.0)
    }

    fn knee_scale(&self, p: &Params) -> f64 {
        self.model.emission * thermal_voltage(p.clamp_junction_c) / p.r_sense
    }

    /// The unit's output characteristic for given element values and input feed.
    fn curve<'a>(&'a self, p: &'a Params, feed: InputFeed) -> Curve<'a> {
        let pt = evaluate(&self.design, p);
        let (peak, per_a) = match feed {
            InputFeed::Design { peak, ripple_per_a } => (peak, ripple_per_a),
            InputFeed::Source(vs) => (vs, 0.0),
        };
        // Line sensitivity, referred to the unit's own input.
        let vset = pt.vout_set + self.model.line_rejection * (peak - pt.vin_no_load);
        let aux_top = self.design.aux.as_ref().map(|aux| {
            let m = self.design.pass.stage.junctions() as f64;
            aux.volts - aux.amplifier_swing_loss_v - m * p.pass_vbe
        });
        Curve {
            unit: self,
            p,
            vset,
            dv_sat: (self.model.knee_sat_fraction * vset).max(1e-6),
            scale: self.knee_scale(p),
            ro: self.model.output_resistance,
            peak,
            per_a,
            sat: self.vce_sat(),
            aux_top,
        }
    }

    /// Most current the unit delivers with its output held at `v` volts (0 above its open
    /// voltage). Non-increasing in `v` for non-foldback clamps.
    pub fn supply_current_at(&self, c: &Controls, v: f64) -> f64 {
        let p = self.hot_params();
        self.curve(&p, self.feed(c)).current_at(v)
    }

    /// The operating point with the load and source as set, junctions at their present
    /// temperatures.
    pub fn operating_point(&self, c: &Controls) -> OperatingPoint {
        let p = self.hot_params();
        let feed = self.feed(c);
        let curve = self.curve(&p, feed);
        let v_open = curve.open_voltage();
        let isup = |v: f64| curve.current_at(v);
        let l = &c.load;
        let mut collapsed = false;
        let (v, i) = if !l.input_on {
            (v_open, 0.0)
        } else {
            match l.mode {
                LoadMode::ConstantVoltage => {
                    let vl = l.voltage.max(0.0);
                    if vl >= v_open {
                        (v_open, 0.0)
                    } else {
                        (vl, isup(vl))
                    }
                }
                LoadMode::ConstantCurrent => {
                    let target = l.current.max(0.0);
                    if target <= 0.0 {
                        (v_open, 0.0)
                    } else {
                        let at_zero = isup(0.0);
                        if self.latched && at_zero < target {
                            // Collapsed before and the unit cannot deliver the set current
                            // even at 0 V: it stays down (foldback latch-up under CC).
                            collapsed = true;
                            (0.0, at_zero)
                        } else {
                            // Highest output at which the unit can supply the set current.
                            match highest_crossing(v_open, |v| isup(v) - target) {
                                Some(v) => (v, target),
                                // No stable point: the output collapses to 0 V.
                                None => {
                                    collapsed = true;
                                    (0.0, at_zero.min(target))
                                }
                            }
                        }
                    }
                }
                LoadMode::ConstantResistance => {
                    let r = l.resistance.max(1e-9);
                    let v = highest_crossing(v_open, |v| isup(v) - v / r).unwrap_or(0.0);
                    (v, v / r)
                }
            }
        };
        let vin = feed.mean(i);
        let pass_w = ((vin - v - i * p.r_sense) * i).max(0.0);
        let il = self.limit_line(&p, v);
        let clamp_share = if il <= 0.0 {
            1.0
        } else {
            ((i - il) / self.knee_scale(&p)).min(0.0).exp()
        };
        let iin = if vin > 0.0 {
            i + self.model.quiescent_a + v / (p.fb_top + p.fb_bottom)
        } else {
            0.0
        };
        OperatingPoint {
            vout: v,
            iout: i,
            vin,
            iin,
            pass_w,
            clamp_share,
            case_c: self.case_temperature(),
            collapsed,
        }
    }

    /// Pass device case temperature: the junction's rise scaled by the case-to-ambient share of
    /// the thermal path (junction and heatsink lumped into one time constant).
    pub fn case_temperature(&self) -> f64 {
        let p = &self.design.pass;
        let theta = self.pass_theta();
        let share = if theta > 0.0 {
            (theta - p.theta_jc) / theta
        } else {
            0.0
        };
        let ta = self.params.ambient_c;
        ta + (self.thermal.pass_junction_c - ta) * share
    }

    /// Let `dt` seconds pass with the load and source held as set: the junctions move towards
    /// their steady temperatures (exact exponential steps; the operating point is re-solved
    /// between steps). Returns the operating point at the end.
    pub fn advance(&mut self, c: &Controls, dt: f64) -> OperatingPoint {
        if dt > 0.0 && dt.is_finite() {
            let steps = ((dt / 0.1).ceil() as usize).clamp(1, 200);
            let h = dt / steps as f64;
            for _ in 0..steps {
                let op = self.operating_point(c);
                self.heat(op, h);
                self.latched = op.collapsed;
            }
        }
        let op = self.operating_point(c);
        self.latched = op.collapsed;
        op
    }

    /// One thermal step of `dt` seconds at the dissipation of `op`.
    pub fn heat(&mut self, op: OperatingPoint, dt: f64) {
        let ta = self.params.ambient_c;
        let target = ta + op.pass_w * self.pass_theta();
        self.thermal.pass_junction_c = first_order_step(
            self.thermal.pass_junction_c,
            target,
            self.model.pass_tau_s,
            dt,
        );
        let p = self.hot_params();
        let clamp_v = match self.design.limit.clamp {
            Clamp::DiodeString => p.diodes as f64 * p.diode_vf,
            Clamp::Transistor | Clamp::Foldback => p.limiter_vbe,
        };
        let clamp_w = clamp_v * self.model.clamp_drive_a * op.clamp_share;
        let target = ta + clamp_w * self.model.clamp_theta;
        self.thermal.clamp_junction_c = first_order_step(
            self.thermal.clamp_junction_c,
            target,
            self.model.clamp_tau_s,
            dt,
        );
    }

    /// The true values of this unit (junctions at ambient, design input).
    pub fn truth(&self) -> Truth {
        let cold = self.params.clone();
        let feed = self.feed(&Controls::default());
        let curve = self.curve(&cold, feed);
        let no_load_v = curve.open_voltage();
        Truth {
            regulated_v: self.regulated_v(),
            no_load_v,
            output_resistance: self.model.output_resistance,
            knee_current: curve.current_at(0.98 * no_load_v),
            short_circuit_current: curve.current_at(0.0),
            limit_line_current: limit_current_at(&self.design, &cold, self.regulated_v()),
            sense_v: sense_voltage(&self.design, &cold),
            ambient_c: cold.ambient_c,
            pass_theta: self.pass_theta(),
            pass_tau_s: self.model.pass_tau_s,
            params: cold,
            faults: self.faults.iter().map(UnitFault::describe).collect(),
        }
    }
}

/// The output characteristic of one unit at fixed temperatures and input feed.
struct Curve<'a> {
    unit: &'a SimUnit,
    p: &'a Params,
    vset: f64,
    dv_sat: f64,
    scale: f64,
    ro: f64,
    peak: f64,
    per_a: f64,
    sat: f64,
    aux_top: Option<f64>,
}

impl Curve<'_> {
    /// Most current the headroom allows with the output at `v`: at the ripple trough
    /// `V = peak - I per_a - I R_s - sat`, and below the amplifier's own rail when the design
    /// has one.
    fn dropout_current(&self, v: f64) -> f64 {
        let rs = self.p.r_sense;
        let mut i = (self.peak - self.sat - v) / (rs + self.per_a);
        if let Some(top) = self.aux_top {
            i = i.min((top - v) / rs);
        }
        i.max(0.0)
    }

    /// Most current delivered with the output held at `v`.
    fn current_at(&self, v: f64) -> f64 {
        let v = v.max(0.0);
        let i_drop = self.dropout_current(v);
        if i_drop <= 0.0 {
            return 0.0;
        }
        let il = self.unit.limit_line(self.p, v);
        let (vset, ro, dv, s) = (self.vset, self.ro, self.dv_sat, self.scale);
        // g(I) = V_set - R_out I - dV_sat exp((I - I_L)/scale) - V: decreasing and concave,
        // so Newton's method from the right end approaches the root from the right.
        let g = |i: f64| vset - ro * i - dv * ((i - il) / s).min(700.0).exp() - v;
        let i_reg = if g(il) >= 0.0 {
            il
        } else if g(0.0) <= 0.0 {
            0.0
        } else {
            let mut x = il;
            for _ in 0..200 {
                let e = dv * ((x - il) / s).exp();
                let gx = vset - ro * x - e - v;
                let slope = -ro - e / s;
                let next = (x - gx / slope).clamp(0.0, x);
                let done = (x - next).abs() <= 1e-14 * il.max(1e-9);
                x = next;
                if done {
                    break;
                }
            }
            x
        };
        i_reg.min(i_drop)
    }

    /// Output voltage with no load: the regulated value, unless the headroom is short.
    fn open_voltage(&self) -> f64 {
        if self.current_at(0.0) <= 0.0 {
            return 0.0;
        }
        let il = self.unit.limit_line(self.p, self.vset);
        let v_reg = self.vset - self.dv_sat * (-il / self.scale).exp();
        let mut v = v_reg.min(self.peak - self.sat);
        if let Some(top) = self.aux_top {
            v = v.min(top);
        }
        v.max(0.0)
    }
}

impl UnitFault {
    fn not_applicable(f: &UnitFault, why: &str) -> UnitError {
        UnitError::FaultNotApplicable {
            fault: f.describe(),
            why: why.to_string(),
        }
    }
}

/// Highest `v` in `[0, top]` where `f` changes from negative (above) to non-negative (below),
/// scanning down from `top` on a grid and refining by bisection. `None` when `f < 0` everywhere.
fn highest_crossing(top: f64, f: impl Fn(f64) -> f64) -> Option<f64> {
    const GRID: usize = 400;
    if top <= 0.0 {
        return if f(0.0) >= 0.0 { Some(0.0) } else { None };
    }
    let mut prev_v = top;
    if f(top) >= 0.0 {
        return Some(top);
    }
    for k in 1..=GRID {
        let v = top * (GRID - k) as f64 / GRID as f64;
        if f(v) >= 0.0 {
            let (mut lo, mut hi) = (v, prev_v); // f(lo) >= 0, f(hi) < 0
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if f(mid) >= 0.0 {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            return Some(lo);
        }
        prev_v = v;
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    fn design(name: &str) -> Design {
        let path = format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"));
        Design::load(std::path::Path::new(&path)).expect("sample design loads")
    }
    fn lab() -> Design {
        design("teaching-lab-0-20v.toml")
    }
    fn fold() -> Design {
        design("fixed-12v-3a-foldback.toml")
    }
    fn unit(d: &Design, faults: &[UnitFault]) -> SimUnit {
        SimUnit::build(d, 11, faults, UnitModel::default()).unwrap()
    }
    fn load(mode: LoadMode, value: f64) -> Controls {
        let mut c = Controls::default();
        c.load.mode = mode;
        c.load.input_on = true;
        match mode {
            LoadMode::ConstantCurrent => c.load.current = value,
            LoadMode::ConstantVoltage => c.load.voltage = value,
            LoadMode::ConstantResistance => c.load.resistance = value,
        }
        c
    }

    #[test]
    fn thermal_voltage_at_25c_is_25_69_mv() {
        // kT/q at 298.15 K = 25.69 mV (SI 2019 constants; textbook value).
        assert!((thermal_voltage(25.0) - 0.025_693).abs() < 2e-6);
    }

    #[test]
    fn first_order_step_reaches_63_percent_at_one_time_constant() {
        // Step response of a first-order system: 1 - e^-1 = 63.2 % at t = tau (textbook).
        let v = first_order_step(0.0, 1.0, 8.0, 8.0);
        assert!((v - 0.632_12).abs() < 1e-4, "{v}");
        let v = first_order_step(25.0, 125.0, 5.0, 5.0);
        assert!((v - (25.0 + 63.212)).abs() < 1e-2, "{v}");
    }

    #[test]
    fn regulated_output_follows_vref_times_one_plus_rt_over_rb() {
        // Non-inverting amplifier: V_out = V_ref (1 + R_t / R_b) (textbook).
        let d = fold();
        let u = unit(&d, &[]);
        let p = u.params();
        let expected = p.vref * (1.0 + p.fb_top / p.fb_bottom);
        assert!((u.regulated_v() - expected).abs() < 1e-9);
        let op = u.operating_point(&Controls::default());
        assert!(
            (op.vout - expected).abs() < 1e-6,
            "{} vs {expected}",
            op.vout
        );
        assert_eq!(op.iout, 0.0);
        // The drawn unit differs from nominal 12 V only within the element tolerances.
        assert!((expected - 12.0).abs() < 0.3);
    }

    #[test]
    fn output_resistance_is_minus_dv_di_in_regulation() {
        // R_out = -dV/dI over the regulation region (definition of output resistance; common practice).
        let d = fold();
        let u = unit(&d, &[]);
        let a = u.operating_point(&load(LoadMode::ConstantCurrent, 0.5));
        let b = u.operating_point(&load(LoadMode::ConstantCurrent, 1.5));
        assert!((a.iout - 0.5).abs() < 1e-12 && (b.iout - 1.5).abs() < 1e-12);
        let r = -(b.vout - a.vout) / (b.iout - a.iout);
        assert!((r - u.model().output_resistance).abs() < 1e-5, "{r}");
    }

    #[test]
    fn diode_string_limit_line_away_from_knee() {
        // V_sense = n V_F - m V_BE, I_lim = V_sense / R_sense (textbook relation; common practice).
        let d = lab();
        let u = unit(&d, &[]);
        let p = u.params();
        let expected = (p.diodes as f64 * p.diode_vf - 2.0 * p.pass_vbe) / p.r_sense;
        let vset = u.regulated_v();
        for frac in [0.1, 0.5, 0.8] {
            let op = u.operating_point(&load(LoadMode::ConstantVoltage, frac * vset));
            assert!(
                (op.iout - expected).abs() < 1e-9,
                "at {frac}: {} vs {expected}",
                op.iout
            );
        }
    }

    #[test]
    fn foldback_limit_line_and_short_circuit() {
        // k = Rb/(Rt+Rb); I(V) = (V_BE + (1-k) V)/(k R_s); I_sc = V_BE/(k R_s) (common practice).
        let d = fold();
        let u = unit(&d, &[]);
        let p = u.params();
        let k = p.fold_bottom / (p.fold_top + p.fold_bottom);
        for v in [2.0, 6.0, 9.0] {
            let expected = (p.limiter_vbe + (1.0 - k) * v) / (k * p.r_sense);
            let op = u.operating_point(&load(LoadMode::ConstantVoltage, v));
            assert!((op.iout - expected).abs() < 1e-9, "{v}: {}", op.iout);
        }
        let isc = p.limiter_vbe / (k * p.r_sense);
        let op = u.operating_point(&load(LoadMode::ConstantResistance, 1e-4));
        assert!((op.iout - isc).abs() / isc < 1e-3, "{} vs {isc}", op.iout);
        assert!((u.truth().short_circuit_current - isc).abs() < 1e-9);
    }

    #[test]
    fn knee_is_soft_over_a_few_thermal_voltages() {
        // Upper branch: dV = dV_sat exp((I - I_L) R_s / (N kT/q)) (Shockley's law, module doc).
        // At the 2 % point: I = I_L + (N V_T / R_s) ln(0.02 V0 / dV_sat) - R_out I, so the knee sits
        // ln(0.03/0.02) = 0.405 thermal voltages of sense drop below the sharp limit line.
        let d = lab();
        let u = unit(&d, &[]);
        let t = u.truth();
        let p = u.params();
        let vt = thermal_voltage(p.ambient_c);
        let dv_sat = u.model().knee_sat_fraction * t.regulated_v;
        let v = 0.98 * t.no_load_v;
        let il = t.limit_line_current;
        let ro = u.model().output_resistance;
        // Solve t.regulated_v - ro I - dv_sat e^{(I-il)Rs/vt} = v directly for a check.
        let deficit = t.regulated_v - ro * t.knee_current - v;
        let expected = il + vt / p.r_sense * (deficit / dv_sat).ln();
        assert!((t.knee_current - expected).abs() < 1e-6);
        let below_mv = (il - t.knee_current) * p.r_sense * 1e3;
        assert!(below_mv > 5.0 && below_mv < 30.0, "{below_mv} mV");
        // Between a 0.1 % drop and saturation the sense drop moves by tens of millivolts.
        let i_01 = u.supply_current_at(&Controls::default(), 0.999 * t.no_load_v);
        let span_mv = (il - i_01) * p.r_sense * 1e3;
        assert!(span_mv > 40.0 && span_mv < 150.0, "{span_mv} mV");
    }

    #[test]
    fn cc_load_sinks_set_current_then_collapses_above_limit() {
        let d = lab();
        let u = unit(&d, &[]);
        let t = u.truth();
        let op = u.operating_point(&load(LoadMode::ConstantCurrent, 0.8));
        assert!((op.iout - 0.8).abs() < 1e-12);
        let expected = t.regulated_v - 0.8 * t.output_resistance;
        assert!(
            (op.vout - expected).abs() < 1e-5,
            "{} vs {expected} {t:?}",
            op.vout
        );
        // Above the limit a CC load has no operating point on the upper branch: the output
        // collapses onto the limit line at 0 V (common practice).
        let op = u.operating_point(&load(LoadMode::ConstantCurrent, t.limit_line_current * 1.2));
        assert!(op.vout < 1e-9, "{}", op.vout);
        assert!((op.iout - t.short_circuit_current).abs() < 1e-9);
    }

    #[test]
    fn foldback_cc_between_short_and_knee_stays_on_upper_branch() {
        let d = fold();
        let u = unit(&d, &[]);
        let t = u.truth();
        let i = 0.5 * (t.short_circuit_current + t.knee_current);
        let op = u.operating_point(&load(LoadMode::ConstantCurrent, i));
        assert!((op.iout - i).abs() < 1e-12);
        assert!(op.vout > 0.99 * t.no_load_v - i * t.output_resistance);
    }

    #[test]
    fn foldback_latches_low_under_cc_until_the_setting_is_below_short_circuit() {
        // A foldback supply driven into collapse by a CC load stays down while the load asks
        // for more than I_sc (common practice: foldback supplies can latch low under CC).
        let d = fold();
        let mut u = unit(&d, &[]);
        let t = u.truth();
        let between = 0.5 * (t.short_circuit_current + t.knee_current);
        let op = u.advance(&load(LoadMode::ConstantCurrent, t.knee_current * 1.2), 0.01);
        assert!(op.collapsed && op.vout == 0.0);
        let op = u.advance(&load(LoadMode::ConstantCurrent, between), 0.01);
        assert!(op.collapsed && op.vout == 0.0, "{op:?}");
        assert!((op.iout - t.short_circuit_current).abs() < 0.01 * t.short_circuit_current);
        let op = u.advance(
            &load(LoadMode::ConstantCurrent, 0.5 * t.short_circuit_current),
            0.01,
        );
        assert!(!op.collapsed && op.vout > 0.99 * t.no_load_v, "{op:?}");
        let op = u.advance(&load(LoadMode::ConstantCurrent, between), 0.01);
        assert!(!op.collapsed && op.vout > 0.99 * t.no_load_v, "{op:?}");
    }

    #[test]
    fn cr_load_meets_ohms_law() {
        // Regulation region: V = V_set R / (R + R_out) (voltage divider); always V = I R.
        let d = fold();
        let u = unit(&d, &[]);
        let t = u.truth();
        let r = 10.0;
        let op = u.operating_point(&load(LoadMode::ConstantResistance, r));
        assert!((op.vout - op.iout * r).abs() < 1e-6);
        let expected = t.regulated_v * r / (r + t.output_resistance);
        assert!(
            (op.vout - expected).abs() < 1e-6,
            "{} vs {expected}",
            op.vout
        );
        // In the limit region: on the limit line and on V = I R.
        let r = 1.0;
        let op = u.operating_point(&load(LoadMode::ConstantResistance, r));
        let p = u.params();
        let k = p.fold_bottom / (p.fold_top + p.fold_bottom);
        // Intersection of I = (V_BE + (1-k) V)/(k R_s) with V = I R.
        let v = p.limiter_vbe * r / (k * p.r_sense - (1.0 - k) * r);
        assert!((op.vout - v).abs() < 1e-6, "{} vs {v}", op.vout);
    }

    #[test]
    fn cv_load_above_open_voltage_draws_nothing_and_off_input_draws_nothing() {
        let d = lab();
        let u = unit(&d, &[]);
        let t = u.truth();
        let op = u.operating_point(&load(LoadMode::ConstantVoltage, t.no_load_v + 1.0));
        assert_eq!(op.iout, 0.0);
        let mut c = load(LoadMode::ConstantCurrent, 1.0);
        c.load.input_on = false;
        assert_eq!(u.operating_point(&c).iout, 0.0);
    }

    #[test]
    fn dropout_when_the_source_is_too_low() {
        // Headroom: V_out <= V_in - I R_s - V_CE(sat) (common practice).
        let d = fold();
        let u = unit(&d, &[]);
        let t = u.truth();
        let mut c = load(LoadMode::ConstantCurrent, 1.0);
        c.source = SourceSetting {
            in_use: true,
            volts: t.regulated_v + 1.0,
            output_on: true,
        };
        let op = u.operating_point(&c);
        let expected = t.regulated_v + 1.0 - 1.0 * t.params.r_sense - 0.9;
        assert!(
            (op.vout - expected).abs() < 1e-6,
            "{} vs {expected}",
            op.vout
        );
        c.source.output_on = false;
        let op = u.operating_point(&c);
        assert_eq!((op.vout, op.iout), (0.0, 0.0));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(200))]
        #[test]
        fn every_load_setting_gives_a_physical_operating_point(
            mode in 0u8..3,
            value in 0.0f64..40.0,
            source in proptest::option::of(0.0f64..60.0),
            seed in 0u64..50,
            foldback in proptest::bool::ANY,
        ) {
            let d = if foldback { fold() } else { lab() };
            let u = SimUnit::build(&d, seed, &[], UnitModel::default()).unwrap();
            let mode = [LoadMode::ConstantCurrent, LoadMode::ConstantVoltage,
                LoadMode::ConstantResistance][mode as usize];
            let mut c = load(mode, value.max(1e-3));
            if let Some(v) = source {
                c.source = SourceSetting { in_use: true, volts: v, output_on: true };
            }
            let op = u.operating_point(&c);
            let open = u.operating_point(&Controls { source: c.source, ..Controls::default() });
            for x in [op.vout, op.iout, op.vin, op.iin, op.pass_w] {
                proptest::prop_assert!(x.is_finite() && x >= 0.0, "{op:?}");
            }
            // Never above the open-circuit voltage; never more than the unit can give there.
            proptest::prop_assert!(op.vout <= open.vout + 1e-9, "{op:?} {open:?}");
            proptest::prop_assert!(op.iout <= u.supply_current_at(&c, op.vout) + 1e-9);
            // The pass device obeys energy balance: P = (V_in - V_out - I R_s) I >= 0.
            let p = (op.vin - op.vout - op.iout * u.params().r_sense) * op.iout;
            proptest::prop_assert!((op.pass_w - p.max(0.0)).abs() < 1e-9);
            if mode == LoadMode::ConstantResistance {
                proptest::prop_assert!((op.vout - op.iout * value.max(1e-3)).abs() < 1e-6);
            }
        }
    }

    #[test]
    fn a_hotter_room_moves_the_diode_string_limit() {
        // V_sense = n V_F - m V_BE with every junction 2 mV/degC lower at +10 degC: the
        // threshold changes by (n - m)(-2 mV/degC)(10 degC) (textbook tempco; common practice).
        let d = lab();
        let cold = unit(&d, &[]).truth();
        let model = UnitModel {
            ambient_c: Some(35.0),
            ..UnitModel::default()
        };
        let hot = SimUnit::build(&d, 11, &[], model).unwrap().truth();
        let n = cold.params.diodes as f64;
        let expected = cold.sense_v + (n - 2.0) * -2e-3 * 10.0;
        assert!(
            (hot.sense_v - expected).abs() < 1e-12,
            "{} vs {expected}",
            hot.sense_v
        );
        assert_eq!(hot.ambient_c, 35.0);
    }

    #[test]
    fn line_change_moves_the_output_by_the_input_rejection() {
        // Line regulation: dV_out = rejection * dV_in while headroom lasts (80 dB -> 1e-4 V/V).
        let d = fold();
        let u = unit(&d, &[]);
        let mut c = load(LoadMode::ConstantCurrent, 1.0);
        c.source = SourceSetting {
            in_use: true,
            volts: 18.0,
            output_on: true,
        };
        let a = u.operating_point(&c);
        c.source.volts = 24.0;
        let b = u.operating_point(&c);
        let k = u.model().line_rejection;
        assert!(
            ((b.vout - a.vout) - 6.0 * k).abs() < 1e-9,
            "{} {}",
            a.vout,
            b.vout
        );
    }

    #[test]
    fn transistor_clamp_on_a_dc_input() {
        // Transistor limiter: I_lim = V_BE / R_sense (common practice); DC input: dropout
        // at V_in - I R_s - V_CE(sat) with no ripple.
        let text = std::fs::read_to_string(format!(
            "{}/samples/teaching-lab-0-20v.toml",
            env!("CARGO_MANIFEST_DIR")
        ))
        .unwrap()
        .replace(
            "kind = \"full_wave\"\nsecondary_vrms = 26.0",
            "kind = \"dc\"\nvolts = 24.0",
        )
        .replace("clamp = \"diode_string\"", "clamp = \"transistor\"")
        .replace("diodes = 3\n", "");
        let d = Design::parse(&text, "inline").unwrap();
        assert_eq!(d.limit.clamp, Clamp::Transistor);
        let u = unit(&d, &[]);
        let t = u.truth();
        let p = u.params();
        assert!((t.short_circuit_current - p.limiter_vbe / p.r_sense).abs() < 1e-9);
        let op = u.operating_point(&load(LoadMode::ConstantVoltage, 5.0));
        assert!((op.iout - p.limiter_vbe / p.r_sense).abs() < 1e-9);
        // DC input at the drawn line: the input does not sag with load.
        let vin = 24.0 * p.line;
        assert!((op.vin - vin).abs() < 1e-9, "{} vs {vin}", op.vin);
        assert!(t.no_load_v <= vin - 0.9 + 1e-9);
    }

    #[test]
    fn faults_change_the_limit_as_the_formulas_say() {
        let d = lab();
        let base = unit(&d, &[]).truth();
        let t = unit(&d, &[UnitFault::SenseOhms(0.56)]).truth();
        // I_lim = V_sense / R_sense with the wrong resistor.
        assert!((t.limit_line_current - base.sense_v / 0.56).abs() < 1e-9);
        let t = unit(&d, &[UnitFault::DiodeDelta(1)]).truth();
        // One more diode adds one V_F to V_sense = n V_F - m V_BE.
        assert!((t.sense_v - (base.sense_v + base.params.diode_vf)).abs() < 1e-9);
        assert!(SimUnit::build(
            &fold(),
            1,
            &[UnitFault::DiodeDelta(1)],
            UnitModel::default()
        )
        .is_err());
    }

    #[test]
    fn fault_specs_parse_and_reject() {
        assert_eq!(
            UnitFault::parse("sense=0.56"),
            Ok(UnitFault::SenseOhms(0.56))
        );
        assert_eq!(UnitFault::parse("diodes=+1"), Ok(UnitFault::DiodeDelta(1)));
        assert_eq!(UnitFault::parse("diodes=-1"), Ok(UnitFault::DiodeDelta(-1)));
        assert!(UnitFault::parse("diodes=1").is_err());
        assert!(UnitFault::parse("sense=-2").is_err());
        assert!(UnitFault::parse("bogus=1").is_err());
        assert!(UnitFault::parse("sense").is_err());
    }

    #[test]
    fn diode_string_limit_rises_as_the_pass_device_heats() {
        // V_sense = n V_F(T_clamp) - m V_BE(T_pass); junction drops fall 2 mV/degC (textbook),
        // so a hotter pass device raises the limit by m * 2 mV/degC / R_s per degree.
        let d = lab();
        let mut u = unit(&d, &[]);
        let cold = u.truth();
        let short = load(LoadMode::ConstantResistance, 1e-3);
        let i0 = u.operating_point(&short).iout;
        let op = u.advance(&short, 15.0);
        let th = u.thermal();
        assert!(th.pass_junction_c > cold.ambient_c + 20.0, "{th:?}");
        assert!(th.clamp_junction_c - cold.ambient_c < 0.2 * (th.pass_junction_c - cold.ambient_c));
        assert!(op.iout > i0 * 1.05, "{} -> {}", i0, op.iout);
        let p = u.params();
        let tc = d.environment.junction_tempco_mv_per_c * 1e-3;
        let vs = p.diodes as f64 * (p.diode_vf + tc * (th.clamp_junction_c - 25.0))
            - 2.0 * (p.pass_vbe + tc * (th.pass_junction_c - 25.0));
        assert!(
            (op.iout - vs / p.r_sense).abs() < 1e-3 * op.iout,
            "{} vs {}",
            op.iout,
            vs / p.r_sense
        );
    }

    #[test]
    fn pass_junction_heats_with_first_order_response_at_constant_power() {
        // With dissipation held (source-fed, CV load on the limit line) the junction follows
        // T_a + P theta (1 - e^{-t/tau}): T_j = T_a + P (theta_jc + theta_cs + theta_sa) (thermal Ohm's law; common practice).
        let d = fold();
        let mut u = unit(&d, &[]);
        let op = u.operating_point(&load(LoadMode::ConstantCurrent, 2.0));
        let tau = u.model().pass_tau_s;
        let ta = u.params().ambient_c;
        u.heat(op, tau);
        let rise = u.thermal().pass_junction_c - ta;
        let full = op.pass_w * u.pass_theta();
        assert!((rise / full - 0.632_12).abs() < 1e-4, "{rise} of {full}");
    }
}
