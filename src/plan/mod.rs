//! Test plans: the plan file (TOML) is parsed, checked against the design's targets and
//! expanded into concrete steps (setpoints in amperes, volts and ohms, durations) before any
//! port opens. The adaptive knee search lives in `knee` (a pure state machine the runner
//! feeds with measurements). Nothing here does I/O except [`Plan::load`] reading the plan file.
//!
//! # Plan file syntax
//! ```toml
//! name = "bring-up"                  # required; used in the record folder name
//! source = "100 % of vin"            # input source voltage (only used with an input source)
//! settle = "300 ms"                  # default settle time after each setpoint change
//! samples = 4                        # default readings averaged per point
//!
//! [interlocks]                       # all optional; defaults derive from the design
//! max_output_voltage = "120 % of vout"
//! max_load_power = "25 W"
//! max_temperature = "85 degC"
//! max_short_dwell = "10 s"
//!
//! [[step]]
//! kind = "load_sweep"                # CC load over the regulation region
//! from = "0 A"
//! to = "90 % of limit"
//! step = "25 mA"                     # or: points = 40
//! ```
//! Quantities are strings such as `"450 mA"`, `"12 V"`, `"50 mohm"`, `"2 W"`, `"85 degC"`,
//! `"300 ms"`, or relative to the design: `"<percent> % of <basis>"` where basis is `vout`
//! (designed output voltage), `vin` (nominal input voltage), `limit` (designed limit current),
//! `short` (designed short-circuit current), `max_load` (designed maximum load current) or
//! `r_knee` (vout / limit, the load resistance at the knee). A bare basis means 100 %. A bare
//! TOML number is taken in the field's base unit (A, V, ohm, W, degC, s).

use crate::measure::{LoadMode, Role};
use crate::record::StepKind;
use serde::Deserialize;
use std::ops::Range;
use std::path::Path;
use std::time::Duration;
use toml::Spanned;

mod knee;
pub use knee::{KneeConfig, KneeOutcome, KneeRequest, KneeResult, KneeSearch};

/// Design values the plan may refer to. The integrator fills it from the design model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DesignTargets {
    /// Designed output voltage (V).
    pub vout_v: f64,
    /// Designed limit (knee) current (A).
    pub limit_current_a: f64,
    /// Designed short-circuit current (A); equal to the limit current without foldback.
    pub short_circuit_current_a: f64,
    /// Designed maximum continuous load current (A).
    pub max_load_current_a: f64,
    /// Nominal input voltage (V), when the design states one.
    pub input_voltage_v: Option<f64>,
}

impl DesignTargets {
    /// Targets from a design and its expectation (nominal values).
    pub fn from_design(d: &crate::design::Design, e: &crate::design::Expectation) -> Self {
        DesignTargets {
            vout_v: e.vout.setting,
            limit_current_a: e.limit_current.nominal,
            short_circuit_current_a: e.short_circuit_current.nominal,
            max_load_current_a: d.load.max_current_a,
            input_voltage_v: Some(e.input.nominal_v).filter(|v| v.is_finite() && *v > 0.0),
        }
    }
}

/// A plan file problem. Located errors name the file, line and column (1-based).
#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    #[error("cannot read plan file {path}: {source}")]
    Read {
        path: String,
        #[source]
        source: std::io::Error,
    },
    #[error("{file}:{line}:{column}: {message}")]
    At {
        file: String,
        line: usize,
        column: usize,
        message: String,
    },
    #[error("{file}: {message}")]
    General { file: String, message: String },
}

/// Physical dimension of a plan quantity.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dim {
    Current,
    Voltage,
    Resistance,
    Power,
    Temperature,
    Time,
}

impl Dim {
    fn name(self) -> &'static str {
        match self {
            Dim::Current => "a current",
            Dim::Voltage => "a voltage",
            Dim::Resistance => "a resistance",
            Dim::Power => "a power",
            Dim::Temperature => "a temperature",
            Dim::Time => "a duration",
        }
    }
    fn example(self) -> &'static str {
        match self {
            Dim::Current => "\"450 mA\" or \"90 % of limit\"",
            Dim::Voltage => "\"12 V\" or \"50 % of vout\"",
            Dim::Resistance => "\"50 mohm\" or \"150 % of r_knee\"",
            Dim::Power => "\"25 W\"",
            Dim::Temperature => "\"85 degC\"",
            Dim::Time => "\"300 ms\", \"2 s\" or \"10 min\"",
        }
    }
}

/// Electronic-load setting: mode and setpoint (A, V or ohm by mode).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoadSetting {
    pub mode: LoadMode,
    pub value: f64,
}

/// Safety limits checked on every reading.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interlocks {
    pub max_output_voltage_v: f64,
    pub max_load_power_w: f64,
    /// Only enforced when the bench has a thermometer.
    pub max_temperature_c: f64,
    pub max_short_dwell: Duration,
}

/// Short-circuit step parameters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ShortCircuit {
    /// CR setting used as the short (ohm).
    pub resistance_ohm: f64,
    pub dwell: Duration,
    pub interval: Duration,
    /// Load applied after the short is released, to confirm recovery.
    pub recovery_load: LoadSetting,
    pub recovery_time: Duration,
    /// Designed short-circuit current (A), for the cautions and dissipation estimate.
    pub expected_current_a: f64,
}

/// What a step does, with every value concrete.
#[derive(Debug, Clone, PartialEq)]
pub enum Action {
    /// Fixed list of load setpoints in one mode (load sweep, limit trace).
    Sweep {
        mode: LoadMode,
        setpoints: Vec<f64>,
    },
    /// Fixed load, input source stepped through `source_volts`.
    LineSweep {
        load: LoadSetting,
        source_volts: Vec<f64>,
    },
    KneeSearch(KneeConfig),
    ShortCircuit(ShortCircuit),
    /// Fixed load held for `duration`, read every `interval`.
    Soak {
        load: LoadSetting,
        duration: Duration,
        interval: Duration,
    },
}

/// One expanded step.
#[derive(Debug, Clone, PartialEq)]
pub struct Step {
    pub kind: StepKind,
    pub label: String,
    pub settle: Duration,
    pub samples: u32,
    pub action: Action,
}

