//! Metrics from one record's readings: no-load and full-load voltage, load regulation (with the
//! reference voltage used as denominator), output resistance from a least-squares fit with its
//! standard uncertainty, the limit knee by two methods, short-circuit current over the dwell with
//! its drift and a fitted first-order time constant, the foldback ratio and line regulation.
//! Pure: rows in, metrics out. This module must not read files or print; the report and the CLI
//! do that.
//!
//! Definitions used here (all documented in the summary as well):
//! - *no-load point*: the `load_sweep` row with the smallest output current;
//! - *threshold* for the fixed-drop knee: `(1 - d) * V_NL` with `d` = [`DEFAULT_KNEE_DROP`]
//!   (2 %, a project choice: well above meter noise on a regulated output, well below the
//!   collapse of a limiting output);
//! - *full-load point*: the load current given in the options (interpolated along the load
//!   sweep), otherwise the highest-current `load_sweep` row still at or above the threshold;
//! - *regulation region*: curve rows at or above the threshold carrying no more than
//!   [`DEFAULT_REGULATION_SPAN`] of the fixed-drop knee current (keeps the soft knee out of the
//!   output-resistance fit);
//! - *limit line*: curve rows below `(1 - 3d) * V_NL` and above 0 V, fitted as current against
//!   voltage (the limit line is near vertical on a V-I plot).

mod curve;
mod fit;
mod line;
mod metrics;
mod short;
mod soak;
#[cfg(test)]
mod tests;

pub use curve::{analyse, curve_points, load_regulation_percent};
pub use fit::{fit_exponential, linear_fit, robust_fit, ExpFit, LineFit};
pub use line::line_points;
pub use metrics::{
    AnalysisOptions, CurvePoint, KneeConditions, KneeMetrics, LineRegulation, LoadRegulation,
    Metrics, OutputResistance, RegulationReference, ShortCircuit, Soak, DEFAULT_KNEE_DROP,
    DEFAULT_REGULATION_SPAN,
};
pub use short::{dwell_series, SHORTED_FRACTION};
pub use soak::{soak_series, SoakPoint};
