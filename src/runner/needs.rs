//! Whether a bench file can carry out a plan, checked before any port opens: every command
//! the plan's steps need exists on the instrument holding that role (a constant-resistance
//! step needs a resistance command), and every setpoint the plan knows in advance is sent
//! without being lost by its template (`{value:d}` for 0.54 A, a scale that overflows).
//! Pure.

use crate::bench::{BenchConfig, BenchError, CommandKey};
use crate::measure::{LoadMode, Role};
use crate::plan::{Action, LoadSetting, Plan};

/// One setting the plan makes: the command key, the values it sends, and the step asking.
struct SettingNeed {
    role: Role,
    key: CommandKey,
    values: Vec<f64>,
    step: String,
}

fn load_need(mode: LoadMode, values: Vec<f64>, step: &str) -> SettingNeed {
    SettingNeed {
        role: Role::Load,
        key: CommandKey::load_mode(mode).1,
        values,
        step: step.to_string(),
    }
}

fn setting(s: &LoadSetting, step: &str) -> SettingNeed {
    load_need(s.mode, vec![s.value], step)
}

fn needs(plan: &Plan) -> Vec<SettingNeed> {
    let mut out = Vec::new();
    if let Some(v) = plan.source_volts {
        out.push(SettingNeed {
            role: Role::InputSource,
            key: CommandKey::SourceSetVoltage,
            values: vec![v],
            step: "the plan's source_volts".into(),
        });
    }
    for (i, step) in plan.steps.iter().enumerate() {
        let label = format!("step {} '{}'", i + 1, step.label);
        match &step.action {
            Action::Sweep { mode, setpoints } => {
                out.push(load_need(*mode, setpoints.clone(), &label))
            }
            Action::LineSweep { load, source_volts } => {
                out.push(setting(load, &label));
                out.push(SettingNeed {
                    role: Role::InputSource,
                    key: CommandKey::SourceSetVoltage,
                    values: source_volts.clone(),
                    step: label.clone(),
                });
            }
            Action::KneeSearch(k) => {
                // The search picks its setpoints as it goes: check the ends of its range.
                let currents = [k.reference_a, k.expected_a, k.upper_a, k.ceiling_a];
                let values = match k.mode {
                    LoadMode::ConstantResistance => currents
                        .iter()
                        .filter(|i| **i > 0.0)
                        .map(|i| k.vout_hint_v / i)
                        .collect(),
                    _ => currents.to_vec(),
                };
                out.push(load_need(k.mode, values, &label));
            }
            Action::ShortCircuit(sc) => {
                out.push(load_need(
                    LoadMode::ConstantResistance,
                    vec![sc.resistance_ohm],
                    &label,
                ));
                out.push(setting(&sc.recovery_load, &label));
            }
            Action::Soak { load, .. } => out.push(setting(load, &label)),
        }
    }
    out
}

/// Check that `bench` can carry out `plan`: a configuration error (exit 2) at the
/// instrument's table otherwise.
pub fn check_bench_for_plan(bench: &BenchConfig, plan: &Plan) -> Result<(), BenchError> {
    for need in needs(plan) {
        let Some(inst) = bench.instrument_for(need.role) else {
            continue; // missing roles are reported by the plan's role check
        };
        let Some(t) = inst.commands.get(need.key) else {
            return Err(BenchError::Config(bench.error_at(
                inst,
                format!(
                    "{} needs {} ({}), which this instrument does not have; add {} under [instrument.commands] or change the plan",
                    need.step,
                    need.key.name(),
                    need.key.info().does,
                    need.key.name()
                ),
            )));
        };
        let full_scale = need.values.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for v in &need.values {
            if let Err(e) = t.check_lossless_in(*v, full_scale) {
                return Err(BenchError::Config(bench.error_at(
                    inst,
                    format!(
                        "command {} = \"{}\" cannot send {}'s setpoint: {e}",
                        need.key.name(),
                        t.source(),
                        need.step
                    ),
                )));
            }
        }
    }
    Ok(())
}
