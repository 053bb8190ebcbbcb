//! The design file: a TOML description of one linear regulator design (input, reference,
//! feedback divider, pass stage, current-limit clamp, load, auxiliary rail, environment and
//! checking rules): the types that mirror the file and its deserialisation. The rules that check
//! the values are in `rules`, run by `check`; every problem names the file, line and column and
//! says what to fix. It computes nothing about the circuit (see `model`) and never calls it.

use crate::config::{self, Located};
use serde::{Deserialize, Serialize};

/// A resistor (or a potentiometer when `pot` is true: it then ranges from `min_ohms` to `ohms`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Resistor {
    pub ohms: f64,
    #[serde(default = "default_resistor_tolerance")]
    pub tolerance_pct: f64,
    /// Power rating in watts, when known.
    #[serde(default)]
    pub rating_w: Option<f64>,
    /// A potentiometer (variable element) instead of a fixed resistor.
    #[serde(default)]
    pub pot: bool,
    /// Lowest resistance of a potentiometer (end stop or a series resistor), ohms.
    #[serde(default)]
    pub min_ohms: f64,
}

fn default_resistor_tolerance() -> f64 {
    5.0
}

/// General information about the design.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Meta {
    pub name: String,
    #[serde(default)]
    pub revision: Option<String>,
    #[serde(default)]
    pub notes: Option<String>,
    /// Marks invented demonstration data.
    #[serde(default)]
    pub demo: bool,
}

/// How the unregulated input is supplied.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum InputKind {
    /// A DC source (bench supply, battery, pre-regulated rail).
    Dc,
    /// A transformer secondary, full-wave rectifier and reservoir capacitor.
    FullWave,
}

/// The unregulated input.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Input {
    pub kind: InputKind,
    /// DC input: nominal volts.
    #[serde(default)]
    pub volts: Option<f64>,
    /// Line (mains or source) variation, +- percent.
    #[serde(default = "default_line_tolerance")]
    pub line_tolerance_pct: f64,
    /// Full wave: transformer secondary RMS volts at nominal line and rated load.
    #[serde(default)]
    pub secondary_vrms: Option<f64>,
    /// Full wave: rectifier drop (two conducting diodes in a bridge, about 1.4 V).
    #[serde(default = "default_rectifier_drop")]
    pub rectifier_drop_v: f64,
    /// Full wave: mains frequency in hertz.
    #[serde(default = "default_mains_hz")]
    pub mains_hz: f64,
    /// Full wave: reservoir capacitance in microfarads.
    #[serde(default)]
    pub reservoir_uf: Option<f64>,
    /// Full wave: reservoir capacitor tolerance, +- percent (electrolytics: 20 % is common practice).
    #[serde(default = "default_cap_tolerance")]
    pub reservoir_tolerance_pct: f64,
    /// Full wave: transformer regulation, percent: the no-load secondary is `secondary_vrms`
    /// (at rated load) times 1 + regulation / 100. Unset: both taken as `secondary_vrms`.
    #[serde(default)]
    pub regulation_pct: Option<f64>,
    /// Full wave: the reservoir's rated ripple current (RMS amperes).
    #[serde(default)]
    pub reservoir_ripple_rating_a: Option<f64>,
    /// Full wave: the bridge's average forward current rating and its surge rating (I_FSM).
    #[serde(default)]
    pub rectifier_rating_a: Option<f64>,
    #[serde(default)]
    pub rectifier_surge_rating_a: Option<f64>,
}

fn default_line_tolerance() -> f64 {
    10.0
}
fn default_rectifier_drop() -> f64 {
    1.4
}
fn default_mains_hz() -> f64 {
    50.0
}
fn default_cap_tolerance() -> f64 {
    20.0
}

/// How the reference is applied to the error amplifier.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ReferenceAdjust {
    /// The whole reference voltage drives the amplifier.
    #[default]
    Fixed,
    /// A potentiometer wiper takes a fraction of the reference (a 0-to-maximum supply).
    Wiper,
}

