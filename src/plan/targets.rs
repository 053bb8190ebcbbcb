//! The design values a plan may refer to (`vout`, `limit`, ...), taken from the design model.
//! Pure data.

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