impl Step {
    /// Number of rows this step writes (an upper bound for the knee search).
    pub fn planned_points(&self) -> usize {
        fn ticks(total: Duration, every: Duration) -> usize {
            if every.is_zero() {
                return 1;
            }
            (total.as_secs_f64() / every.as_secs_f64() + 1e-9).floor() as usize + 1
        }
        match &self.action {
            Action::Sweep { setpoints, .. } => setpoints.len(),
            Action::LineSweep { source_volts, .. } => source_volts.len(),
            Action::KneeSearch(k) => k.max_points as usize,
            Action::ShortCircuit(s) => {
                1 + short_readings(s.dwell, s.interval) + recovery_readings(s)
            }
            Action::Soak {
                duration, interval, ..
            } => ticks(*duration, *interval),
        }
    }
}

/// Readings during a short: at `k * interval` for every `k * interval < dwell`.
pub fn short_readings(dwell: Duration, interval: Duration) -> usize {
    if interval.is_zero() {
        return 1;
    }
    let n = (dwell.as_secs_f64() / interval.as_secs_f64() - 1e-9).ceil();
    (n as usize).max(1)
}

/// Readings after a short is released: at `interval, 2 * interval, ... <= recovery_time`,
/// at least one.
pub fn recovery_readings(s: &ShortCircuit) -> usize {
    if s.interval.is_zero() {
        return 1;
    }
    let n = (s.recovery_time.as_secs_f64() / s.interval.as_secs_f64() + 1e-9).floor();
    (n as usize).max(1)
}

/// A validated, expanded plan.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    pub name: String,
    pub description: Option<String>,
    /// Input source voltage for all steps but line sweeps (used only with an input source).
    pub source_volts: Option<f64>,
    pub interlocks: Interlocks,
    pub steps: Vec<Step>,
}

impl Plan {
    /// Read, parse, validate and expand a plan file.
    pub fn load(path: &Path, targets: &DesignTargets) -> Result<Plan, PlanError> {
        let text = std::fs::read_to_string(path).map_err(|source| PlanError::Read {
            path: path.display().to_string(),
            source,
        })?;
        Plan::parse(&text, &path.display().to_string(), targets)
    }

    /// Parse, validate and expand plan text; `file` names the source in errors.
    pub fn parse(text: &str, file: &str, targets: &DesignTargets) -> Result<Plan, PlanError> {
        let cx = Cx {
            text,
            file,
            targets,
        };
        let raw: RawPlan = toml::from_str(text).map_err(|e| match e.span() {
            Some(span) => cx.at(span, e.message().trim().to_string()),
            None => PlanError::General {
                file: file.to_string(),
                message: e.message().trim().to_string(),
            },
        })?;
        cx.expand(raw)
    }

    /// True when some step drives the load into a short circuit (the CLI asks to confirm).
    pub fn has_short_circuit(&self) -> bool {
        self.steps
            .iter()
            .any(|s| matches!(s.action, Action::ShortCircuit(_)))
    }

    /// Roles the bench must have for this plan.
    pub fn required_roles(&self) -> Vec<Role> {
        let mut roles = vec![Role::Load, Role::OutputVoltmeter];
        if self
            .steps
            .iter()
            .any(|s| matches!(s.action, Action::LineSweep { .. }))
        {
            roles.push(Role::InputSource);
        }
        // In constant-voltage mode the load's current is whatever the unit gives: without an
        // ammeter neither the current nor the load-power interlock could be judged.
        if self.steps.iter().any(|s| {
            matches!(
                s.action,
                Action::Sweep {
                    mode: LoadMode::ConstantVoltage,
                    ..
                }
            )
        }) {
            roles.push(Role::OutputAmmeter);
        }
        roles
    }

    /// Check the bench's roles before anything is switched on; names every missing role.
    pub fn check_roles(&self, has_role: impl Fn(Role) -> bool) -> Result<(), String> {
        let missing: Vec<String> = self
            .required_roles()
            .into_iter()
            .filter(|r| !has_role(*r))
            .map(|r| r.to_string())
            .collect();
        if !missing.is_empty() {
            return Err(format!(
                "plan '{}' needs these roles, which no instrument on the bench holds: {}",
                self.name,
                missing.join(", ")
            ));
        }
        if has_role(Role::InputSource) && self.source_volts.is_none() {
            return Err(format!(
                "the bench has an input source but plan '{}' sets no `source` voltage and the \
                 design states no input voltage: add `source = \"<volts> V\"` to the plan",
                self.name
            ));
        }
        Ok(())
    }
}

// ---------------------------------------------------------------------------------------------
// Raw file shape

type SV = Spanned<toml::Value>;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPlan {
    name: Spanned<String>,
    description: Option<String>,
    source: Option<SV>,
    settle: Option<SV>,
    samples: Option<SV>,
    interlocks: Option<RawInterlocks>,
    #[serde(default)]
    step: Vec<Spanned<RawStep>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawInterlocks {
    max_output_voltage: Option<SV>,
    max_load_power: Option<SV>,
    max_temperature: Option<SV>,
    max_short_dwell: Option<SV>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStep {
    kind: Spanned<String>,
    label: Option<Spanned<String>>,
    settle: Option<SV>,
    samples: Option<SV>,
    mode: Option<Spanned<String>>,
    from: Option<SV>,
    to: Option<SV>,
    step: Option<SV>,
    points: Option<SV>,
    load: Option<SV>,
    expected: Option<SV>,
    reference: Option<SV>,
    upper: Option<SV>,
    ceiling: Option<SV>,
    drop: Option<SV>,
    resolution: Option<SV>,
    max_points: Option<SV>,
    resistance: Option<SV>,
    dwell: Option<SV>,
    interval: Option<SV>,
    recovery_load: Option<SV>,
    recovery_time: Option<SV>,
    duration: Option<SV>,
}

impl RawStep {
    /// Names and spans of the kind-specific fields that are present.
    fn present(&self) -> Vec<(&'static str, Range<usize>)> {
        let mut v = Vec::new();
        let mut add = |name: &'static str, f: &Option<SV>| {
            if let Some(s) = f {
                v.push((name, s.span()));
            }
        };
        add("from", &self.from);
        add("to", &self.to);
        add("step", &self.step);
        add("points", &self.points);
        add("load", &self.load);
        add("expected", &self.expected);
        add("reference", &self.reference);
        add("upper", &self.upper);
        add("ceiling", &self.ceiling);
        add("drop", &self.drop);
        add("resolution", &self.resolution);
        add("max_points", &self.max_points);
        add("resistance", &self.resistance);
        add("dwell", &self.dwell);
        add("interval", &self.interval);
        add("recovery_load", &self.recovery_load);
        add("recovery_time", &self.recovery_time);
        add("duration", &self.duration);
        if let Some(m) = &self.mode {
            v.push(("mode", m.span()));
        }
        v
    }
}

const KINDS: &str = "load_sweep, limit_trace, knee_search, short_circuit, line_sweep, soak";

fn allowed_fields(kind: StepKind) -> &'static [&'static str] {
    match kind {
        StepKind::LoadSweep => &["from", "to", "step", "points"],
        StepKind::LimitTrace => &["mode", "from", "to", "step", "points"],
        StepKind::KneeSearch => &[
            "mode",
            "expected",
            "reference",
            "upper",
            "ceiling",
            "drop",
            "resolution",
            "max_points",
        ],
        StepKind::ShortCircuit => &[
            "resistance",
            "dwell",
            "interval",
            "recovery_load",
            "recovery_time",
        ],
        StepKind::LineSweep => &["from", "to", "step", "points", "load"],
        StepKind::Soak => &["load", "duration", "interval"],
    }
}