/// The voltage reference feeding the error amplifier's non-inverting input.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Reference {
    pub volts: f64,
    #[serde(default = "default_reference_tolerance")]
    pub tolerance_pct: f64,
    #[serde(default)]
    pub adjust: ReferenceAdjust,
    /// Wiper travel used, percent of the reference (only with `adjust = "wiper"`).
    #[serde(default)]
    pub wiper_min_pct: f64,
    #[serde(default = "default_wiper_max")]
    pub wiper_max_pct: f64,
}

fn default_reference_tolerance() -> f64 {
    2.0
}
fn default_wiper_max() -> f64 {
    100.0
}

/// The feedback divider of the non-inverting error amplifier: V_out = V_ref (1 + top / bottom).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Feedback {
    pub top: Resistor,
    pub bottom: Resistor,
}

/// Pass stage arrangement.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Stage {
    /// One NPN pass transistor (one base-emitter junction between drive and output).
    Single,
    /// Darlington pair (two base-emitter junctions).
    Darlington,
}

impl Stage {
    /// Number of base-emitter junctions between the drive node and the emitter.
    pub fn junctions(self) -> u32 {
        match self {
            Stage::Single => 1,
            Stage::Darlington => 2,
        }
    }
}

/// The series-pass device and its thermal path.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Pass {
    pub stage: Stage,
    /// Base-emitter drop per junction at 25 degC and the limit current (0.6-0.7 V for silicon).
    #[serde(default = "default_junction")]
    pub vbe_v: f64,
    /// Part-to-part spread of that drop, +- volts.
    #[serde(default = "default_junction_spread")]
    pub vbe_spread_v: f64,
    /// Minimum collector-emitter voltage the device needs to stay out of saturation.
    #[serde(default = "default_vce_min")]
    pub vce_min_v: f64,
    /// Power rating in watts (datasheet, case at 25 degC).
    pub power_rating_w: f64,
    #[serde(default = "default_tj_max")]
    pub tj_max_c: f64,
    /// Junction to case, case to sink, sink to ambient thermal resistances (degC/W).
    pub theta_jc: f64,
    #[serde(default = "default_theta_cs")]
    pub theta_cs: f64,
    /// Heatsink; absent when not chosen yet (the model then reports the largest allowed).
    #[serde(default)]
    pub theta_sa: Option<f64>,
    /// Lowest current gain of the whole pass stage (h_FE; a Darlington's is the product of
    /// both), at the limit current: the drive the amplifier must give is I / gain. Optional.
    #[serde(default)]
    pub current_gain: Option<f64>,
    /// The device's DC safe operating area, as the datasheet draws it (case at 25 degC).
    #[serde(default)]
    pub soa: Option<Soa>,
    /// Heat capacities (or time constants) of the thermal path, for how long a short may last.
    #[serde(default)]
    pub thermal_mass: Option<ThermalMass>,
}

/// The thermal path's heat capacities: the junction (die and header, charged through
/// theta_jc), the case (through theta_cs) and the heatsink (through theta_sa). Each stage is
/// given either as a heat capacity in J/degC or as its time constant tau = theta x C in
/// seconds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ThermalMass {
    #[serde(default)]
    pub junction_j_per_c: Option<f64>,
    #[serde(default)]
    pub junction_tau_s: Option<f64>,
    #[serde(default)]
    pub case_j_per_c: Option<f64>,
    #[serde(default)]
    pub case_tau_s: Option<f64>,
    #[serde(default)]
    pub sink_j_per_c: Option<f64>,
    #[serde(default)]
    pub sink_tau_s: Option<f64>,
}

/// A datasheet-style DC safe operating area: points (V_CE volts, I_C amperes) along the DC
/// line, V_CE rising, joined straight on log-log axes (the thermal limit and the steeper
/// second-breakdown segment); beyond the last point the device may not be used.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Soa {
    pub points: Vec<[f64; 2]>,
}

