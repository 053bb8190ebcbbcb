//! Tolerance bands: worst case over every corner of the uncertain parameters, and seeded Monte
//! Carlo statistics (mean, sigma and the 0.135 / 99.865 percentiles, the +-3 sigma equivalents).
//! Pure computation over [`model`](super::model).

use super::file::Design;
use super::model::{spreads, Params, Scope, Spread};
use crate::rng::Rng;
use serde::{Deserialize, Serialize};

/// Lower percentile reported (0.135 %: the normal distribution's -3 sigma point).
pub const P_LOW: f64 = 0.00135;
/// Upper percentile reported (99.865 %: the normal distribution's +3 sigma point).
pub const P_HIGH: f64 = 0.99865;

/// A closed interval.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    pub min: f64,
    pub max: f64,
}

impl Interval {
    pub fn point(v: f64) -> Interval {
        Interval { min: v, max: v }
    }
    pub fn include(&mut self, v: f64) {
        self.min = self.min.min(v);
        self.max = self.max.max(v);
    }
    pub fn contains(&self, v: f64) -> bool {
        v >= self.min && v <= self.max
    }
}

/// Monte Carlo statistics of one quantity.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct McStats {
    pub samples: usize,
    pub mean: f64,
    pub sigma: f64,
    /// 0.135th percentile.
    pub p_low: f64,
    /// 99.865th percentile.
    pub p_high: f64,
}

/// Nominal value with its worst-case and Monte Carlo bands.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Band {
    pub nominal: f64,
    pub worst_case: Interval,
    pub monte_carlo: McStats,
}

/// Percentile of sorted data by linear interpolation between order statistics.
pub fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Statistics of a sample (sorts it in place).
pub fn stats(values: &mut [f64]) -> McStats {
    let n = values.len();
    if n == 0 {
        return McStats {
            samples: 0,
            mean: f64::NAN,
            sigma: f64::NAN,
            p_low: f64::NAN,
            p_high: f64::NAN,
        };
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    let var = if n > 1 {
        values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64
    } else {
        0.0
    };
    values.sort_by(|a, b| a.total_cmp(b));
    McStats {
        samples: n,
        mean,
        sigma: var.sqrt(),
        p_low: percentile(values, P_LOW),
        p_high: percentile(values, P_HIGH),
    }
}

/// Which uncertain parameters a band spans.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Envelope {
    /// Part tolerances and the operating envelope (ambient range, line tolerance).
    Operating,
    /// Part tolerances only, at the design's nominal ambient and input: what a bench at room
    /// temperature on the nominal input measures of a unit as built.
    AsBuilt,
}

fn spreads_for(d: &Design, env: Envelope) -> Vec<Spread> {
    let mut sp = spreads(d);
    if env == Envelope::AsBuilt {
        sp.retain(|s| s.scope == Scope::Part);
    }
    sp
}

/// Call `f` on every corner of the design's uncertain parameters (2^k corners; at most 2^16).
/// Corners with more than 16 uncertain parameters keep the rest at nominal (never happens with
/// the current model, which has at most 12). All diodes of a string sit at the same corner.
pub fn for_each_corner(d: &Design, f: impl FnMut(&Params)) {
    for_each_corner_in(d, Envelope::Operating, f)
}

/// [`for_each_corner`] over the parameters of one envelope.
pub fn for_each_corner_in(d: &Design, env: Envelope, mut f: impl FnMut(&Params)) {
    let sp = spreads_for(d, env);
    let k = sp.len().min(16);
    let base = Params::nominal(d);
    for mask in 0u32..(1u32 << k) {
        let mut p = base.clone();
        for (i, s) in sp.iter().take(k).enumerate() {
            let v = if mask & (1 << i) != 0 { s.hi } else { s.lo };
            (s.set)(&mut p, v);
        }
        f(&p);
    }
}

/// Call `f` on `n` random units drawn from `seed` (every diode of a string drawn on its own).
pub fn for_each_sample(d: &Design, n: usize, seed: u64, f: impl FnMut(&Params)) {
    for_each_sample_in(d, Envelope::Operating, n, seed, f)
}

/// [`for_each_sample`] over the parameters of one envelope.
pub fn for_each_sample_in(
    d: &Design,
    env: Envelope,
    n: usize,
    seed: u64,
    mut f: impl FnMut(&Params),
) {
    let mut rng = Rng::new(seed);
    let sp = spreads_for(d, env);
    let base = Params::nominal(d);
    for _ in 0..n {
        let p = Params::draw_from(&base, &sp, &mut rng);
        f(&p);
    }
}
