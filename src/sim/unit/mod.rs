//! Physics of one simulated as-built unit: the regulated output with a small output resistance,
//! dropout at low input, a soft current-limit knee from the junction law, foldback where designed,
//! and self-heating of the pass device (the design's thermal network, or one lumped stage), with
//! the clamp junctions where the design puts them. It also answers how
//! the unit meets an electronic load in CC, CV or CR mode. Pure: element values and settings in,
//! operating points out; time is an explicit argument (the serving code feeds wall-clock time).
//! No I/O and no clock reads live here.
//!
//! The model (behavioural, documented so that tests can check it against formulas):
//! - Regulation: `V = V_set - R_out I` (V_set from `design::evaluate`, i.e. V_ref (1 + Rt/Rb)).
//! - Input: on its own full-wave input the unit sees the no-load peak less the transformer's
//!   sag (regulation over the rated current) and the reservoir's ripple, trough
//!   `peak - I (sag + 1/(2 f C))`, mean `peak - I (sag + 1/(4 f C))`.
//! - Dropout: `V <= V_in(I) - I R_s - V_CE(sat)` and `V <= V_aux - swing - m V_BE - I R_s`.
//! - Knee: the clamp takes drive current as `exp((I R_s - V_th(V)) / (n N kT/q))` (Shockley's
//!   law; with `KneeModel::PerJunction`, the default, n is the junctions in series that set the
//!   threshold, the diodes of a string, so a string's knee is n times as wide; with
//!   `KneeModel::OneJunction` n = 1); the error amplifier answers a deficit `dV` with
//!   proportionally more drive until it saturates at `dV_sat = knee_sat_fraction * V_set`.
//!   Equating the two gives, on the upper branch, `dV = dV_sat exp((I R_s - I_L(V) R_s) /
//!   (n N V_T))`; once `dV > dV_sat` the unit sits on the design's limit line `I = I_L(V)`
//!   (`design::model::limit_current_at`, foldback included).
//! - Heat: with `HeatModel::Network` (the default) and the design's `[pass.thermal_mass]`, the
//!   three-stage network junction - case - heatsink of `design::dwell` (exact steps: the case
//!   lags the junction, the heatsink takes minutes; without a heatsink, the `theta_sa` fault,
//!   the sink's capacity goes too); with `HeatModel::Lumped`, or when the design states no
//!   thermal masses ([`HeatInUse::note`] says so), `T -> T_a + P theta` with time constant tau
//!   (exact exponential step). The pass device dissipates `(V_in - V - I R_s) I`. The clamp's
//!   junctions sit where the design says (`limit.clamp_mount`): at ambient, or at the
//!   heatsink's temperature, as the design model assumes. Junction drops follow
//!   `design::model::junction_at`, so a diode-string limit rises as the pass device heats
//!   (V_sense = n V_F - m V_BE) while a transistor limiter barely moves.
//! - Loads: CV holds V and takes what the unit gives there; CR is the highest intersection of
//!   the curve with V = I R; CC takes the highest point that delivers the set current, else the
//!   output collapses to 0 V and stays there while the setting exceeds what the unit gives at
//!   0 V (foldback latch-up).
//! - Line: the output moves by `line_rejection` volts per volt of input.
//!
//! True values for tests ([`Truth`]): the knee is the current at which the output has fallen
//! 2 % below its no-load value, all junctions at ambient, on the design's own input.

mod as_built;
mod model;
mod parts;
#[cfg(test)]
mod tests;

pub use as_built::SimUnit;
pub use model::{
    first_order_step, knee_width_v, pass_network, step_network, thermal_voltage,
    transformer_sag_per_a, Controls, HeatInUse, HeatModel, KneeModel, LoadSetting, OperatingPoint,
    SourceSetting, Thermal, Truth, UnitError, UnitFault, UnitModel, BOLTZMANN, ELEMENTARY_CHARGE,
};
pub use parts::PartFault;