// ---------------------------------------------------------------------------------------------
// Expansion

const DEFAULT_SETTLE_S: f64 = 0.5;
const DEFAULT_SAMPLES: u32 = 3;
const MAX_SWEEP_POINTS: usize = 10_000;

struct Cx<'a> {
    text: &'a str,
    file: &'a str,
    targets: &'a DesignTargets,
}

impl Cx<'_> {
    fn at(&self, span: Range<usize>, message: impl Into<String>) -> PlanError {
        let (line, column) = line_col(self.text, span.start);
        PlanError::At {
            file: self.file.to_string(),
            line,
            column,
            message: message.into(),
        }
    }

    fn quantity(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let value = match v.get_ref() {
            toml::Value::Integer(i) => *i as f64,
            toml::Value::Float(f) => *f,
            toml::Value::String(s) => parse_quantity(s, dim, self.targets)
                .map_err(|m| self.at(v.span(), format!("`{field}`: {m}")))?,
            other => {
                return Err(self.at(
                    v.span(),
                    format!(
                        "`{field}` must be {}, e.g. {}; found a {}",
                        dim.name(),
                        dim.example(),
                        other.type_str()
                    ),
                ))
            }
        };
        if !value.is_finite() {
            return Err(self.at(v.span(), format!("`{field}` must be a finite number")));
        }
        Ok(tidy(value))
    }

    fn positive(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let x = self.quantity(v, dim, field)?;
        if x <= 0.0 {
            return Err(self.at(v.span(), format!("`{field}` must be greater than zero")));
        }
        Ok(x)
    }

    fn non_negative(&self, v: &SV, dim: Dim, field: &str) -> Result<f64, PlanError> {
        let x = self.quantity(v, dim, field)?;
        if x < 0.0 {
            return Err(self.at(v.span(), format!("`{field}` must not be negative")));
        }
        Ok(x)
    }

    fn duration(&self, v: &SV, field: &str) -> Result<Duration, PlanError> {
        let s = self.non_negative(v, Dim::Time, field)?;
        if s > 30.0 * 86_400.0 {
            return Err(self.at(v.span(), format!("`{field}` is longer than 30 days")));
        }
        Ok(Duration::from_secs_f64(s))
    }

    fn count(&self, v: &SV, field: &str, min: i64, max: i64) -> Result<u32, PlanError> {
        match v.get_ref() {
            toml::Value::Integer(i) if (min..=max).contains(i) => Ok(*i as u32),
            toml::Value::Integer(_) => Err(self.at(
                v.span(),
                format!("`{field}` must be between {min} and {max}"),
            )),
            other => Err(self.at(
                v.span(),
                format!(
                    "`{field}` must be a whole number, found a {}",
                    other.type_str()
                ),
            )),
        }
    }

    /// A percentage: `"1 %"`, or a bare number meaning percent. Returned as a fraction.
    fn percent(&self, v: &SV, field: &str, lo: f64, hi: f64) -> Result<f64, PlanError> {
        let pct = match v.get_ref() {
            toml::Value::Integer(i) => Some(*i as f64),
            toml::Value::Float(f) => Some(*f),
            toml::Value::String(s) => s
                .trim()
                .strip_suffix('%')
                .and_then(|n| n.trim().parse::<f64>().ok()),
            _ => None,
        };
        match pct {
            Some(p) if p.is_finite() && p >= lo && p <= hi => Ok(p / 100.0),
            Some(_) => Err(self.at(
                v.span(),
                format!("`{field}` must be between {lo} % and {hi} %"),
            )),
            None => Err(self.at(
                v.span(),
                format!("`{field}` must be a percentage such as \"1 %\""),
            )),
        }
    }

    fn expand(&self, raw: RawPlan) -> Result<Plan, PlanError> {
        let name = raw.name.get_ref().trim().to_string();
        if name.is_empty()
            || name.starts_with('.')
            || name.len() > 100
            || !name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.')
        {
            return Err(self.at(
                raw.name.span(),
                "`name` must be 1-100 letters, digits, '-', '_' and '.', not starting with '.' \
                 (it becomes part of the record folder name)",
            ));
        }
        let settle = match &raw.settle {
            Some(v) => self.duration(v, "settle")?,
            None => Duration::from_secs_f64(DEFAULT_SETTLE_S),
        };
        let samples = match &raw.samples {
            Some(v) => self.count(v, "samples", 1, 1000)?,
            None => DEFAULT_SAMPLES,
        };
        let source_volts = match &raw.source {
            Some(v) => Some(self.positive(v, Dim::Voltage, "source")?),
            None => self.targets.input_voltage_v.map(tidy),
        };
        let interlocks = self.interlocks(raw.interlocks.as_ref())?;
        if raw.step.is_empty() {
            return Err(PlanError::General {
                file: self.file.to_string(),
                message: format!(
                    "plan '{name}' has no steps: add at least one [[step]] table with a `kind` \
                     ({KINDS})"
                ),
            });
        }
        let mut steps = Vec::with_capacity(raw.step.len());
        for (i, rs) in raw.step.iter().enumerate() {
            steps.push(self.step(i, rs, settle, samples, &interlocks)?);
        }
        Ok(Plan {
            name,
            description: raw.description,
            source_volts,
            interlocks,
            steps,
        })
    }

    fn interlocks(&self, raw: Option<&RawInterlocks>) -> Result<Interlocks, PlanError> {
        let t = self.targets;
        // Defaults: common practice margins above the design's own operating values.
        let mut il = Interlocks {
            max_output_voltage_v: 1.2 * t.vout_v,
            max_load_power_w: 1.25 * t.vout_v * t.limit_current_a.max(t.max_load_current_a),
            max_temperature_c: 85.0,
            max_short_dwell: Duration::from_secs(10),
        };
        if let Some(r) = raw {
            if let Some(v) = &r.max_output_voltage {
                il.max_output_voltage_v = self.positive(v, Dim::Voltage, "max_output_voltage")?;
            }
            if let Some(v) = &r.max_load_power {
                il.max_load_power_w = self.positive(v, Dim::Power, "max_load_power")?;
            }
            if let Some(v) = &r.max_temperature {
                il.max_temperature_c = self.quantity(v, Dim::Temperature, "max_temperature")?;
            }
            if let Some(v) = &r.max_short_dwell {
                il.max_short_dwell = self.duration(v, "max_short_dwell")?;
            }
        }
        let usable = |x: f64| x.is_finite() && x > 0.0;
        if !usable(il.max_output_voltage_v) || !usable(il.max_load_power_w) {
            return Err(PlanError::General {
                file: self.file.to_string(),
                message: "the design's output voltage and currents must be positive to derive \
                          the default interlocks; set [interlocks] explicitly"
                    .to_string(),
            });
        }
        Ok(il)
    }

    fn step(
        &self,
        index: usize,
        rs: &Spanned<RawStep>,
        settle: Duration,
        samples: u32,
        il: &Interlocks,
    ) -> Result<Step, PlanError> {
        let s = rs.get_ref();
        let kind = StepKind::parse(s.kind.get_ref()).ok_or_else(|| {
            self.at(
                s.kind.span(),
                format!(
                    "unknown step kind '{}': use one of {KINDS}",
                    s.kind.get_ref()
                ),
            )
        })?;
        let allowed = allowed_fields(kind);
        for (field, span) in s.present() {
            if !allowed.contains(&field) {
                return Err(self.at(
                    span,
                    format!(
                        "`{field}` does not apply to a {} step (it takes: {}, label, settle, \
                         samples)",
                        kind.as_str(),
                        allowed.join(", ")
                    ),
                ));
            }
        }
        let label = match &s.label {
            Some(l) => l.get_ref().clone(),
            None => format!("{} {}", index + 1, kind.as_str()),
        };
        let settle = match &s.settle {
            Some(v) => self.duration(v, "settle")?,
            None => settle,
        };
        let samples = match &s.samples {
            Some(v) => self.count(v, "samples", 1, 1000)?,
            None => samples,
        };
        let need = |f: &Option<SV>, field: &str| -> Result<SV, PlanError> {
            f.clone().ok_or_else(|| {
                self.at(
                    rs.span(),
                    format!("step {} ({}) needs `{field}`", index + 1, kind.as_str()),
                )
            })
        };
        let action = match kind {
            StepKind::LoadSweep => {
                let setpoints = self.range(s, rs, Dim::Current, index, kind)?;
                Action::Sweep {
                    mode: LoadMode::ConstantCurrent,
                    setpoints,
                }
            }
            StepKind::LimitTrace => {
                let mode = self.mode(
                    s,
                    &[LoadMode::ConstantVoltage, LoadMode::ConstantResistance],
                    LoadMode::ConstantVoltage,
                )?;
                let dim = if mode == LoadMode::ConstantVoltage {
                    Dim::Voltage
                } else {
                    Dim::Resistance
                };
                let setpoints = self.range(s, rs, dim, index, kind)?;
                if mode == LoadMode::ConstantResistance && setpoints.iter().any(|r| *r <= 0.0) {
                    let span = s.from.as_ref().map(|v| v.span()).unwrap_or(rs.span());
                    return Err(self.at(span, "a CR trace needs resistances above zero"));
                }
                Action::Sweep { mode, setpoints }
            }
            StepKind::LineSweep => {
                let source_volts = self.range(s, rs, Dim::Voltage, index, kind)?;
                if source_volts.iter().any(|v| *v <= 0.0) {
                    let span = s.from.as_ref().map(|v| v.span()).unwrap_or(rs.span());
                    return Err(self.at(span, "source voltages must be above zero"));
                }
                let load = match &s.load {
                    Some(v) => self.non_negative(v, Dim::Current, "load")?,
                    None => 0.5 * self.targets.max_load_current_a,
                };
                Action::LineSweep {
                    load: LoadSetting {
                        mode: LoadMode::ConstantCurrent,
                        value: load,
                    },
                    source_volts,
                }
            }
            StepKind::Soak => {
                let load = self.non_negative(&need(&s.load, "load")?, Dim::Current, "load")?;
                let duration = self.duration(&need(&s.duration, "duration")?, "duration")?;
                let interval_v = need(&s.interval, "interval")?;
                let interval = self.duration(&interval_v, "interval")?;
                if interval.is_zero() || interval > duration {
                    return Err(self.at(
                        interval_v.span(),
                        "`interval` must be above zero and no longer than `duration`",
                    ));
                }
                let readings = duration.as_secs_f64() / interval.as_secs_f64();
                if readings + 1.0 > MAX_SWEEP_POINTS as f64 {
                    return Err(self.at(
                        interval_v.span(),
                        format!(
                            "this interval gives {readings:.0} readings; the limit is {MAX_SWEEP_POINTS}: lengthen the interval"
                        ),
                    ));
                }
                Action::Soak {
                    load: LoadSetting {
                        mode: LoadMode::ConstantCurrent,
                        value: load,
                    },
                    duration,
                    interval,
                }
            }
            StepKind::ShortCircuit => self.short(s, rs, index, il)?,
            StepKind::KneeSearch => self.knee(s, rs)?,
        };
        Ok(Step {
            kind,
            label,
            settle,
            samples,
            action,
        })
    }

    fn mode(
        &self,
        s: &RawStep,
        allowed: &[LoadMode],
        default: LoadMode,
    ) -> Result<LoadMode, PlanError> {
        let Some(m) = &s.mode else {
            return Ok(default);
        };
        let names: Vec<&str> = allowed.iter().map(|m| m.as_str()).collect();
        allowed
            .iter()
            .copied()
            .find(|a| a.as_str() == m.get_ref().trim().to_ascii_lowercase())
            .ok_or_else(|| {
                self.at(
                    m.span(),
                    format!(
                        "mode '{}' is not available here: use {}",
                        m.get_ref(),
                        names.join(" or ")
                    ),
                )
            })
    }

    /// `from`, `to` and either `step` (a positive size) or `points` (a count), inclusive.
    fn range(
        &self,
        s: &RawStep,
        rs: &Spanned<RawStep>,
        dim: Dim,
        index: usize,
        kind: StepKind,
    ) -> Result<Vec<f64>, PlanError> {
        let missing = |field: &str| {
            self.at(
                rs.span(),
                format!("step {} ({}) needs `{field}`", index + 1, kind.as_str()),
            )
        };
        let from_v = s.from.as_ref().ok_or_else(|| missing("from"))?;
        let to_v = s.to.as_ref().ok_or_else(|| missing("to"))?;
        let from = self.non_negative(from_v, dim, "from")?;
        let to = self.non_negative(to_v, dim, "to")?;
        match (&s.step, &s.points) {
            (Some(a), Some(_)) => {
                Err(self.at(a.span(), "give either `step` or `points`, not both"))
            }
            (None, None) => Err(missing("`step` or `points`, and")),
            (Some(sv), None) => {
                let size = self.positive(sv, dim, "step")?;
                let n = ((to - from).abs() / size + 1e-9).floor();
                if n + 1.0 > MAX_SWEEP_POINTS as f64 {
                    return Err(self.at(
                        sv.span(),
                        format!(
                            "this step size gives {} points; the limit is {MAX_SWEEP_POINTS}",
                            n + 1.0
                        ),
                    ));
                }
                let dir = if to >= from { 1.0 } else { -1.0 };
                let mut pts: Vec<f64> = (0..=n as usize)
                    .map(|k| tidy(from + dir * size * k as f64))
                    .collect();
                // Always end on `to` when the step does not land on it.
                if let Some(last) = pts.last() {
                    if (to - last).abs() > 1e-9 * size.max(to.abs()) {
                        pts.push(to);
                    }
                }
                Ok(pts)
            }
            (None, Some(pv)) => {
                let n = self.count(pv, "points", 1, MAX_SWEEP_POINTS as i64)? as usize;
                if n == 1 {
                    if (to - from).abs() > 0.0 {
                        return Err(self.at(
                            pv.span(),
                            "one point needs `from` equal to `to`; use 2 or more points",
                        ));
                    }
                    return Ok(vec![from]);
                }
                Ok((0..n)
                    .map(|k| tidy(from + (to - from) * k as f64 / (n - 1) as f64))
                    .collect())
            }
        }
    }

    fn short(
        &self,
        s: &RawStep,
        rs: &Spanned<RawStep>,
        index: usize,
        il: &Interlocks,
    ) -> Result<Action, PlanError> {
        let resistance_ohm = match &s.resistance {
            Some(v) => self.positive(v, Dim::Resistance, "resistance")?,
            None => 0.05,
        };
        let dwell_v = s.dwell.clone().ok_or_else(|| {
            self.at(
                rs.span(),
                format!("step {} (short_circuit) needs `dwell`", index + 1),
            )
        })?;
        let dwell = self.duration(&dwell_v, "dwell")?;
        if dwell.is_zero() || dwell > il.max_short_dwell {
            return Err(self.at(
                dwell_v.span(),
                format!(
                    "`dwell` must be above zero and at most the interlock max_short_dwell \
                     ({} s)",
                    il.max_short_dwell.as_secs_f64()
                ),
            ));
        }
        let interval = match &s.interval {
            Some(v) => {
                let d = self.duration(v, "interval")?;
                if d.is_zero() || d > dwell {
                    return Err(self.at(
                        v.span(),
                        "`interval` must be above zero and no longer than `dwell`",
                    ));
                }
                d
            }
            None => dwell / 10,
        };
        let recovery = match &s.recovery_load {
            Some(v) => self.non_negative(v, Dim::Current, "recovery_load")?,
            None => 0.1 * self.targets.limit_current_a,
        };
        let recovery_time = match &s.recovery_time {
            Some(v) => self.duration(v, "recovery_time")?,
            None => Duration::from_secs(2),
        };
        Ok(Action::ShortCircuit(ShortCircuit {
            resistance_ohm,
            dwell,
            interval,
            recovery_load: LoadSetting {
                mode: LoadMode::ConstantCurrent,
                value: recovery,
            },
            recovery_time,
            expected_current_a: self.targets.short_circuit_current_a,
        }))
    }

    fn knee(&self, s: &RawStep, rs: &Spanned<RawStep>) -> Result<Action, PlanError> {
        let mode = self.mode(
            s,
            &[LoadMode::ConstantResistance, LoadMode::ConstantCurrent],
            LoadMode::ConstantResistance,
        )?;
        let expected = match &s.expected {
            Some(v) => self.positive(v, Dim::Current, "expected")?,
            None => self.targets.limit_current_a,
        };
        if !(expected.is_finite() && expected > 0.0) {
            return Err(self.at(
                rs.span(),
                "the design gives no limit current: set `expected` for the knee search",
            ));
        }
        let opt = |v: &Option<SV>, field: &str, default: f64| -> Result<f64, PlanError> {
            match v {
                Some(v) => self.positive(v, Dim::Current, field),
                None => Ok(default),
            }
        };
        let reference = opt(&s.reference, "reference", 0.1 * expected)?;
        let upper = opt(&s.upper, "upper", 1.3 * expected)?;
        let ceiling = opt(&s.ceiling, "ceiling", 1.6 * expected)?;
        let drop = match &s.drop {
            Some(v) => self.percent(v, "drop", 0.05, 50.0)?,
            // The same fixed-drop criterion the analysis reports, so the two agree.
            None => crate::analysis::DEFAULT_KNEE_DROP,
        };
        let resolution = match &s.resolution {
            Some(v) => self.percent(v, "resolution", 0.01, 10.0)?,
            None => 0.0025,
        };
        let max_points = match &s.max_points {
            Some(v) => self.count(v, "max_points", 4, 1000)?,
            None => 20,
        };
        if !(reference < expected && expected < upper && upper <= ceiling) {
            return Err(self.at(
                rs.span(),
                format!(
                    "knee search needs reference < expected < upper <= ceiling; got {} < {} < \
                     {} <= {} A",
                    reference, expected, upper, ceiling
                ),
            ));
        }
        Ok(Action::KneeSearch(KneeConfig {
            mode,
            expected_a: expected,
            reference_a: reference,
            upper_a: upper,
            ceiling_a: ceiling,
            drop,
            resolution,
            max_points,
            vout_hint_v: self.targets.vout_v,
        }))
    }
}

