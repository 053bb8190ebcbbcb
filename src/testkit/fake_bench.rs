//! Test double for the bench: `FakeBench` implements `BenchControl` in memory over a simple
//! supply model (the soft-knee curve: regulated output with a small output resistance and a
//! soft current limit, or a sharp foldback limiter), with switches to inject faults. It is NOT
//! the simulated bench (`src/sim/`); it only lets the runner's logic be tested without ports.

use super::SoftKnee;
use crate::control::{BenchControl, ControlError, InstrumentIdentity};
use crate::measure::{LoadMode, Measurement, Quantity, Reading, Role};
use crate::plan::DesignTargets;
use crate::runner::CancelToken;
use std::time::Duration;

/// Faults to inject.
#[derive(Debug, Clone, Default)]
pub struct Faults {
    /// `measure` fails from this call on (0-based count of measure calls).
    pub measure_fails_from: Option<usize>,
    /// The load stops answering (every load command fails) from this measure call on.
    pub load_dies_from: Option<usize>,
    /// Output voltage reads this value from this measure call on.
    pub overvoltage_from: Option<(usize, f64)>,
    /// Output current reads overrange from this measure call on.
    pub current_overrange_from: Option<usize>,
    /// Output voltage reads overrange from this measure call on.
    pub voltage_overrange_from: Option<usize>,
    /// Temperature reads this value from this measure call on.
    pub hot_from: Option<(usize, f64)>,
    /// Cancel this token at this measure call.
    pub cancel_at: Option<(usize, CancelToken)>,
    /// Each measure call takes this long.
    pub measure_delay: Option<Duration>,
    /// From this measure call on, a reading never comes back (a hung meter).
    pub measure_hangs_from: Option<usize>,
}

/// Sharp foldback limiter: regulated line V0 - R_out I up to the knee current, then the limit
/// line from the knee down to (I_sc, 0 V), with I_sc below the knee. Under a CC load between
/// I_sc and the knee it has two operating points; once pushed past the knee it latches on the
/// low one until the load falls to I_sc or below.
#[derive(Debug, Clone, Copy)]
pub struct Foldback {
    pub v0: f64,
    pub r_out: f64,
    pub i_knee: f64,
    pub i_sc: f64,
}

impl Foldback {
    pub fn v_knee(&self) -> f64 {
        self.v0 - self.r_out * self.i_knee
    }
    /// Current on the limit line at voltage v.
    pub fn limit_line_current(&self, v: f64) -> f64 {
        self.i_sc + (self.i_knee - self.i_sc) * v / self.v_knee()
    }
}

/// The bench double; tests set and inspect its fields directly.
pub struct FakeBench {
    pub supply: SoftKnee,
    /// When set, the unit is this foldback supply instead of `supply`.
    pub foldback: Option<Foldback>,
    pub latched: bool,
    pub roles: Vec<Role>,
    pub faults: Faults,
    /// Every command in order, e.g. `load cc 0.5`, `load_input on`, `measure`, `safe_state`.
    pub log: Vec<String>,
    pub load_mode: LoadMode,
    pub load_value: f64,
    pub load_on: bool,
    pub source_v: f64,
    pub source_on: bool,
    pub measures: usize,
    pub safe_state_calls: usize,
}

impl FakeBench {
    pub fn new(roles: &[Role]) -> FakeBench {
        FakeBench {
            supply: SoftKnee::standard(),
            foldback: None,
            latched: false,
            roles: roles.to_vec(),
            faults: Faults::default(),
            log: Vec::new(),
            load_mode: LoadMode::ConstantCurrent,
            load_value: 0.0,
            load_on: false,
            source_v: 0.0,
            source_on: false,
            measures: 0,
            safe_state_calls: 0,
        }
    }

    /// Load (V and I), output voltmeter, input source, thermometer.
    pub fn full() -> FakeBench {
        FakeBench::new(&[
            Role::Load,
            Role::OutputVoltmeter,
            Role::OutputAmmeter,
            Role::InputSource,
            Role::InputVoltmeter,
            Role::Thermometer,
        ])
    }

    fn load_dead(&self) -> bool {
        self.faults
            .load_dies_from
            .is_some_and(|n| self.measures >= n)
    }

    fn powered(&self) -> bool {
        !self.roles.contains(&Role::InputSource) || self.source_on
    }

    fn foldback_output(&mut self, f: Foldback) -> (f64, f64) {
        if !self.load_on {
            self.latched = false;
            return (f.v0, 0.0);
        }
        match self.load_mode {
            LoadMode::ConstantCurrent => {
                let i = self.load_value;
                if i <= f.i_sc {
                    self.latched = false;
                }
                if i > f.i_knee {
                    self.latched = true;
                    return (0.0, f.i_sc);
                }
                if self.latched {
                    let v = f.v_knee() * (i - f.i_sc) / (f.i_knee - f.i_sc);
                    (v, i)
                } else {
                    (f.v0 - f.r_out * i, i)
                }
            }
            LoadMode::ConstantResistance => {
                let r = self.load_value;
                let i_reg = f.v0 / (r + f.r_out);
                if i_reg <= f.i_knee {
                    (i_reg * r, i_reg)
                } else {
                    // On the limit line: V / R = I_sc + (I_knee - I_sc) V / V_knee.
                    let v = f.i_sc / (1.0 / r - (f.i_knee - f.i_sc) / f.v_knee());
                    (v, v / r)
                }
            }
            LoadMode::ConstantVoltage => {
                let v = self.load_value;
                if v >= f.v0 {
                    (f.v0, 0.0)
                } else if v >= f.v_knee() {
                    (v, (f.v0 - v) / f.r_out)
                } else {
                    (v, f.limit_line_current(v))
                }
            }
        }
    }

