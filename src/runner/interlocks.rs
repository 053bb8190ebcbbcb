//! The interlocks checked on every reading, and the cautions printed before a plan that
//! shorts the unit. Pure.

use crate::measure::{LoadMode, Measurement, Quantity, Reading};
use crate::plan::{Action, Interlocks, LoadSetting, Plan};
use std::time::Instant;

/// Check one reading against the interlocks; the reason when one trips.
///
/// Load power is the measured output voltage times the measured output current; without an
/// ammeter the current is taken from the CC setpoint or from V / R in CR mode. An overrange
/// output voltage or temperature trips (the value is unknown, so it may be unsafe).
pub fn check_interlocks(
    m: &Measurement,
    il: &Interlocks,
    setting: Option<LoadSetting>,
    short_since: Option<Instant>,
    has_thermometer: bool,
) -> Option<String> {
    let v = match m.values.get(&Quantity::OutputVoltage) {
        Some(Reading::Overrange) => {
            return Some("output voltmeter reads overrange (voltage unknown)".to_string())
        }
        Some(Reading::Value(v)) => Some(*v),
        None => None,
    };
    if let Some(v) = v {
        if v > il.max_output_voltage_v {
            return Some(format!(
                "output voltage {} exceeds max_output_voltage {}",
                crate::quantity::eng(v, "V"),
                crate::quantity::eng(il.max_output_voltage_v, "V")
            ));
        }
        let i = m.get(Quantity::OutputCurrent).or(match setting {
            Some(LoadSetting {
                mode: LoadMode::ConstantCurrent,
                value,
            }) => Some(value),
            Some(LoadSetting {
                mode: LoadMode::ConstantResistance,
                value,
            }) if value > 0.0 => Some(v / value),
            _ => None,
        });
        if let Some(i) = i {
            let p = v * i;
            if p > il.max_load_power_w {
                return Some(format!(
                    "load power {} exceeds max_load_power {}",
                    crate::quantity::eng(p, "W"),
                    crate::quantity::eng(il.max_load_power_w, "W")
                ));
            }
        }
    }
    if has_thermometer {
        match m.values.get(&Quantity::Temperature) {
            Some(Reading::Overrange) => {
                return Some("thermometer reads overrange (temperature unknown)".to_string())
            }
            Some(Reading::Value(t)) if *t > il.max_temperature_c => {
                return Some(format!(
                    "temperature {} exceeds max_temperature {}",
                    crate::quantity::eng(*t, "degC"),
                    crate::quantity::eng(il.max_temperature_c, "degC")
                ))
            }
            _ => {}
        }
    }
    if let Some(t) = short_since {
        let held = t.elapsed();
        if held > il.max_short_dwell {
            return Some(format!(
                "short circuit held {:.2} s, beyond max_short_dwell {:.2} s",
                held.as_secs_f64(),
                il.max_short_dwell.as_secs_f64()
            ));
        }
    }
    None
}

/// The cautions printed before a plan that shorts the unit's output. `vin` is the input
/// voltage if known; the pass device then dissipates about `vin * i_sc`.
pub fn short_circuit_cautions(plan: &Plan, vin: Option<f64>) -> Vec<String> {
    let mut lines = vec!["CAUTION: this plan shorts the unit's output.".to_string()];
    for s in &plan.steps {
        if let Action::ShortCircuit(sc) = &s.action {
            let dissipation = match vin {
                Some(v) => format!(
                    "about {} (V_in {} x I_sc {})",
                    crate::quantity::eng(v * sc.expected_current_a, "W"),
                    crate::quantity::eng(v, "V"),
                    crate::quantity::eng(sc.expected_current_a, "A")
                ),
                None => format!(
                    "about V_in x {} (input voltage unknown)",
                    crate::quantity::eng(sc.expected_current_a, "A")
                ),
            };
            lines.push(format!(
                "  step '{}': short of {} held for {:.1} s; the pass device dissipates {}.",
                s.label,
                crate::quantity::eng(sc.resistance_ohm, "ohm"),
                sc.dwell.as_secs_f64(),
                dissipation
            ));
        }
    }
    lines.extend([
        "  Heatsinks and the pass device get hot: do not touch them during or after the test."
            .to_string(),
        "  A unit powered from the mains carries dangerous voltages: keep covers on and hands \
         clear."
            .to_string(),
        "  Follow local codes and licensed practice; stop with Ctrl-C at any time (the load \
         input and then the source are switched off)."
            .to_string(),
    ]);
    lines
}