/// Round to 9 significant digits, removing binary noise such as 4.800000000000001 from
/// computed setpoints (instruments resolve far less).
pub fn tidy(x: f64) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let digits = 8 - x.abs().log10().floor() as i32;
    let scale = 10f64.powi(digits.clamp(-300, 300));
    (x * scale).round() / scale
}

/// 1-based line and column (in characters) of a byte offset (shared with every config file).
pub use crate::config::line_col;

/// Parse one quantity string of the plan syntax (see the module docs).
pub fn parse_quantity(text: &str, dim: Dim, t: &DesignTargets) -> Result<f64, String> {
    let s = text.trim();
    let bad = || {
        format!(
            "cannot read '{text}' as {}: write e.g. {}",
            dim.name(),
            dim.example()
        )
    };
    // Relative form: "<pct> % of <basis>", "<pct>% <basis>", or "<basis>".
    let (pct, basis) = match s.split_once('%') {
        Some((num, rest)) => {
            let pct: f64 = num.trim().parse().map_err(|_| bad())?;
            let rest = rest.trim();
            let rest = rest.strip_prefix("of ").unwrap_or(rest).trim();
            (Some(pct), Some(rest))
        }
        None if s.chars().next().is_some_and(|c| c.is_ascii_alphabetic()) => (None, Some(s)),
        None => (None, None),
    };
    if let Some(basis) = basis {
        let (value, bdim) = match basis {
            "vout" => (Some(t.vout_v), Dim::Voltage),
            "vin" => (t.input_voltage_v, Dim::Voltage),
            "limit" => (Some(t.limit_current_a), Dim::Current),
            "short" => (Some(t.short_circuit_current_a), Dim::Current),
            "max_load" => (Some(t.max_load_current_a), Dim::Current),
            "r_knee" => (Some(t.vout_v / t.limit_current_a), Dim::Resistance),
            _ => {
                return Err(format!(
                    "'{basis}' is not a design value: use vout, vin, limit, short, max_load or \
                     r_knee (as in \"90 % of limit\")"
                ))
            }
        };
        if bdim != dim {
            return Err(format!(
                "'{basis}' is {}, but this field needs {}",
                bdim.name(),
                dim.name()
            ));
        }
        let value = value.ok_or_else(|| {
            format!("the design states no '{basis}' value; give an absolute value instead")
        })?;
        if !(value.is_finite() && value > 0.0) {
            return Err(format!(
                "the design's '{basis}' value ({value}) is not usable; give an absolute value"
            ));
        }
        return Ok(pct.unwrap_or(100.0) / 100.0 * value);
    }
    // Absolute form: number, optional space, optional SI prefix, unit.
    let split = s
        .char_indices()
        .find(|(i, c)| {
            !(c.is_ascii_digit()
                || *c == '.'
                || *c == '+'
                || *c == '-'
                || ((*c == 'e' || *c == 'E')
                    && s[i + 1..]
                        .chars()
                        .next()
                        .is_some_and(|n| n.is_ascii_digit() || n == '-' || n == '+')))
        })
        .map(|(i, _)| i)
        .unwrap_or(s.len());
    let number: f64 = s[..split].trim().parse().map_err(|_| bad())?;
    let unit = s[split..].trim();
    let scale = unit_scale(unit, dim).ok_or_else(bad)?;
    let value = number * scale;
    if !value.is_finite() {
        return Err(format!("'{text}' is out of range"));
    }
    Ok(value)
}

