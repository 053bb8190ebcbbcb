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

mod checks;
mod design_check;
mod dwell;
mod error;
mod expand;
mod fields;
mod knee;
mod quantity;
mod raw;
mod steps;
mod targets;
#[cfg(test)]
mod tests;

pub use design_check::{DesignBounds, INTERLOCK_MARGIN};
pub use dwell::check_short_dwell;
pub use error::PlanError;
pub use knee::{KneeConfig, KneeOutcome, KneeRequest, KneeResult, KneeSearch};
pub use quantity::{parse_quantity, tidy, Dim};
pub use steps::{
    outline, recovery_readings, short_readings, snapshot_outline, step_kinds, Action, Interlocks,
    LoadSetting, Plan, ShortCircuit, Step, StepLimits, StepOutline,
};
pub use targets::DesignTargets;

/// 1-based line and column (in characters) of a byte offset (shared with every config file).
pub use crate::config::line_col;