fn default_junction() -> f64 {
    0.65
}
fn default_junction_spread() -> f64 {
    0.05
}
fn default_vce_min() -> f64 {
    2.0
}
fn default_tj_max() -> f64 {
    150.0
}
fn default_theta_cs() -> f64 {
    0.5
}

/// Current-limit clamp topology.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Clamp {
    /// A string of diodes from the pass stage's drive node across the pass junctions and the
    /// sense resistor: V_sense = n V_F - m V_BE.
    DiodeString,
    /// A transistor across the pass stage's drive, turned on by the sense drop: I = V_BE / R_s.
    Transistor,
    /// A transistor limiter whose base is fed from a divider, so the limit falls with the output.
    Foldback,
}

impl Clamp {
    pub fn as_str(self) -> &'static str {
        match self {
            Clamp::DiodeString => "diode_string",
            Clamp::Transistor => "transistor",
            Clamp::Foldback => "foldback",
        }
    }
}

/// The current-limit clamp and its sense resistor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Limit {
    pub clamp: Clamp,
    pub sense: Resistor,
    /// Diode string: number of diodes.
    #[serde(default)]
    pub diodes: Option<u32>,
    /// Diode string: forward drop per diode at 25 degC.
    #[serde(default = "default_junction")]
    pub diode_vf_v: f64,
    #[serde(default = "default_junction_spread")]
    pub diode_vf_spread_v: f64,
    /// Transistor / foldback: the limiter transistor's base-emitter drop at 25 degC.
    #[serde(default = "default_junction")]
    pub vbe_v: f64,
    #[serde(default = "default_junction_spread")]
    pub vbe_spread_v: f64,
    /// Foldback: divider from the pass-device end of the sense resistor to ground, its tap on
    /// the limiter's base (top: emitter end to base; bottom: base to ground); the limiter's
    /// emitter sits on the output. k = bottom / (top + bottom).
    #[serde(default)]
    pub divider_top: Option<Resistor>,
    #[serde(default)]
    pub divider_bottom: Option<Resistor>,
    /// Where the clamp's junctions sit thermally: in free air at ambient (default) or on the
    /// pass device's heatsink (then at the sink's temperature).
    #[serde(default)]
    pub clamp_mount: ClampMount,
}

/// Thermal coupling of the clamp's junctions (diodes, limiter transistor).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ClampMount {
    /// In free air at the ambient temperature (their own dissipation is small).
    #[default]
    Ambient,
    /// On the pass device's heatsink: at T_a + P theta_sa.
    Heatsink,
}

impl ClampMount {
    pub fn as_str(self) -> &'static str {
        match self {
            ClampMount::Ambient => "ambient",
            ClampMount::Heatsink => "heatsink",
        }
    }
}

/// The load the design must serve.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Load {
    /// Maximum continuous output current the design is rated for.
    pub max_current_a: f64,
    /// Output setting at which the limit and tests are evaluated (adjustable designs); defaults
    /// to the highest output.
    #[serde(default)]
    pub output_setting_v: Option<f64>,
}

/// An auxiliary (pre-regulated) rail that powers the error amplifier and the reference.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Aux {
    pub volts: f64,
    pub current_a: f64,
    /// Share (0-0.9) of the aux transistor's nominal drop taken by a series collector resistor.
    #[serde(default)]
    pub collector_share: f64,
    /// The collector resistor fitted, ohms (instead of `collector_share`; `regulus size`
    /// writes a preferred value here).
    #[serde(default)]
    pub collector_ohms: Option<f64>,
    pub transistor_rating_w: f64,
    #[serde(default)]
    pub collector_resistor_rating_w: Option<f64>,
    /// Volts the error amplifier's output stays below its supply (output swing limit).
    #[serde(default = "default_swing_loss")]
    pub amplifier_swing_loss_v: f64,
    /// Collector-emitter voltage below which the aux transistor saturates and the rail sags
    /// (about 0.2 V for a small-signal transistor, from memory).
    #[serde(default = "default_aux_vce_sat")]
    pub vce_sat_v: f64,
}

