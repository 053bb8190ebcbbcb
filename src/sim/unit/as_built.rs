//! One as-built unit: element values drawn within tolerance, its thermal state, and how it
//! meets the bench's settings (operating points, heating, true values); with its output
//! characteristic at fixed temperatures and input feed (dropout, regulation, the soft knee) and
//! the root finding the load intersections use. Pure.

use super::model::*;
use crate::design::model::{evaluate, limit_current_at, sense_voltage};
use crate::design::{Clamp, ClampMount, Design, InputKind, Params, Stage};
use crate::measure::LoadMode;
use crate::rng::Rng;

/// One simulated as-built unit and its thermal state.
#[derive(Debug, Clone)]
pub struct SimUnit {
    pub(super) design: Design,
    /// As-built element values, junctions at ambient.
    pub(super) params: Params,
    pub(super) model: UnitModel,
    pub(super) thermal: Thermal,
    pub(super) faults: Vec<UnitFault>,
    /// The output collapsed under a CC load at the last step.
    pub(super) latched: bool,
}

/// Where the input voltage comes from at an operating point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum InputFeed {
    /// The design's input: mean `peak - I/(4 f C)`, trough `peak - I/(2 f C)` (the trough
    /// sets dropout, the mean sets dissipation).
    Design {
        peak: f64,
        ripple_per_a: f64,
        /// Transformer sag, volts per ampere (from the design's regulation; 0 without one).
        sag_per_a: f64,
    },
    /// A programmable source at this voltage (0 when its output is off).
    Source(f64),
}

