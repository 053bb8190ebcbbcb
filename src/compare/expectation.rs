//! What the comparison expects of a design: a small local view of the design model's bands
//! (as built, and the operating envelope beside them) and its limit model, so judging does not
//! depend on how the design is computed. Pure.
use serde::{Deserialize, Serialize};

/// Lower and upper limit of a band (the design model's interval).
pub type Limits = crate::design::Interval;
/// Monte Carlo spread of a quantity (the design model's statistics).
pub type MonteCarlo = crate::design::McStats;
/// What the design expects of one quantity: nominal, worst case, Monte Carlo.
pub type ExpectedBand = crate::design::Band;

/// How the current limit is made, with nominal element values (for likely causes).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Clamp {
    /// Transistor limiter: I_lim = V_BE / R_sense.
    Transistor { v_be: f64 },
    /// Diode string: V_sense = n V_F - m V_BE.
    DiodeString {
        diodes: u32,
        v_f: f64,
        pass_junctions: u32,
        v_be: f64,
    },
    /// Foldback limiter with divider ratio k: I_sc = V_BE / (k R_sense).
    Foldback { v_be: f64, k: f64 },
}

impl Clamp {
    /// The sense voltage at which the clamp holds the limit (for foldback: at short circuit).
    pub fn sense_voltage(&self) -> f64 {
        match *self {
            Clamp::Transistor { v_be } => v_be,
            Clamp::DiodeString {
                diodes,
                v_f,
                pass_junctions,
                v_be,
            } => diodes as f64 * v_f - pass_junctions as f64 * v_be,
            Clamp::Foldback { v_be, k } => v_be / k,
        }
    }
}

/// The limit model: sense resistance and clamp, with what is needed to read it hot.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LimitModel {
    pub sense_ohms: f64,
    pub clamp: Clamp,
    /// Junction drop temperature coefficient, V per degC (about -0.002 V/degC, textbook).
    #[serde(default = "default_tempco")]
    pub tempco_v_per_c: f64,
    /// Pass device junction-to-case thermal resistance, degC/W.
    #[serde(default)]
    pub pass_theta_jc: Option<f64>,
}

fn default_tempco() -> f64 {
    -0.002
}

/// Temperature at which the design's junction drops are given (degC).
pub const JUNCTION_REFERENCE_C: f64 = 25.0;

impl LimitModel {
    /// The clamp's sense voltage with the pass junctions at `pass_junction_c`: a diode
    /// string's threshold rises as the pass junctions heat (V_sense = n V_F - m V_BE(T)); a
    /// transistor limiter sits off the heatsink and is read at its reference temperature.
    pub fn sense_voltage_at(&self, pass_junction_c: Option<f64>) -> f64 {
        match (self.clamp, pass_junction_c) {
            (
                Clamp::DiodeString {
                    diodes,
                    v_f,
                    pass_junctions,
                    v_be,
                },
                Some(tj),
            ) => {
                let v_be_hot = v_be + self.tempco_v_per_c * (tj - JUNCTION_REFERENCE_C);
                diodes as f64 * v_f - pass_junctions as f64 * v_be_hot
            }
            _ => self.clamp.sense_voltage(),
        }
    }

    /// Estimated pass junction temperature from the case reading and dissipation at the knee
    /// (T_j = T_case + P theta_jc), when both are known.
    pub fn pass_junction_c(&self, k: &crate::analysis::KneeConditions) -> Option<f64> {
        let t = k.case_temperature?;
        Some(t + k.pass_watts.unwrap_or(0.0) * self.pass_theta_jc.unwrap_or(0.0))
    }
}

/// The operating envelope's bands (part tolerances, the ambient range and line tolerance):
/// reported beside the as-built band a bench reading is judged by.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EnvelopeBands {
    pub vout: ExpectedBand,
    pub limit_current: ExpectedBand,
    pub short_circuit_current: ExpectedBand,
}

/// The design's expectation as the comparison needs it: the bands of the measured metrics,
/// the limit model with nominal element values, and the expected V-I curves (nominal and the
/// worst-case edges; empty when unknown). The bands are the design's as-built bands (part
/// tolerances at its nominal ambient and input), the knee's spanning a cold unit to its
/// settled self-heated knee and the short's a cold and a running unit: what a bench reading
/// of a good unit may be when the record does not say how hot the pass device was.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DesignExpectation {
    pub design_name: String,
    pub vout: ExpectedBand,
    pub limit_current: ExpectedBand,
    pub short_circuit_current: Option<ExpectedBand>,
    /// The operating envelope's bands, for reference (`None` when not known).
    #[serde(default)]
    pub envelope: Option<EnvelopeBands>,
    pub limit: Option<LimitModel>,
    #[serde(default)]
    pub curve: Vec<(f64, f64)>,
    #[serde(default)]
    pub curve_low: Vec<(f64, f64)>,
    #[serde(default)]
    pub curve_high: Vec<(f64, f64)>,
    /// The design's rated (maximum continuous) load current, A: where load regulation is
    /// taken.
    #[serde(default)]
    pub rated_load_a: Option<f64>,
    /// The design itself, for the diagnosis (fitting single-part hypotheses through the
    /// design model); `None` when only the bands are known.
    #[serde(skip)]
    pub design: Option<Box<crate::design::Design>>,
    /// The design's as-built bands (part tolerances only, at its nominal ambient and input),
    /// cold ones included: the spread the diagnosis scores a bench measurement against, and
    /// the bands a reading taken at a known case temperature is judged by once moved to that
    /// temperature; `None` when only the bands above are known (both then use those).
    #[serde(skip)]
    pub as_built: Option<crate::design::AsBuiltBands>,
}

impl DesignExpectation {
    /// The comparison's view of a design and its computed expectation.
    pub fn from_design(d: &crate::design::Design, e: &crate::design::Expectation) -> Self {
        use crate::design::Clamp as C;
        let clamp = match d.limit.clamp {
            C::Transistor => Some(Clamp::Transistor {
                v_be: d.limit.vbe_v,
            }),
            C::DiodeString => d.limit.diodes.map(|n| Clamp::DiodeString {
                diodes: n,
                v_f: d.limit.diode_vf_v,
                pass_junctions: d.pass.stage.junctions(),
                v_be: d.pass.vbe_v,
            }),
            C::Foldback => match (&d.limit.divider_top, &d.limit.divider_bottom) {
                (Some(t), Some(b)) if t.ohms + b.ohms > 0.0 => Some(Clamp::Foldback {
                    v_be: d.limit.vbe_v,
                    k: b.ohms / (t.ohms + b.ohms),
                }),
                _ => None,
            },
        };
        let a = &e.as_built;
        DesignExpectation {
            design_name: e.design_name.clone(),
            vout: a.vout,
            limit_current: a.limit_current_heated,
            short_circuit_current: Some(a.short_circuit_current),
            envelope: Some(EnvelopeBands {
                vout: e.vout.setting_band,
                limit_current: e.limit_current,
                short_circuit_current: e.short_circuit_current,
            }),
            limit: clamp.map(|clamp| LimitModel {
                sense_ohms: d.limit.sense.ohms,
                clamp,
                tempco_v_per_c: d.environment.junction_tempco_mv_per_c / 1000.0,
                pass_theta_jc: Some(d.pass.theta_jc),
            }),
            curve: e.curve.clone(),
            curve_low: e.curve_low.clone(),
            curve_high: e.curve_high.clone(),
            rated_load_a: Some(d.load.max_current_a).filter(|i| i.is_finite() && *i > 0.0),
            design: Some(Box::new(d.clone())),
            as_built: Some(e.as_built.clone()),
        }
    }
}
