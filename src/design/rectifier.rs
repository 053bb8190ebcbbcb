//! The input stage of a full-wave design: transformer secondary with and without load, the
//! bridge's peak, average and surge currents and its dissipation, and the reservoir's ripple
//! current. Pure: a [`Design`] in, a [`RectifierExpect`] out.
//!
//! Relations (textbook capacitor-input rectifier; common practice):
//! - ripple dV = I / (2 f C); the reservoir recharges over the conduction angle theta_c with
//!   cos theta_c = 1 - dV / V_peak, i.e. for t_c = theta_c / (2 pi f) each half cycle
//! - the charging pulse taken as a triangle carrying Q = I / (2 f): peak i_pk = I / (f t_c),
//!   RMS over the cycle I_rms = i_pk sqrt(2 f t_c / 3); reservoir ripple current
//!   sqrt(I_rms^2 - I^2)
//! - bridge dissipation: the two conducting diodes' drop times the average current
//! - surge at switch-on into the empty reservoir: the no-load peak over the winding resistance,
//!   R_w = (V_no-load - V_full-load) / I_rms (from the stated regulation)

use super::file::{Design, InputKind};
use serde::{Deserialize, Serialize};
use std::f64::consts::{PI, SQRT_2};

/// The input stage at rated load, at high line with the largest reservoir (the narrowest and
/// highest charging pulses).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RectifierExpect {
    /// Secondary RMS volts with no load and at rated load (nominal line).
    pub secondary_no_load_vrms: f64,
    pub secondary_full_load_vrms: f64,
    pub conduction_angle_deg: f64,
    pub peak_current_a: f64,
    /// Average current through the bridge (the load's), and its dissipation.
    pub average_current_a: f64,
    pub dissipation_w: f64,
    /// RMS ripple current in the reservoir.
    pub ripple_current_a: f64,
    /// Switch-on surge into the empty reservoir (null without a stated regulation).
    pub surge_current_a: Option<f64>,
}

/// The input stage of a full-wave design (None for a DC input).
pub fn rectifier(d: &Design) -> Option<RectifierExpect> {
    let inp = &d.input;
    if inp.kind != InputKind::FullWave {
        return None;
    }
    let v_fl = inp.secondary_vrms?;
    let reg = inp.regulation_pct.unwrap_or(0.0) / 100.0;
    let v_nl = v_fl * (1.0 + reg);
    let line = 1.0 + inp.line_tolerance_pct / 100.0;
    let c = inp.reservoir_uf? * 1e-6 * (1.0 + inp.reservoir_tolerance_pct / 100.0);
    let f = inp.mains_hz;
    let i = d.load.max_current_a;
    let vp = v_fl * SQRT_2 * line - inp.rectifier_drop_v;
    let dv = i / (2.0 * f * c);
    let cos = (1.0 - dv / vp).clamp(-1.0, 1.0);
    let theta = cos.acos();
    let tc = (theta / (2.0 * PI * f)).max(1e-9);
    let i_pk = i / (f * tc);
    let i_rms = i_pk * (2.0 * f * tc / 3.0).sqrt();
    let ripple = (i_rms * i_rms - i * i).max(0.0).sqrt();
    let surge = (reg > 0.0 && i_rms > 0.0).then(|| {
        let r_w = (v_nl - v_fl) / i_rms;
        v_nl * SQRT_2 * line / r_w
    });
    Some(RectifierExpect {
        secondary_no_load_vrms: v_nl,
        secondary_full_load_vrms: v_fl,
        conduction_angle_deg: theta.to_degrees(),
        peak_current_a: i_pk,
        average_current_a: i,
        dissipation_w: inp.rectifier_drop_v * i,
        ripple_current_a: ripple,
        surge_current_a: surge,
    })
}
