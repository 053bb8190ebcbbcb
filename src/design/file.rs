//! The design file: a TOML description of one linear regulator design (input, reference,
//! feedback divider, pass stage, current-limit clamp, load, auxiliary rail, environment and
//! checking rules). This module parses and validates it; every problem names the file, line and
//! column and says what to fix. It computes nothing about the circuit (see `model`).

use crate::config::{self, Located};
use serde::{Deserialize, Serialize};
use std::path::Path;

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
    /// Share (0-0.9) of the aux transistor's drop taken by a series collector resistor.
    #[serde(default)]
    pub collector_share: f64,
    pub transistor_rating_w: f64,
    #[serde(default)]
    pub collector_resistor_rating_w: Option<f64>,
    /// Volts the error amplifier's output stays below its supply (output swing limit).
    #[serde(default = "default_swing_loss")]
    pub amplifier_swing_loss_v: f64,
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

impl Design {
    /// Read and validate a design file.
    pub fn load(path: &Path) -> Result<Design, DesignError> {
        let text = std::fs::read_to_string(path).map_err(|source| DesignError::Read {
            path: path.display().to_string(),
            source,
        })?;
        Design::parse(&text, &path.display().to_string())
    }

    /// Parse and validate design text; `label` names the file in messages.
    pub fn parse(text: &str, label: &str) -> Result<Design, DesignError> {
        let design: Design = toml::from_str(text)
            .map_err(|e| DesignError::Invalid(config::from_toml(label, text, &e)))?;
        design.validate().map_err(|(path, msg)| {
            DesignError::Invalid(config::at_path(label, text, &path, msg))
        })?;
        Ok(design)
    }