impl InputFeed {
    pub(super) fn mean(self, i: f64) -> f64 {
        match self {
            InputFeed::Design {
                peak,
                ripple_per_a,
                sag_per_a,
            } => peak - (sag_per_a + 0.5 * ripple_per_a) * i,
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
        let mut built = design.clone();
        for f in faults {
            match f {
                UnitFault::Part(p) => p
                    .apply(&mut built, &mut params)
                    .map_err(|why| UnitFault::not_applicable(f, &why))?,
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
            design: built,
            params,
            model,
            thermal: Thermal {
                pass_junction_c: ambient,
                clamp_junction_c: ambient,
                case_c: ambient,
                sink_c: ambient,
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
    pub(super) fn hot_params(&self) -> Params {
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
        let sa = if self.heatsink_missing() {
            self.model.default_theta_sa
        } else {
            p.theta_sa.unwrap_or(self.model.default_theta_sa)
        };
        p.theta_jc + p.theta_cs + sa
    }

    /// Sink-to-ambient thermal resistance of this unit's heatsink, degC/W.
    pub(super) fn theta_sa(&self) -> f64 {
        let p = &self.design.pass;
        self.pass_theta() - p.theta_jc - p.theta_cs
    }

    /// The three-stage thermal network when the network is asked for and the design gives
    /// thermal masses.
    pub(super) fn network(&self) -> Option<([f64; 3], [f64; 3])> {
        if self.model.heat == HeatModel::Lumped {
            return None;
        }
        let mut net = pass_network(&self.design, self.theta_sa())?;
        if self.heatsink_missing() {
            // No heatsink fitted: its heat capacity is not there either. The case reaches
            // ambient through the fault's theta directly, so the sink node keeps only a
            // vanishing capacity (a millionth of the case's: it follows the case at once).
            net.0[2] = net.0[1] * 1e-6;
        }
        Some(net)
    }

    /// The unit was built without its heatsink (the `theta_sa` fault).
    pub(super) fn heatsink_missing(&self) -> bool {
        self.faults
            .iter()
            .any(|f| matches!(f, UnitFault::ThetaSa(_)))
    }

    /// The heat model this unit runs, and why it is the simple one when the network was asked
    /// for (the design does not state the thermal masses the network needs).
    pub fn heat_in_use(&self) -> HeatInUse {
        if self.model.heat == HeatModel::Lumped {
            return HeatInUse {
                model: HeatModel::Lumped,
                note: None,
            };
        }
        if self.network().is_some() {
            return HeatInUse {
                model: HeatModel::Network,
                note: None,
            };
        }
        let missing = match &self.design.pass.thermal_mass {
            None => "the design has no [pass.thermal_mass] table (heat capacities or time \
                     constants of junction, case and heatsink)"
                .to_string(),
            Some(m) => {
                let stages = [
                    ("junction", m.junction_j_per_c.or(m.junction_tau_s)),
                    ("case", m.case_j_per_c.or(m.case_tau_s)),
                    ("sink", m.sink_j_per_c.or(m.sink_tau_s)),
                ];
                let names: Vec<&str> = stages
                    .iter()
                    .filter(|(_, v)| v.is_none())
                    .map(|(n, _)| *n)
                    .collect();
                format!(
                    "[pass.thermal_mass] gives no heat capacity or time constant for the {}",
                    names.join(", ")
                )
            }
        };
        HeatInUse {
            model: HeatModel::Lumped,
            note: Some(format!(
                "thermal network not used: {missing}; the pass device heats as one lumped \
                 stage (time constant {} s)",
                self.model.pass_tau_s
            )),
        }
    }

    pub(super) fn vce_sat(&self) -> f64 {
        self.model.vce_sat.unwrap_or(match self.design.pass.stage {
            Stage::Single => 0.2,
            Stage::Darlington => 0.9,
        })
    }

    pub(super) fn feed(&self, c: &Controls) -> InputFeed {
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
            sag_per_a: transformer_sag_per_a(&self.design, self.params.line),
        }
    }

    /// The limit line at output `v` with the junctions at their present temperatures.
    pub(super) fn limit_line(&self, p: &Params, v: f64) -> f64 {
        limit_current_at(&self.design, p, v).max(0.0)
    }

    pub(super) fn knee_scale(&self, p: &Params) -> f64 {
        let width = match self.model.knee {
            KneeModel::OneJunction => self.model.emission * thermal_voltage(p.clamp_junction_c),
            KneeModel::PerJunction => knee_width_v(
                self.design.limit.clamp,
                p.diodes,
                self.model.emission,
                p.clamp_junction_c,
            ),
        };
        width / p.r_sense
    }

    /// The unit's output characteristic for given element values and input feed.
    pub(super) fn curve<'a>(&'a self, p: &'a Params, feed: InputFeed) -> Curve<'a> {
        let pt = evaluate(&self.design, p);
        let (peak, per_a) = match feed {
            InputFeed::Design {
                peak,
                ripple_per_a,
                sag_per_a,
            } => (peak, ripple_per_a + sag_per_a),
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

    /// Pass device case temperature: from the network when it runs; otherwise the junction's
    /// rise scaled by the case-to-ambient share of the thermal path (junction and heatsink
    /// lumped into one time constant).
    pub fn case_temperature(&self) -> f64 {
        if self.network().is_some() {
            return self.thermal.case_c;
        }
        self.lumped_share(self.pass_theta() - self.design.pass.theta_jc)
    }

    /// Heatsink temperature: from the network when it runs; otherwise the junction's rise
    /// scaled by the sink-to-ambient share of the thermal path.
    pub fn sink_temperature(&self) -> f64 {
        if self.network().is_some() {
            return self.thermal.sink_c;
        }
        self.lumped_share(self.theta_sa())
    }

    /// Ambient plus the share `theta_part / theta` of the pass junction's rise (thermal Ohm's
    /// law on a series path: each resistance takes its share of the rise).
    fn lumped_share(&self, theta_part: f64) -> f64 {
        let theta = self.pass_theta();
        let share = if theta > 0.0 {
            (theta_part / theta).clamp(0.0, 1.0)
        } else {
            0.0
        };
        let ta = self.params.ambient_c;
        ta + (self.thermal.pass_junction_c - ta) * share
    }

    /// The clamp junctions' temperature under the design's stated assumption
    /// (`limit.clamp_mount`): at ambient in free air, or at the heatsink's temperature. The
    /// design model (`design::heating`, `design::dwell`) keeps them there; so does the unit.
    pub fn clamp_temperature(&self) -> f64 {
        match self.design.limit.clamp_mount {
            ClampMount::Ambient => self.params.ambient_c,
            ClampMount::Heatsink => self.sink_temperature(),
        }
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
        if let Some(net) = self.network() {
            step_network(&net, &mut self.thermal, ta, op.pass_w, dt);
        } else {
            let target = ta + op.pass_w * self.pass_theta();
            self.thermal.pass_junction_c = first_order_step(
                self.thermal.pass_junction_c,
                target,
                self.model.pass_tau_s,
                dt,
            );
        }
        if self.network().is_none() {
            // Keep the lumped case and sink estimates in the state too.
            self.thermal.case_c = self.case_temperature();
            self.thermal.sink_c = self.sink_temperature();
        }
        self.thermal.clamp_junction_c = self.clamp_temperature();
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
            heat: self.heat_in_use(),
            pass_stage_tau_s: self
                .network()
                .map(|(c, r)| std::array::from_fn(|i| c[i] * r[i])),
            knee_model: self.model.knee,
            knee_width_v: self.knee_scale(&cold) * cold.r_sense,
            clamp_mount: self.design.limit.clamp_mount,
            params: cold,
            faults: self.faults.iter().map(UnitFault::describe).collect(),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// The output characteristic
// ---------------------------------------------------------------------------------------------

/// The output characteristic of one unit at fixed temperatures and input feed.
pub(super) struct Curve<'a> {
    pub(super) unit: &'a SimUnit,
    pub(super) p: &'a Params,
    pub(super) vset: f64,
    pub(super) dv_sat: f64,
    pub(super) scale: f64,
    pub(super) ro: f64,
    pub(super) peak: f64,
    pub(super) per_a: f64,
    pub(super) sat: f64,
    pub(super) aux_top: Option<f64>,
}

impl Curve<'_> {
    /// Most current the headroom allows with the output at `v`: at the ripple trough
    /// `V = peak - I per_a - I R_s - sat`, and below the amplifier's own rail when the design
    /// has one.
    pub(super) fn dropout_current(&self, v: f64) -> f64 {
        let rs = self.p.r_sense;
        let mut i = (self.peak - self.sat - v) / (rs + self.per_a);
        if let Some(top) = self.aux_top {
            i = i.min((top - v) / rs);
        }
        i.max(0.0)
    }

    /// Most current delivered with the output held at `v`.
    pub(super) fn current_at(&self, v: f64) -> f64 {
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
    pub(super) fn open_voltage(&self) -> f64 {
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
    pub(super) fn not_applicable(f: &UnitFault, why: &str) -> UnitError {
        UnitError::FaultNotApplicable {
            fault: f.describe(),
            why: why.to_string(),
        }
    }
}

/// Highest `v` in `[0, top]` where `f` changes from negative (above) to non-negative (below),
/// scanning down from `top` on a grid and refining by bisection. `None` when `f < 0` everywhere.
pub(super) fn highest_crossing(top: f64, f: impl Fn(f64) -> f64) -> Option<f64> {
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