    fn output(&mut self) -> (f64, f64) {
        if !self.powered() {
            return (0.0, 0.0);
        }
        if let Some(f) = self.foldback {
            return self.foldback_output(f);
        }
        // 1 mV per volt of line change around 18 V: a modest line regulation.
        let line = if self.roles.contains(&Role::InputSource) {
            0.001 * (self.source_v - 18.0)
        } else {
            0.0
        };
        let s = SoftKnee {
            v0: self.supply.v0 + line,
            ..self.supply
        };
        if self.load_on {
            s.operate(self.load_mode, self.load_value)
        } else {
            (s.v0, 0.0)
        }
    }
}

/// The one place the bench double builds its errors.
fn control_error(instrument: &str, detail: &str) -> ControlError {
    ControlError::new(instrument, detail)
}

/// Design targets matching the bench double's standard unit (12 V, knee at 1.5 A, 18 V in).
pub fn targets() -> DesignTargets {
    DesignTargets {
        vout_v: 12.0,
        limit_current_a: 1.5,
        short_circuit_current_a: 1.5,
        max_load_current_a: 1.0,
        input_voltage_v: Some(18.0),
    }
}

impl BenchControl for FakeBench {
    fn has_role(&self, role: Role) -> bool {
        self.roles.contains(&role)
    }

    fn identities(&self) -> Vec<InstrumentIdentity> {
        vec![InstrumentIdentity {
            name: "fake".to_string(),
            roles: self.roles.clone(),
            link: "memory".to_string(),
            identity: Some("Test Double,FB-1,0001,1.0".to_string()),
        }]
    }

    async fn set_load(&mut self, mode: LoadMode, value: f64) -> Result<(), ControlError> {
        self.log.push(format!("load {} {value}", mode.as_str()));
        if self.load_dead() {
            return Err(control_error("load", "no reply to FUNC/level command"));
        }
        self.load_mode = mode;
        self.load_value = value;
        self.output(); // the unit moves to its new operating point (and may latch)
        Ok(())
    }

    async fn set_load_input(&mut self, on: bool) -> Result<(), ControlError> {
        self.log
            .push(format!("load_input {}", if on { "on" } else { "off" }));
        if self.load_dead() {
            return Err(control_error("load", "no reply to INP command"));
        }
        self.load_on = on;
        self.output();
        Ok(())
    }

    async fn set_source_voltage(&mut self, volts: f64) -> Result<(), ControlError> {
        self.log.push(format!("source {volts}"));
        self.source_v = volts;
        Ok(())
    }

    async fn set_source_output(&mut self, on: bool) -> Result<(), ControlError> {
        self.log
            .push(format!("source_output {}", if on { "on" } else { "off" }));
        self.source_on = on;
        Ok(())
    }

    async fn measure(&mut self) -> Result<Measurement, ControlError> {
        let n = self.measures;
        self.measures += 1;
        self.log.push("measure".to_string());
        if let Some(d) = self.faults.measure_delay {
            tokio::time::sleep(d).await;
        }
        if self.faults.measure_hangs_from.is_some_and(|f| n >= f) {
            tokio::time::sleep(Duration::from_secs(3600)).await;
        }
        if let Some((at, token)) = &self.faults.cancel_at {
            if n == *at {
                token.cancel();
            }
        }
        if self.faults.measure_fails_from.is_some_and(|f| n >= f) {
            return Err(control_error(
                "dmm",
                "no reply to MEAS:VOLT:DC? within 500 ms",
            ));
        }
        let (mut v, i) = self.output();
        if let Some((at, ov)) = self.faults.overvoltage_from {
            if n >= at {
                v = ov;
            }
        }
        let mut m = Measurement::default();
        let over = |from: Option<usize>| from.is_some_and(|f| n >= f);
        if self.has_role(Role::OutputVoltmeter) {
            let r = if over(self.faults.voltage_overrange_from) {
                Reading::Overrange
            } else {
                Reading::Value(v)
            };
            m.set(Quantity::OutputVoltage, r);
        }
        if self.has_role(Role::OutputAmmeter) {
            let r = if over(self.faults.current_overrange_from) {
                Reading::Overrange
            } else {
                Reading::Value(i)
            };
            m.set(Quantity::OutputCurrent, r);
        }
        if self.has_role(Role::InputVoltmeter) {
            m.set(
                Quantity::InputVoltage,
                Reading::Value(if self.source_on { self.source_v } else { 0.0 }),
            );
        }
        if self.has_role(Role::Thermometer) {
            let t = match self.faults.hot_from {
                Some((at, hot)) if n >= at => hot,
                _ => 30.0,
            };
            m.set(Quantity::Temperature, Reading::Value(t));
        }
        Ok(m)
    }

    async fn safe_state(&mut self) -> Vec<ControlError> {
        self.safe_state_calls += 1;
        self.log.push("safe_state".to_string());
        let mut errors = Vec::new();
        self.log.push("safe load_input off".to_string());
        if self.load_dead() {
            errors.push(control_error("load", "no reply to INP OFF"));
        } else {
            self.load_on = false;
        }
        if self.has_role(Role::InputSource) {
            self.log.push("safe source_output off".to_string());
            self.source_on = false;
        }
        errors
    }
}
