//! Design model: the design file ([`file`]), the circuit model of one unit ([`model`]),
//! tolerance bands ([`tolerance`]), the full expectation with checks ([`expect`]), IEC 60063
//! preferred values ([`eseries`]) and part sizing from targets ([`sizing`]). The file is read in
//! two steps: its types ([`file`]) and its rules ([`rules`], run in order by `check`, which also
//! holds the one rule that needs the model). Everything here is pure except [`Design::load`],
//! which reads the design file. This file only declares and re-exports.

mod check;
pub mod dwell;
pub mod edit;
pub mod eseries;
pub mod expect;
pub mod file;
pub mod heating;
mod judge;
pub mod model;
pub mod rectifier;
pub mod render;
pub mod rules;
pub mod sizing;
pub mod soa;
pub mod stress;
pub mod tolerance;

pub use expect::{
    as_built_bands, expect, expect_with, limit_shift, limit_shift_range, AsBuiltBands, Check,
    Expectation, PartStress, Verdict,
};
pub use file::{Clamp, ClampMount, Design, DesignError, InputKind, Stage};
pub use model::{evaluate, Params, Point};
pub use tolerance::{Band, Envelope, Interval, McStats};
