//! How the simulated instruments measure: range (beyond it an overrange), noise and
//! resolution per quantity, the NR3 number form they answer in and the streaming meter's line.
//! Pure: the noise comes from a seeded generator.

use super::kinds::Snapshot;
use crate::rng::Rng;

/// SCPI overrange value (9.9E37).
pub const OVERRANGE: f64 = 9.9e37;

/// Measurement noise: Gaussian with the instrument's sigma times `scale` (0 = noiseless).
#[derive(Debug, Clone)]
pub struct Noise {
    rng: Rng,
    pub scale: f64,
}

impl Noise {
    pub fn new(seed: u64, scale: f64) -> Noise {
        Noise {
            rng: Rng::new(seed),
            scale,
        }
    }
    pub(super) fn add(&mut self, v: f64, sigma: f64) -> f64 {
        if self.scale <= 0.0 || sigma <= 0.0 {
            return v;
        }
        v + self.rng.normal() * sigma * self.scale
    }
}

/// How one quantity is measured: range (beyond it: overrange), noise and resolution.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Channel {
    lo: f64,
    hi: f64,
    sigma_abs: f64,
    sigma_rel: f64,
    resolution: f64,
}

impl Channel {
    /// The reading of a true value: noise, then resolution; `None` for overrange.
    pub(super) fn read(&self, truth: f64, noise: &mut Noise) -> Option<f64> {
        let v = noise.add(truth, self.sigma_abs + self.sigma_rel * truth.abs());
        if !(self.lo..=self.hi).contains(&v) || !v.is_finite() {
            return None;
        }
        let q = (v / self.resolution).round() * self.resolution;
        Some(if q == 0.0 { 0.0 } else { q })
    }
}

// Ranges, noise and resolution of the simulated instruments (invented, typical of bench gear).
pub(super) const DMM_VOLTS: Channel = Channel {
    lo: -100.0,
    hi: 100.0,
    sigma_abs: 20e-6,
    sigma_rel: 5e-6,
    resolution: 10e-6,
};
pub(super) const DMM_AMPS: Channel = Channel {
    lo: -10.0,
    hi: 10.0,
    sigma_abs: 50e-6,
    sigma_rel: 50e-6,
    resolution: 1e-6,
};
pub(super) const STREAM_AMPS: Channel = Channel {
    lo: -10.0,
    hi: 10.0,
    sigma_abs: 0.3e-3,
    sigma_rel: 100e-6,
    resolution: 0.1e-3,
};
pub(super) const LOAD_VOLTS: Channel = Channel {
    lo: -1.0,
    hi: 150.0,
    sigma_abs: 1e-3,
    sigma_rel: 50e-6,
    resolution: 1e-3,
};
pub(super) const LOAD_AMPS: Channel = Channel {
    lo: -0.5,
    hi: 30.0,
    sigma_abs: 1e-3,
    sigma_rel: 100e-6,
    resolution: 1e-3,
};
pub(super) const SOURCE_VOLTS: Channel = Channel {
    lo: -1.0,
    hi: 65.0,
    sigma_abs: 3e-3,
    sigma_rel: 100e-6,
    resolution: 1e-3,
};
pub(super) const SOURCE_AMPS: Channel = Channel {
    lo: -0.5,
    hi: 12.0,
    sigma_abs: 2e-3,
    sigma_rel: 200e-6,
    resolution: 1e-3,
};
pub(super) const THERMO: Channel = Channel {
    lo: -40.0,
    hi: 400.0,
    sigma_abs: 0.05,
    sigma_rel: 0.0,
    resolution: 0.1,
};

/// Highest settings each instrument accepts.
pub(super) const LOAD_MAX_CURRENT: f64 = 30.0;
pub(super) const LOAD_MAX_VOLTAGE: f64 = 150.0;
pub(super) const LOAD_MIN_RESISTANCE: f64 = 1e-3;
pub(super) const LOAD_MAX_RESISTANCE: f64 = 1e6;
pub(super) const SOURCE_MAX_VOLTAGE: f64 = 60.0;

/// Format a number as SCPI NR3 with six significant digits: `+1.20034E+01`.
pub fn nr3(v: f64) -> String {
    if !v.is_finite() || v.abs() >= OVERRANGE {
        return "9.9E37".to_string();
    }
    let s = format!("{:+.5E}", v);
    // Rust writes "+1.20034E1"; SCPI instruments write a signed two-digit exponent.
    match s.split_once('E') {
        Some((mant, exp)) => {
            let e: i32 = exp.parse().unwrap_or(0);
            format!("{mant}E{}{:02}", if e < 0 { '-' } else { '+' }, e.abs())
        }
        None => s,
    }
}

pub(super) fn reading(r: Option<f64>) -> String {
    match r {
        Some(v) => nr3(v),
        None => "9.9E37".to_string(),
    }
}

/// One streaming line for an output current: `DCI +1.2034 A OK` (`OL` status on overrange).
pub fn stream_line(snap: &Snapshot, noise: &mut Noise) -> String {
    match STREAM_AMPS.read(snap.iout, noise) {
        Some(v) => format!("DCI {v:+.4} A OK"),
        None => "DCI +9.9999 A OL".to_string(),
    }
}
