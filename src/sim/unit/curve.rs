//! The output characteristic of one unit at fixed temperatures and input feed (dropout,
//! regulation, the soft knee), and the root finding the load intersections use. Pure.

use super::as_built::SimUnit;
use super::model::{UnitError, UnitFault};
use crate::design::Params;

/// The output characteristic of one unit at fixed temperatures and input feed.
pub(super) struct Curve<'a> {
    pub(super) unit: &'a SimUnit,
    pub(super) p: &'a Params,
    pub(super) vset: f64,
    pub(super) dv_sat: f64,
    pub(super) scale: f64,
    pub(super) ro: f64,
    pub(super) peak: f64,
    pub(super) per_a: f64,
    pub(super) sat: f64,
    pub(super) aux_top: Option<f64>,
}

impl Curve<'_> {
    /// Most current the headroom allows with the output at `v`: at the ripple trough
    /// `V = peak - I per_a - I R_s - sat`, and below the amplifier's own rail when the design
    /// has one.
    pub(super) fn dropout_current(&self, v: f64) -> f64 {
        let rs = self.p.r_sense;
        let mut i = (self.peak - self.sat - v) / (rs + self.per_a);
        if let Some(top) = self.aux_top {
            i = i.min((top - v) / rs);
        }
        i.max(0.0)
    }

    /// Most current delivered with the output held at `v`.
    pub(super) fn current_at(&self, v: f64) -> f64 {
        let v = v.max(0.0);
        let i_drop = self.dropout_current(v);
        if i_drop <= 0.0 {
            return 0.0;
        }
        let il = self.unit.limit_line(self.p, v);
        let (vset, ro, dv, s) = (self.vset, self.ro, self.dv_sat, self.scale);
        // g(I) = V_set - R_out I - dV_sat exp((I - I_L)/scale) - V: decreasing and concave,
        // so Newton's method from the right end approaches the root from the right.
        let g = |i: f64| vset - ro * i - dv * ((i - il) / s).min(700.0).exp() - v;
        let i_reg = if g(il) >= 0.0 {
            il
        } else if g(0.0) <= 0.0 {
            0.0
        } else {
            let mut x = il;
            for _ in 0..200 {
                let e = dv * ((x - il) / s).exp();
                let gx = vset - ro * x - e - v;
                let slope = -ro - e / s;
                let next = (x - gx / slope).clamp(0.0, x);
                let done = (x - next).abs() <= 1e-14 * il.max(1e-9);
                x = next;
                if done {
                    break;
                }
            }
            x
        };
        i_reg.min(i_drop)
    }

    /// Output voltage with no load: the regulated value, unless the headroom is short.
    pub(super) fn open_voltage(&self) -> f64 {
        if self.current_at(0.0) <= 0.0 {
            return 0.0;
        }
        let il = self.unit.limit_line(self.p, self.vset);
        let v_reg = self.vset - self.dv_sat * (-il / self.scale).exp();
        let mut v = v_reg.min(self.peak - self.sat);
        if let Some(top) = self.aux_top {
            v = v.min(top);
        }
        v.max(0.0)
    }
}

impl UnitFault {
    pub(super) fn not_applicable(f: &UnitFault, why: &str) -> UnitError {
        UnitError::FaultNotApplicable {
            fault: f.describe(),
            why: why.to_string(),
        }
    }
}

/// Highest `v` in `[0, top]` where `f` changes from negative (above) to non-negative (below),
/// scanning down from `top` on a grid and refining by bisection. `None` when `f < 0` everywhere.
pub(super) fn highest_crossing(top: f64, f: impl Fn(f64) -> f64) -> Option<f64> {
    const GRID: usize = 400;
    if top <= 0.0 {
        return if f(0.0) >= 0.0 { Some(0.0) } else { None };
    }
    let mut prev_v = top;
    if f(top) >= 0.0 {
        return Some(top);
    }
    for k in 1..=GRID {
        let v = top * (GRID - k) as f64 / GRID as f64;
        if f(v) >= 0.0 {
            let (mut lo, mut hi) = (v, prev_v); // f(lo) >= 0, f(hi) < 0
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if f(mid) >= 0.0 {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            return Some(lo);
        }
        prev_v = v;
    }
    None
}
