//! Expansion of a raw plan into the checked types: defaults filled in, relative values
//! resolved against the design, ranges turned into setpoint lists. Each rule is one call into
//! `checks`, in the order the file reads. Pure.

use super::checks::{self, MAX_SWEEP_POINTS};
use super::error::PlanError;
use super::fields::Cx;
use super::knee::KneeConfig;
use super::quantity::{tidy, Dim};
use super::raw::{RawInterlocks, RawPlan, RawStep, SV};
use super::steps::{Action, Interlocks, LoadSetting, Plan, ShortCircuit, Step};
use crate::measure::LoadMode;
use crate::record::StepKind;
use std::time::Duration;
use toml::Spanned;

const DEFAULT_SETTLE_S: f64 = 0.5;
const DEFAULT_SAMPLES: u32 = 3;

impl Cx<'_> {
    /// The limits a step sets on its metrics (`max_change`, `max_drift`: percentages;
    /// `max_rise`: a temperature difference).
    pub(super) fn step_limits(&self, s: &RawStep) -> Result<super::steps::StepLimits, PlanError> {
        let pct = |v: &Option<SV>, f: &str| -> Result<Option<f64>, PlanError> {
            v.as_ref()
                .map(|v| self.percent(v, f, 1e-6, 100.0).map(|x| x * 100.0))
                .transpose()
        };
        Ok(super::steps::StepLimits {
            max_change_percent: pct(&s.max_change, "max_change")?,
            max_drift_percent: pct(&s.max_drift, "max_drift")?,
            max_rise_c: s
                .max_rise
                .as_ref()
                .map(|v| self.positive(v, Dim::Temperature, "max_rise"))
                .transpose()?,
        })
    }

    pub(super) fn expand(&self, raw: RawPlan) -> Result<Plan, PlanError> {
        let name = checks::name_is_a_folder_component(self, &raw.name)?;
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
        checks::has_steps(self, &name, &raw.step)?;
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
        checks::interlocks_are_usable(self, &il)?;
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
        let kind = checks::kind_is_known(self, &s.kind)?;
        checks::fields_apply_to_kind(self, s, kind)?;
        let label = match &s.label {
            Some(l) => l.get_ref().clone(),
            None => format!("{} {}", index + 1, kind.as_str()),
        };
        let beyond_design = match &s.beyond_design {
            Some(b) if b.get_ref().trim().is_empty() => {
                return Err(self.at(
                    b.span(),
                    "`beyond_design` must say why this step may go beyond the design                      (it is shown in the record and the report)",
                ))
            }
            Some(b) => Some(b.get_ref().trim().to_string()),
            None => None,
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
            // Never parsed from a plan (`StepKind::parse` does not know it); refused all the
            // same rather than trusted.
            StepKind::Preflight => {
                return Err(self.at(
                    rs.span(),
                    format!(
                        "step {}: 'preflight' is not a plan step (the pre-flight reading is                          taken before every plan; --no-preflight skips it)",
                        index + 1
                    ),
                ))
            }
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
                if mode == LoadMode::ConstantResistance {
                    let span = s.from.as_ref().map(|v| v.span()).unwrap_or(rs.span());
                    checks::all_above_zero(
                        self,
                        &setpoints,
                        span,
                        "a CR trace needs resistances above zero",
                    )?;
                }
                Action::Sweep { mode, setpoints }
            }
            StepKind::LineSweep => {
                let source_volts = self.range(s, rs, Dim::Voltage, index, kind)?;
                let span = s.from.as_ref().map(|v| v.span()).unwrap_or(rs.span());
                checks::all_above_zero(
                    self,
                    &source_volts,
                    span,
                    "source voltages must be above zero",
                )?;
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
                checks::interval_fits(self, interval, duration, "duration", interval_v.span())?;
                checks::soak_readings_within_limit(self, duration, interval, interval_v.span())?;
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
        let limits = self.step_limits(s)?;
        Ok(Step {
            kind,
            label,
            beyond_design,
            limits,
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
                checks::sweep_points_within_limit(self, n, sv.span())?;
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
        checks::dwell_within_interlock(self, dwell, il, dwell_v.span())?;
        let interval = match &s.interval {
            Some(v) => {
                let d = self.duration(v, "interval")?;
                checks::interval_fits(self, d, dwell, "dwell", v.span())?;
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
        checks::knee_bounds_are_ordered(self, [reference, expected, upper, ceiling], rs.span())?;
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