    /// Check values that the file format cannot: returns the key path at fault and a message.
    pub fn validate(&self) -> Result<(), (Vec<&'static str>, String)> {
        fn err<T>(
            path: &[&'static str],
            msg: impl Into<String>,
        ) -> Result<T, (Vec<&'static str>, String)> {
            Err((path.to_vec(), msg.into()))
        }
        fn finite_pos(
            v: f64,
            path: &[&'static str],
            what: &str,
        ) -> Result<(), (Vec<&'static str>, String)> {
            if !v.is_finite() || v <= 0.0 {
                return err(path, format!("{what} must be a positive number (got {v})"));
            }
            Ok(())
        }
        fn resistor(
            r: &Resistor,
            base: &[&'static str],
        ) -> Result<(), (Vec<&'static str>, String)> {
            let mut p = base.to_vec();
            p.push("ohms");
            if !r.ohms.is_finite() || r.ohms <= 0.0 {
                return err(
                    &p,
                    format!("resistance must be greater than zero ohms (got {})", r.ohms),
                );
            }
            let mut p = base.to_vec();
            p.push("tolerance_pct");
            if !r.tolerance_pct.is_finite() || r.tolerance_pct < 0.0 || r.tolerance_pct >= 100.0 {
                return err(
                    &p,
                    format!(
                        "tolerance must be at least 0 % and below 100 % (got {} %)",
                        r.tolerance_pct
                    ),
                );
            }
            if let Some(w) = r.rating_w {
                let mut p = base.to_vec();
                p.push("rating_w");
                finite_pos(w, &p, "power rating")?;
            }
            let mut p = base.to_vec();
            p.push("min_ohms");
            if !r.min_ohms.is_finite() || r.min_ohms < 0.0 || r.min_ohms >= r.ohms {
                return err(&p, "min_ohms must be at least 0 and below ohms");
            }
            if r.min_ohms > 0.0 && !r.pot {
                return err(&p, "min_ohms only applies to a potentiometer (pot = true)");
            }
            Ok(())
        }
        fn junction(
            v: f64,
            spread: f64,
            path: &[&'static str],
            spath: &[&'static str],
        ) -> Result<(), (Vec<&'static str>, String)> {
            if !v.is_finite() || !(0.1..=1.5).contains(&v) {
                return err(path, format!("a silicon junction drop is about 0.6-0.7 V; {v} V is not plausible (0.1-1.5 V accepted)"));
            }
            if !spread.is_finite() || spread < 0.0 || spread >= v {
                return err(
                    spath,
                    format!(
                        "the spread must be at least 0 and below the drop itself (got {spread} V)"
                    ),
                );
            }
            Ok(())
        }

        // Input.
        let inp = &self.input;
        if !inp.line_tolerance_pct.is_finite() || !(0.0..100.0).contains(&inp.line_tolerance_pct) {
            return err(
                &["input", "line_tolerance_pct"],
                "line tolerance must be at least 0 % and below 100 %",
            );
        }
        match inp.kind {
            InputKind::Dc => match inp.volts {
                None => {
                    return err(
                        &["input", "kind"],
                        "a DC input needs `volts` (the nominal input voltage)",
                    )
                }
                Some(v) => finite_pos(v, &["input", "volts"], "input voltage")?,
            },
            InputKind::FullWave => {
                match inp.secondary_vrms {
                    None => return err(&["input", "kind"], "a full-wave input needs `secondary_vrms` (transformer secondary RMS volts)"),
                    Some(v) => finite_pos(v, &["input", "secondary_vrms"], "secondary voltage")?,
                }
                match inp.reservoir_uf {
                    None => return err(&["input", "kind"], "a full-wave input needs `reservoir_uf` (reservoir capacitance in microfarads)"),
                    Some(v) => finite_pos(v, &["input", "reservoir_uf"], "reservoir capacitance")?,
                }
                finite_pos(inp.mains_hz, &["input", "mains_hz"], "mains frequency")?;
                if !inp.rectifier_drop_v.is_finite() || inp.rectifier_drop_v < 0.0 {
                    return err(
                        &["input", "rectifier_drop_v"],
                        "rectifier drop must be 0 V or more",
                    );
                }
                if !inp.reservoir_tolerance_pct.is_finite()
                    || !(0.0..100.0).contains(&inp.reservoir_tolerance_pct)
                {
                    return err(
                        &["input", "reservoir_tolerance_pct"],
                        "tolerance must be at least 0 % and below 100 %",
                    );
                }
            }
        }
        // Reference.
        let r = &self.reference;
        finite_pos(r.volts, &["reference", "volts"], "reference voltage")?;
        if !r.tolerance_pct.is_finite() || !(0.0..100.0).contains(&r.tolerance_pct) {
            return err(
                &["reference", "tolerance_pct"],
                "tolerance must be at least 0 % and below 100 %",
            );
        }
        if !(0.0..=100.0).contains(&r.wiper_min_pct)
            || !(0.0..=100.0).contains(&r.wiper_max_pct)
            || r.wiper_min_pct >= r.wiper_max_pct
        {
            return err(
                &["reference", "wiper_min_pct"],
                "wiper travel must satisfy 0 <= wiper_min_pct < wiper_max_pct <= 100",
            );
        }
        // Feedback.
        resistor(&self.feedback.top, &["feedback", "top"])?;
        resistor(&self.feedback.bottom, &["feedback", "bottom"])?;
        if self.feedback.bottom.pot && self.feedback.bottom.min_ohms <= 0.0 {
            return err(
                &["feedback", "bottom", "min_ohms"],
                "a potentiometer as the bottom element can reach 0 ohm and drive the output to the rail: set min_ohms (a series resistor) above zero",
            );
        }
        // Pass.
        let p = &self.pass;
        junction(
            p.vbe_v,
            p.vbe_spread_v,
            &["pass", "vbe_v"],
            &["pass", "vbe_spread_v"],
        )?;
        if !p.vce_min_v.is_finite() || p.vce_min_v < 0.0 {
            return err(&["pass", "vce_min_v"], "minimum V_CE must be 0 V or more");
        }
        finite_pos(
            p.power_rating_w,
            &["pass", "power_rating_w"],
            "power rating",
        )?;
        finite_pos(p.theta_jc, &["pass", "theta_jc"], "theta_jc")?;
        if !p.theta_cs.is_finite() || p.theta_cs < 0.0 {
            return err(&["pass", "theta_cs"], "theta_cs must be 0 or more");
        }
        if let Some(t) = p.theta_sa {
            if !t.is_finite() || t < 0.0 {
                return err(&["pass", "theta_sa"], "theta_sa must be 0 or more");
            }
        }
        if !p.tj_max_c.is_finite() || p.tj_max_c <= self.environment.ambient_max_c {
            return err(
                &["pass", "tj_max_c"],
                "T_j max must be above the highest ambient temperature",
            );
        }
        // Limit.
        let l = &self.limit;
        resistor(&l.sense, &["limit", "sense"])?;
        if l.sense.pot {
            return err(
                &["limit", "sense", "pot"],
                "the sense resistor cannot be a potentiometer in this model",
            );
        }
        match l.clamp {
            Clamp::DiodeString => {
                junction(
                    l.diode_vf_v,
                    l.diode_vf_spread_v,
                    &["limit", "diode_vf_v"],
                    &["limit", "diode_vf_spread_v"],
                )?;
                let n =
                    match l.diodes {
                        None => return err(
                            &["limit", "clamp"],
                            "a diode-string clamp needs `diodes` (how many diodes in the string)",
                        ),
                        Some(0) => {
                            return err(
                                &["limit", "diodes"],
                                "the diode string needs at least one diode",
                            )
                        }
                        Some(n) if n > 10 => {
                            return err(
                                &["limit", "diodes"],
                                format!("{n} diodes is not plausible (1-10 accepted)"),
                            )
                        }
                        Some(n) => n,
                    };
                let vs = n as f64 * l.diode_vf_v - p.stage.junctions() as f64 * p.vbe_v;
                if vs <= 0.0 {
                    return err(
                        &["limit", "diodes"],
                        format!(
                            "this clamp cannot conduct: {n} x {} V - {} x {} V = {vs:.3} V across the sense resistor; add a diode or use a transistor limiter",
                            l.diode_vf_v,
                            p.stage.junctions(),
                            p.vbe_v
                        ),
                    );
                }
            }
            Clamp::Transistor | Clamp::Foldback => {
                junction(
                    l.vbe_v,
                    l.vbe_spread_v,
                    &["limit", "vbe_v"],
                    &["limit", "vbe_spread_v"],
                )?;
                if l.diodes.is_some() {
                    return err(
                        &["limit", "diodes"],
                        "`diodes` applies only to clamp = \"diode_string\"",
                    );
                }
            }
        }
        if l.clamp == Clamp::Foldback {
            match (&l.divider_top, &l.divider_bottom) {
                (Some(t), Some(b)) => {
                    resistor(t, &["limit", "divider_top"])?;
                    resistor(b, &["limit", "divider_bottom"])?;
                }
                _ => {
                    return err(
                        &["limit", "clamp"],
                        "a foldback clamp needs `divider_top` and `divider_bottom`",
                    )
                }
            }
        } else if l.divider_top.is_some() || l.divider_bottom.is_some() {
            return err(
                &["limit", "divider_top"],
                "the divider applies only to clamp = \"foldback\"",
            );
        }
        // Load.
        finite_pos(
            self.load.max_current_a,
            &["load", "max_current_a"],
            "maximum load current",
        )?;
        // Output range and setting.
        let (lo, hi) = super::model::nominal_output_range(self);
        if !lo.is_finite() || !hi.is_finite() || hi <= 0.0 {
            return err(
                &["feedback"],
                "the feedback divider gives no usable output voltage",
            );
        }
        if let Some(s) = self.load.output_setting_v {
            if !s.is_finite() || s < lo - 1e-9 || s > hi + 1e-9 {
                return err(
                    &["load", "output_setting_v"],
                    format!(
                        "the feedback divider cannot reach {s} V from the {} V reference: this design's output range is {lo:.3} V to {hi:.3} V",
                        self.reference.volts
                    ),
                );
            }
        }
        // Aux.
        if let Some(a) = &self.aux {
            finite_pos(a.volts, &["aux", "volts"], "aux rail voltage")?;
            finite_pos(a.current_a, &["aux", "current_a"], "aux rail current")?;
            finite_pos(
                a.transistor_rating_w,
                &["aux", "transistor_rating_w"],
                "power rating",
            )?;
            if !(0.0..0.9 + 1e-12).contains(&a.collector_share) {
                return err(
                    &["aux", "collector_share"],
                    "collector_share must be between 0 and 0.9",
                );
            }
            if let Some(w) = a.collector_resistor_rating_w {
                finite_pos(w, &["aux", "collector_resistor_rating_w"], "power rating")?;
            }
            if !a.amplifier_swing_loss_v.is_finite() || a.amplifier_swing_loss_v < 0.0 {
                return err(
                    &["aux", "amplifier_swing_loss_v"],
                    "swing loss must be 0 V or more",
                );
            }
        }
        // Environment.
        let e = &self.environment;
        if !(e.ambient_min_c <= e.ambient_c && e.ambient_c <= e.ambient_max_c) {
            return err(
                &["environment", "ambient_c"],
                "ambient temperatures must satisfy ambient_min_c <= ambient_c <= ambient_max_c",
            );
        }
        if !e.junction_tempco_mv_per_c.is_finite() || e.junction_tempco_mv_per_c.abs() > 10.0 {
            return err(
                &["environment", "junction_tempco_mv_per_c"],
                "junction temperature coefficient should be about -2 mV/degC (-10 to 10 accepted)",
            );
        }
        // Rules.
        let ru = &self.rules;
        for (v, key) in [
            (ru.resistor_derating, "resistor_derating"),
            (ru.semiconductor_derating, "semiconductor_derating"),
        ] {
            if !v.is_finite() || v <= 0.0 || v > 1.0 {
                return err(
                    &["rules", key],
                    "derating must be a fraction above 0 and at most 1 (0.5 = half rating)",
                );
            }
        }
        if ru.monte_carlo_samples == 0 || ru.monte_carlo_samples > 10_000_000 {
            return err(
                &["rules", "monte_carlo_samples"],
                "Monte Carlo samples must be between 1 and 10,000,000",
            );
        }
        if !ru.tj_margin_c.is_finite() || ru.tj_margin_c < 0.0 {
            return err(&["rules", "tj_margin_c"], "margin must be 0 or more");
        }
        if !ru.headroom_margin_v.is_finite() || ru.headroom_margin_v < 0.0 {
            return err(&["rules", "headroom_margin_v"], "margin must be 0 or more");
        }
        Ok(())
    }
}
