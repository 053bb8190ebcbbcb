//! How long a short may last: the pass junction's temperature over a sustained short through
//! the three-stage thermal network junction - case - sink - ambient (a ladder of thermal
//! resistances and heat capacities), with the clamp's current following the heating, and the
//! longest dwell that keeps T_j at or below T_j max. Pure: a [`Design`] and [`Params`] in, a
//! [`Dwell`] out.
//!
//! Relations (textbook thermal network; common practice): with temperatures above ambient
//! theta, C_j theta_j' = P - (theta_j - theta_c) / R_jc; C_c theta_c' = (theta_j - theta_c) / R_jc
//! less (theta_c - theta_s) / R_cs; C_s theta_s' = (theta_c - theta_s) / R_cs - theta_s / R_sa. The
//! linear network is stepped exactly (matrix exponential) with P held over each step and
//! recomputed from the clamp relation at the new temperatures. A stage given as a time
//! constant has C = tau / R. The short starts from the steady state at rated load at the
//! evaluated output (a unit that has been running), which is the usual place of a short test
//! in a plan.

use super::file::{ClampMount, Design};
use super::heating::{stress_at, Condition};
use super::model::{evaluate, Params};
use serde::{Deserialize, Serialize};

/// The pass junction over a sustained short.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Dwell {
    pub ambient_c: f64,
    /// Junction, case and sink temperatures when the short starts (rated-load steady state).
    pub start_junction_c: f64,
    pub start_case_c: f64,
    pub start_sink_c: f64,
    /// The limit the dwell is judged against (T_j max).
    pub limit_c: f64,
    /// Longest dwell before T_j reaches the limit (null: it never does; the steady state of
    /// the short lies below it).
    pub longest_s: Option<f64>,
    /// (seconds, junction degC, case degC) samples over the short, log-spaced.
    pub curve: Vec<(f64, f64, f64)>,
}

/// The network's heat capacities and resistances (J/degC, degC/W), or None when the design
/// gives no thermal masses.
pub fn network(d: &Design) -> Option<([f64; 3], [f64; 3])> {
    let p = &d.pass;
    let m = p.thermal_mass.as_ref()?;
    let r = [
        p.theta_jc.max(1e-6),
        p.theta_cs.max(1e-6),
        p.theta_sa?.max(1e-6),
    ];
    let cap = |c: Option<f64>, tau: Option<f64>, r: f64| c.or(tau.map(|t| t / r));
    let c = [
        cap(m.junction_j_per_c, m.junction_tau_s, r[0])?,
        cap(m.case_j_per_c, m.case_tau_s, r[1])?,
        cap(m.sink_j_per_c, m.sink_tau_s, r[2])?,
    ];
    Some((c, r))
}

type M3 = [[f64; 3]; 3];

fn mul(a: &M3, b: &M3) -> M3 {
    let mut o = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            o[i][j] = (0..3).map(|k| a[i][k] * b[k][j]).sum();
        }
    }
    o
}

/// e^(A h) by scaling and squaring with a Taylor series (exact to rounding for these sizes).
fn expm(a: &M3, h: f64) -> M3 {
    let norm = a
        .iter()
        .map(|r| r.iter().map(|x| x.abs()).sum::<f64>())
        .fold(0.0, f64::max)
        * h;
    let s = if norm > 0.5 {
        (norm / 0.5).log2().ceil() as i32
    } else {
        0
    };
    let scale = h / 2f64.powi(s);
    let x: M3 = std::array::from_fn(|i| std::array::from_fn(|j| a[i][j] * scale));
    let mut term: M3 = std::array::from_fn(|i| std::array::from_fn(|j| f64::from(i == j)));
    let mut sum = term;
    for k in 1..20 {
        term = mul(&term, &x);
        for row in term.iter_mut() {
            for v in row.iter_mut() {
                *v /= k as f64;
            }
        }
        for i in 0..3 {
            for j in 0..3 {
                sum[i][j] += term[i][j];
            }
        }
    }
    for _ in 0..s {
        sum = mul(&sum, &sum);
    }
    sum
}

/// Solve a 3x3 system by Gaussian elimination with partial pivoting.
#[allow(clippy::needless_range_loop)]
fn solve3(mut a: M3, mut b: [f64; 3]) -> [f64; 3] {
    for col in 0..3 {
        let piv = (col..3)
            .max_by(|&i, &j| a[i][col].abs().total_cmp(&a[j][col].abs()))
            .unwrap_or(col);
        a.swap(col, piv);
        b.swap(col, piv);
        for row in col + 1..3 {
            let f = a[row][col] / a[col][col];
            for k in col..3 {
                a[row][k] -= f * a[col][k];
            }
            b[row] -= f * b[col];
        }
    }
    let mut x = [0.0; 3];
    for i in (0..3).rev() {
        let s: f64 = (i + 1..3).map(|k| a[i][k] * x[k]).sum();
        x[i] = (b[i] - s) / a[i][i];
    }
    x
}

