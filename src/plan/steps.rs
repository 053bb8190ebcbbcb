//! The checked, expanded plan: every step with concrete setpoints (A, V, ohm), durations and
//! sample counts, plus the interlocks. Values of these types have passed every check in
//! `checks`; the runner executes them as they are. [`Plan::load`] is the only I/O (reading
//! the plan file).

use super::error::PlanError;
use super::fields::Cx;
use super::knee::KneeConfig;
use super::raw::RawPlan;
use super::targets::DesignTargets;
use crate::config;
use crate::measure::{LoadMode, Role};
use crate::record::StepKind;
use std::path::Path;
use std::time::Duration;

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
    /// The plan's reason for letting this step go beyond the design (`beyond_design`), which
    /// lifts the design checks of `Plan::parse_for_design` for it.
    pub beyond_design: Option<String>,
    /// Limits the step sets on its own metrics.
    pub limits: StepLimits,
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
        let cx = Cx::new(text, file, targets);
        let raw: RawPlan = toml::from_str(text)
            .map_err(|e| PlanError::Invalid(config::from_toml(file, text, &e)))?;
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

/// Limits a step sets on its own metrics (line regulation, soak drift and temperature rise).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct StepLimits {
    /// Largest |line regulation| that passes, percent.
    pub max_change_percent: Option<f64>,
    /// Largest |soak drift| that passes, percent.
    pub max_drift_percent: Option<f64>,
    /// Largest temperature rise over the soak that passes, degC.
    pub max_rise_c: Option<f64>,
}

/// One step of a plan as read without the design: its kind, label, `beyond_design` and the
/// limits it sets on its metrics.
#[derive(Debug, Clone, PartialEq)]
pub struct StepOutline {
    pub kind: StepKind,
    pub label: Option<String>,
    pub beyond_design: Option<String>,
    pub limits: StepLimits,
}

/// The steps of a record folder's plan snapshot (`plan.toml`), when it is there and reads.
pub fn snapshot_outline(record: &Path) -> Option<Vec<StepOutline>> {
    let path = record.join(crate::record::PLAN_SNAPSHOT);
    let text = std::fs::read_to_string(&path).ok()?;
    outline(&text, &path.display().to_string()).ok()
}

/// The steps of plan text, in order, read without the design (what a record's plan
/// snapshot promised). Errors name the file, line and column.
pub fn outline(text: &str, file: &str) -> Result<Vec<StepOutline>, PlanError> {
    let raw: RawPlan =
        toml::from_str(text).map_err(|e| PlanError::Invalid(config::from_toml(file, text, &e)))?;
    raw.step
        .iter()
        .map(|s| {
            let s = s.get_ref();
            let kind = s.kind.get_ref();
            let kind = StepKind::parse(kind).ok_or_else(|| {
                PlanError::Invalid(config::at_span(
                    file,
                    text,
                    Some(s.kind.span()),
                    format!("unknown step kind '{kind}'"),
                ))
            })?;
            // The limits are absolute (a percentage, a temperature difference): no design
            // value is needed to read them.
            let none = DesignTargets {
                vout_v: 0.0,
                limit_current_a: 0.0,
                short_circuit_current_a: 0.0,
                max_load_current_a: 0.0,
                input_voltage_v: None,
            };
            let cx = Cx::new(text, file, &none);
            Ok(StepOutline {
                kind,
                label: s.label.as_ref().map(|l| l.get_ref().clone()),
                beyond_design: s
                    .beyond_design
                    .as_ref()
                    .map(|b| b.get_ref().trim().to_string()),
                limits: cx.step_limits(s)?,
            })
        })
        .collect()
}

/// The kinds of a plan's steps, in order (see [`outline`]).
pub fn step_kinds(text: &str, file: &str) -> Result<Vec<StepKind>, PlanError> {
    Ok(outline(text, file)?.into_iter().map(|s| s.kind).collect())
}