fn unit_scale(unit: &str, dim: Dim) -> Option<f64> {
    if dim == Dim::Time {
        return match unit {
            "s" | "sec" => Some(1.0),
            "ms" => Some(1e-3),
            "us" => Some(1e-6),
            "min" => Some(60.0),
            "h" => Some(3600.0),
            _ => None,
        };
    }
    let base: &[&str] = match dim {
        Dim::Current => &["A"],
        Dim::Voltage => &["V"],
        Dim::Resistance => &["ohm", "Ohm", "\u{3a9}"],
        Dim::Power => &["W"],
        Dim::Temperature => &["degC", "\u{b0}C"],
        Dim::Time => &[],
    };
    if base.contains(&unit) {
        return Some(1.0);
    }
    if dim == Dim::Temperature {
        return None;
    }
    let mut chars = unit.chars();
    let prefix = chars.next()?;
    let rest = chars.as_str();
    if !base.contains(&rest) {
        return None;
    }
    match prefix {
        'k' => Some(1e3),
        'M' => Some(1e6),
        'm' => Some(1e-3),
        'u' | '\u{b5}' => Some(1e-6),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn targets() -> DesignTargets {
        DesignTargets {
            vout_v: 12.0,
            limit_current_a: 1.5,
            short_circuit_current_a: 0.6,
            max_load_current_a: 1.0,
            input_voltage_v: Some(18.0),
        }
    }

    fn parse(text: &str) -> Result<Plan, PlanError> {
        Plan::parse(text, "plan.toml", &targets())
    }

    fn located(err: PlanError) -> (usize, usize, String) {
        match err {
            PlanError::At {
                line,
                column,
                message,
                ..
            } => (line, column, message),
            other => panic!("expected a located error, got {other}"),
        }
    }

    const FULL: &str = r#"
name = "bring-up"
settle = "200 ms"
samples = 4

[interlocks]
max_output_voltage = "14 V"
max_short_dwell = "5 s"

[[step]]
kind = "load_sweep"
from = "0 A"
to = "90 % of limit"
step = "150 mA"

[[step]]
kind = "limit_trace"
mode = "cv"
from = "100% vout"
to = "10 % of vout"
points = 10
samples = 2

[[step]]
kind = "knee_search"

[[step]]
kind = "short_circuit"
dwell = "3 s"
interval = "500 ms"

[[step]]
kind = "line_sweep"
from = "15 V"
to = "20 V"
points = 6
load = "max_load"

[[step]]
kind = "soak"
load = "80 % of max_load"
duration = "10 min"
interval = "30 s"
"#;

    #[test]
    fn full_plan_expands_relative_ranges() {
        let p = parse(FULL).expect("plan parses");
        assert_eq!(p.name, "bring-up");
        assert_eq!(p.steps.len(), 6);
        assert_eq!(p.source_volts, Some(18.0), "defaults to the design's vin");
        assert_eq!(p.interlocks.max_output_voltage_v, 14.0);
        assert_eq!(p.interlocks.max_short_dwell, Duration::from_secs(5));
        // 0 .. 0.9 * 1.5 A = 1.35 A in 150 mA steps: 10 points, ending exactly on 1.35 A.
        match &p.steps[0].action {
            Action::Sweep { mode, setpoints } => {
                assert_eq!(*mode, LoadMode::ConstantCurrent);
                assert_eq!(setpoints.len(), 10);
                assert!((setpoints[9] - 1.35).abs() < 1e-12);
            }
            other => panic!("unexpected {other:?}"),
        }
        assert_eq!(p.steps[0].settle, Duration::from_millis(200));
        assert_eq!(p.steps[0].samples, 4);
        match &p.steps[1].action {
            Action::Sweep { mode, setpoints } => {
                assert_eq!(*mode, LoadMode::ConstantVoltage);
                assert_eq!(setpoints.len(), 10);
                assert!((setpoints[0] - 12.0).abs() < 1e-12);
                assert!((setpoints[9] - 1.2).abs() < 1e-12);
            }
            other => panic!("unexpected {other:?}"),
        }
        assert_eq!(p.steps[1].samples, 2);
        match &p.steps[2].action {
            Action::KneeSearch(k) => {
                assert_eq!(k.mode, LoadMode::ConstantResistance);
                assert!((k.expected_a - 1.5).abs() < 1e-12);
                assert!((k.reference_a - 0.15).abs() < 1e-12);
                assert_eq!(k.max_points, 20);
            }
            other => panic!("unexpected {other:?}"),
        }
        match &p.steps[3].action {
            Action::ShortCircuit(s) => {
                assert_eq!(s.dwell, Duration::from_secs(3));
                assert_eq!(s.interval, Duration::from_millis(500));
                assert!((s.expected_current_a - 0.6).abs() < 1e-12);
            }
            other => panic!("unexpected {other:?}"),
        }
        // dwell 3 s / 0.5 s -> 6 readings (0 .. 2.5 s), recovery 2 s / 0.5 s -> 4 readings,
        // plus one before the short.
        assert_eq!(p.steps[3].planned_points(), 11);
        match &p.steps[4].action {
            Action::LineSweep { load, source_volts } => {
                assert!((load.value - 1.0).abs() < 1e-12);
                assert_eq!(source_volts, &vec![15.0, 16.0, 17.0, 18.0, 19.0, 20.0]);
            }
            other => panic!("unexpected {other:?}"),
        }
        assert_eq!(p.steps[5].planned_points(), 21);
        assert!(p.has_short_circuit());
        // The CV limit trace needs an ammeter (the load's current is the unit's to choose).
        assert_eq!(
            p.required_roles(),
            vec![
                Role::Load,
                Role::OutputVoltmeter,
                Role::InputSource,
                Role::OutputAmmeter
            ]
        );
    }

    #[test]
    fn default_interlocks_derive_from_design() {
        let p = parse("name = \"x\"\n[[step]]\nkind = \"soak\"\nload = \"1 A\"\nduration = 60\ninterval = 5\n")
            .expect("parses");
        assert!((p.interlocks.max_output_voltage_v - 14.4).abs() < 1e-9);
        // 1.25 * 12 V * max(1.5 A, 1.0 A)
        assert!((p.interlocks.max_load_power_w - 22.5).abs() < 1e-9);
        assert_eq!(p.interlocks.max_temperature_c, 85.0);
    }

    #[test]
    fn quantities_read_units_prefixes_and_design_bases() {
        let t = targets();
        assert_eq!(parse_quantity("450 mA", Dim::Current, &t), Ok(0.45));
        assert_eq!(parse_quantity("1.5A", Dim::Current, &t), Ok(1.5));
        assert_eq!(parse_quantity("50 mohm", Dim::Resistance, &t), Ok(0.05));
        assert_eq!(parse_quantity("2.2 kohm", Dim::Resistance, &t), Ok(2200.0));
        assert_eq!(parse_quantity("300 ms", Dim::Time, &t), Ok(0.3));
        assert_eq!(parse_quantity("10 min", Dim::Time, &t), Ok(600.0));
        assert_eq!(parse_quantity("1e-1 V", Dim::Voltage, &t), Ok(0.1));
        assert_eq!(parse_quantity("120 % of short", Dim::Current, &t), Ok(0.72));
        assert_eq!(parse_quantity("50% vout", Dim::Voltage, &t), Ok(6.0));
        assert_eq!(parse_quantity("r_knee", Dim::Resistance, &t), Ok(8.0));
        assert!(parse_quantity("12 V", Dim::Current, &t).is_err());
        assert!(parse_quantity("1e999 A", Dim::Current, &t).is_err());
        assert!(parse_quantity("90 % of vout", Dim::Current, &t)
            .unwrap_err()
            .contains("a voltage"));
        assert!(parse_quantity("90 % of knee", Dim::Current, &t)
            .unwrap_err()
            .contains("not a design value"));
        let no_vin = DesignTargets {
            input_voltage_v: None,
            ..t
        };
        assert!(parse_quantity("vin", Dim::Voltage, &no_vin).is_err());
    }

    #[test]
    fn wrong_dimension_names_line_and_column() {
        let text =
            "name = \"x\"\n[[step]]\nkind = \"load_sweep\"\nfrom = 0\nto = \"12 V\"\npoints = 3\n";
        let (line, col, msg) = located(parse(text).unwrap_err());
        assert_eq!((line, col), (5, 6));
        assert!(msg.contains("`to`"), "{msg}");
    }

    #[test]
    fn unknown_kind_and_stray_fields_are_located() {
        let text = "name = \"x\"\n\n[[step]]\nkind = \"load_swep\"\n";
        let (line, col, msg) = located(parse(text).unwrap_err());
        assert_eq!((line, col), (4, 8));
        assert!(msg.contains("unknown step kind"), "{msg}");

        let text = "name = \"x\"\n[[step]]\nkind = \"soak\"\nload = 1\nduration = 5\ninterval = 1\ndwell = 3\n";
        let (line, col, msg) = located(parse(text).unwrap_err());
        assert_eq!((line, col), (7, 9));
        assert!(msg.contains("does not apply"), "{msg}");

        let text = "name = \"x\"\n[[step]]\nkind = \"soak\"\nlaod = 1\n";
        let (line, _, msg) = located(parse(text).unwrap_err());
        assert_eq!(line, 4, "{msg}");
        assert!(msg.contains("laod"), "{msg}");
    }

    #[test]
    fn syntax_errors_and_missing_fields_are_located() {
        let text = "name = \"x\"\n[[step]]\nkind = \"soak\nload = 1\n";
        let (line, _, _) = located(parse(text).unwrap_err());
        assert_eq!(line, 3);

        let text = "name = \"x\"\n\n[[step]]\nkind = \"load_sweep\"\nfrom = 0\n";
        let (line, _, msg) = located(parse(text).unwrap_err());
        assert!(msg.contains("needs `to`"), "{msg}");
        assert!(
            (3..=5).contains(&line),
            "step located near its table, got line {line}"
        );
    }

    #[test]
    fn short_dwell_beyond_interlock_is_rejected() {
        let text = "name = \"x\"\n[interlocks]\nmax_short_dwell = \"2 s\"\n[[step]]\nkind = \"short_circuit\"\ndwell = \"5 s\"\n";
        let (line, col, msg) = located(parse(text).unwrap_err());
        assert_eq!((line, col), (6, 9));
        assert!(msg.contains("max_short_dwell"), "{msg}");
    }

    #[test]
    fn plan_without_steps_or_bad_name_is_rejected() {
        assert!(matches!(
            parse("name = \"x\"\n"),
            Err(PlanError::General { .. })
        ));
        let (line, col, _) = located(parse("name = \"a b\"\n").unwrap_err());
        assert_eq!((line, col), (1, 8));
    }

    #[test]
    fn knee_bounds_must_be_ordered() {
        let text = "name = \"x\"\n[[step]]\nkind = \"knee_search\"\nupper = \"1 A\"\n";
        let (_, _, msg) = located(parse(text).unwrap_err());
        assert!(msg.contains("reference < expected < upper"), "{msg}");
    }

    #[test]
    fn roles_are_checked_by_name() {
        let p = parse(FULL).expect("parses");
        let err = p
            .check_roles(|r| r == Role::Load || r == Role::OutputVoltmeter)
            .unwrap_err();
        assert!(err.contains("input_source"), "{err}");
        assert!(p.check_roles(|_| true).is_ok());
    }

    #[test]
    fn tidy_removes_binary_noise_only() {
        assert_eq!(tidy(4.800000000000001), 4.8);
        assert_eq!(tidy(0.15000000000000002), 0.15);
        assert_eq!(tidy(24.055844122715715), 24.0558441);
        assert_eq!(tidy(-1.2345678912e-3), -1.23456789e-3);
        assert_eq!(tidy(0.0), 0.0);
    }

    #[test]
    fn line_col_counts_characters() {
        assert_eq!(line_col("ab\ncd", 0), (1, 1));
        assert_eq!(line_col("ab\ncd", 4), (2, 2));
        assert_eq!(line_col("\u{3a9}x\ny", 2), (1, 2));
        // An offset inside a multi-byte character counts as that character.
        assert_eq!(line_col("a\n\u{3a9}x", 3), (2, 1));
        assert_eq!(line_col("ab", 99), (1, 3));
    }

    proptest::proptest! {
        #[test]
        fn quantity_parser_never_panics(text in "\\PC{0,24}") {
            for dim in [Dim::Current, Dim::Time] {
                match parse_quantity(&text, dim, &targets()) {
                    Ok(v) => proptest::prop_assert!(v.is_finite()),
                    Err(m) => proptest::prop_assert!(!m.is_empty()),
                }
            }
        }

        #[test]
        fn plan_parser_never_panics(
            kind in "(load_sweep|limit_trace|knee_search|short_circuit|line_sweep|soak|x)",
            key in "(from|to|step|points|load|dwell|interval|mode|expected|drop|duration)",
            value in "(\"[-0-9.e%a-zA-Z ]{0,12}\"|-?[0-9]{1,6}|-?[0-9]{1,3}\\.[0-9]{1,3})",
        ) {
            let text = format!("name = \"p\"\n[[step]]\nkind = \"{kind}\"\n{key} = {value}\n");
            match parse(&text) {
                Ok(p) => proptest::prop_assert_eq!(p.steps.len(), 1),
                Err(PlanError::At { line, column, message, .. }) => {
                    proptest::prop_assert!((1..=4).contains(&line) && column >= 1);
                    proptest::prop_assert!(!message.is_empty());
                }
                Err(e) => proptest::prop_assert!(!e.to_string().is_empty()),
            }
        }
    }
}