fn default_aux_vce_sat() -> f64 {
    0.2
}

/// The error amplifier's output stage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Amplifier {
    /// The most current the amplifier's output sources (into the pass stage's base, and into
    /// the clamp once it conducts), amperes.
    pub output_current_a: f64,
}

fn default_swing_loss() -> f64 {
    1.5
}

/// Ambient conditions and junction temperature behaviour.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Environment {
    #[serde(default = "default_ambient")]
    pub ambient_c: f64,
    #[serde(default = "default_ambient_min")]
    pub ambient_min_c: f64,
    #[serde(default = "default_ambient_max")]
    pub ambient_max_c: f64,
    /// Junction drop temperature coefficient (about -2 mV/degC for silicon, textbook value).
    #[serde(default = "default_tempco")]
    pub junction_tempco_mv_per_c: f64,
}

fn default_ambient() -> f64 {
    25.0
}
fn default_ambient_min() -> f64 {
    15.0
}
fn default_ambient_max() -> f64 {
    40.0
}
fn default_tempco() -> f64 {
    -2.0
}

impl Default for Environment {
    fn default() -> Self {
        Environment {
            ambient_c: default_ambient(),
            ambient_min_c: default_ambient_min(),
            ambient_max_c: default_ambient_max(),
            junction_tempco_mv_per_c: default_tempco(),
        }
    }
}

/// Checking rules and analysis settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Rules {
    /// Fraction of a resistor's rating it may run at (0.5: half rating, common practice).
    #[serde(default = "default_derating")]
    pub resistor_derating: f64,
    /// Fraction of a semiconductor's power rating it may run at.
    #[serde(default = "default_derating")]
    pub semiconductor_derating: f64,
    /// Junction temperature margin below T_j max for an `ok` verdict.
    #[serde(default = "default_tj_margin")]
    pub tj_margin_c: f64,
    /// Extra headroom above V_CE min for an `ok` verdict.
    #[serde(default = "default_headroom_margin")]
    pub headroom_margin_v: f64,
    #[serde(default = "default_samples")]
    pub monte_carlo_samples: usize,
    #[serde(default = "default_seed")]
    pub seed: u64,
}

fn default_derating() -> f64 {
    0.5
}
fn default_tj_margin() -> f64 {
    25.0
}
fn default_headroom_margin() -> f64 {
    0.5
}
fn default_samples() -> usize {
    10_000
}
fn default_seed() -> u64 {
    1
}

impl Default for Rules {
    fn default() -> Self {
        Rules {
            resistor_derating: default_derating(),
            semiconductor_derating: default_derating(),
            tj_margin_c: default_tj_margin(),
            headroom_margin_v: default_headroom_margin(),
            monte_carlo_samples: default_samples(),
            seed: default_seed(),
        }
    }
}

/// A whole design file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Design {
    pub design: Meta,
    pub input: Input,
    pub reference: Reference,
    pub feedback: Feedback,
    pub pass: Pass,
    pub limit: Limit,
    pub load: Load,
    #[serde(default)]
    pub aux: Option<Aux>,
    #[serde(default)]
    pub amplifier: Option<Amplifier>,
    #[serde(default)]
    pub environment: Environment,
    #[serde(default)]
    pub rules: Rules,
}

/// A design file could not be read or is not valid.
#[derive(Debug, thiserror::Error)]
pub enum DesignError {
    #[error("cannot read design file {path}: {source}")]
    Read {
        path: String,
        #[source]
        source: std::io::Error,
    },
    #[error("{0}")]
    Invalid(Located),
}

/// Deserialise design text into its types (file format only: names, types, required keys);
/// `label` names the file in messages. The rules run after this, in `check`.
pub fn deserialize(text: &str, label: &str) -> Result<Design, DesignError> {
    toml::from_str(text).map_err(|e| DesignError::Invalid(config::from_toml(label, text, &e)))
}