/// Step matrices for a step `h`: theta(t + h) = phi theta(t) + gamma P.
fn step(a: &M3, c: &[f64; 3], h: f64) -> (M3, [f64; 3]) {
    let phi = expm(a, h);
    // gamma = A^-1 (phi - I) B with B = [1 / C_j, 0, 0].
    let b = [1.0 / c[0], 0.0, 0.0];
    let rhs: [f64; 3] =
        std::array::from_fn(|i| (0..3).map(|k| (phi[i][k] - f64::from(i == k)) * b[k]).sum());
    (phi, solve3(*a, rhs))
}

/// The system matrix of the network (temperatures above ambient).
fn system(c: &[f64; 3], r: &[f64; 3]) -> M3 {
    let g = [1.0 / r[0], 1.0 / r[1], 1.0 / r[2]];
    [
        [-g[0] / c[0], g[0] / c[0], 0.0],
        [g[0] / c[1], -(g[0] + g[1]) / c[1], g[1] / c[1]],
        [0.0, g[1] / c[2], -(g[1] + g[2]) / c[2]],
    ]
}

/// One exact step of `dt` seconds of the network (capacities `c`, resistances `r`) with
/// `watts` held into the junction: temperatures above ambient (junction, case, sink) in and
/// out. Used by the simulated unit, so that it heats as the design model says.
pub fn network_step(c: &[f64; 3], r: &[f64; 3], th: [f64; 3], watts: f64, dt: f64) -> [f64; 3] {
    if dt.is_nan() || dt <= 0.0 {
        return th;
    }
    let (phi, gamma) = step(&system(c, r), c, dt);
    std::array::from_fn(|i| (0..3).map(|k| phi[i][k] * th[k]).sum::<f64>() + gamma[i] * watts)
}

/// The pass junction over a sustained short for unit `p`, or None without thermal masses.
pub fn short_dwell(d: &Design, p: &Params) -> Option<Dwell> {
    let (c, r) = network(d)?;
    let a = system(&c, &r);
    let ta = p.ambient_c;
    // Rated-load steady state at the evaluated output.
    let pt = evaluate(d, p);
    let i0 = d.load.max_current_a.min(pt.limit_current.max(0.0));
    let p0 = ((pt.vin_no_load - pt.vout_set - i0 * p.r_sense) * i0).max(0.0);
    let mut th = [p0 * (r[0] + r[1] + r[2]), p0 * (r[1] + r[2]), p0 * r[2]];
    let start = th;
    let power = |th: &[f64; 3]| {
        let mut h = p.clone();
        h.pass_junction_c = ta + th[0];
        h.clamp_junction_c = match d.limit.clamp_mount {
            ClampMount::Ambient => ta,
            ClampMount::Heatsink => ta + th[2],
        };
        stress_at(d, &h, Condition::Short).1
    };
    let limit = d.pass.tj_max_c;
    let taus = [r[0] * c[0], r[1] * c[1], r[2] * c[2]];
    let tau_min = taus
        .iter()
        .copied()
        .filter(|t| *t > 1e-9)
        .fold(f64::INFINITY, f64::min);
    let tau_total = (r[0] + r[1] + r[2]) * (c[0] + c[1] + c[2]);
    let t_end = 8.0 * tau_total;
    let mut h = (tau_min / 20.0).min(t_end / 1000.0).max(t_end * 1e-9);
    let (mut phi, mut gamma) = step(&a, &c, h);
    let mut t = 0.0;
    let mut curve = vec![(0.0, ta + th[0], ta + th[1])];
    let mut next_mark = h;
    let mut longest = None;
    let mut n = 0usize;
    while t < t_end {
        let w = power(&th);
        let next: [f64; 3] =
            std::array::from_fn(|i| (0..3).map(|k| phi[i][k] * th[k]).sum::<f64>() + gamma[i] * w);
        if ta + next[0] > limit && longest.is_none() {
            let (t0, t1) = (ta + th[0], ta + next[0]);
            let f = if t1 > t0 {
                (limit - t0) / (t1 - t0)
            } else {
                0.0
            };
            longest = Some(t + f.clamp(0.0, 1.0) * h);
        }
        th = next;
        t += h;
        n += 1;
        if t >= next_mark {
            curve.push((t, ta + th[0], ta + th[1]));
            next_mark = t * 1.25;
        }
        if longest.is_some() && ta + th[0] > limit + 50.0 {
            break;
        }
        // Lengthen the step once the fast stage has had time to follow.
        if n % 200 == 0 && h < tau_total / 50.0 {
            h *= 2.0;
            (phi, gamma) = step(&a, &c, h);
        }
    }
    if longest.is_none() && ta + start[0] > limit {
        longest = Some(0.0);
    }
    Some(Dwell {
        ambient_c: ta,
        start_junction_c: ta + start[0],
        start_case_c: ta + start[1],
        start_sink_c: ta + start[2],
        limit_c: limit,
        longest_s: longest,
        curve,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn expm_of_a_diagonal_matrix_is_the_exponentials() {
        let a: M3 = [[-1.0, 0.0, 0.0], [0.0, -10.0, 0.0], [0.0, 0.0, -1000.0]];
        let e = expm(&a, 0.3);
        for (i, k) in [1.0f64, 10.0, 1000.0].iter().enumerate() {
            assert!(
                (e[i][i] - (-k * 0.3).exp()).abs() < 1e-12,
                "{i}: {}",
                e[i][i]
            );
        }
    }
}
