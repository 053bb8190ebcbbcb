//! The soft-knee supply curve that the knee-search tests, the runner tests (through the bench
//! double) and the plan benchmark measure against. Pure: no I/O.

use crate::measure::LoadMode;

/// Synthetic regulated supply: V(I) = V0 - R_out * I - S * w * ln(1 + exp((I - I_L) / w)),
/// never below zero. The softplus term gives a soft knee around I_L whose slope tends to S
/// beyond it (a current limit of finite sharpness).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SoftKnee {
    /// No-load output voltage (V).
    pub v0: f64,
    /// Output resistance below the knee (ohm).
    pub r_out: f64,
    /// Current at the middle of the knee (A).
    pub i_l: f64,
    /// Width of the knee (A).
    pub w: f64,
    /// Slope beyond the knee (ohm).
    pub s: f64,
}

impl SoftKnee {
    /// 12 V, 20 mohm, a knee 5 mA wide at `i_l` amperes, 200 ohm beyond it.
    pub fn with_knee_at(i_l: f64) -> SoftKnee {
        SoftKnee {
            v0: 12.0,
            r_out: 0.02,
            i_l,
            w: 0.005,
            s: 200.0,
        }
    }

    /// The bench double's unit: the knee at 1.5 A.
    pub fn standard() -> SoftKnee {
        SoftKnee::with_knee_at(1.5)
    }

    /// Output voltage at load current `i`.
    pub fn v(&self, i: f64) -> f64 {
        let x = (i - self.i_l) / self.w;
        let sp = if x > 30.0 { x } else { x.exp().ln_1p() };
        (self.v0 - self.r_out * i - self.s * self.w * sp).max(0.0)
    }

    /// Current at which V(I) = v (V is decreasing), by bisection.
    pub fn current_at(&self, v: f64) -> f64 {
        let (mut a, mut b) = (0.0, 100.0);
        for _ in 0..200 {
            let m = 0.5 * (a + b);
            if self.v(m) > v {
                a = m
            } else {
                b = m
            }
        }
        0.5 * (a + b)
    }

    /// Operating point (V, I) with a resistor of `r` ohm as the load.
    pub fn with_resistance(&self, r: f64) -> (f64, f64) {
        let (mut a, mut b) = (0.0, 100.0);
        for _ in 0..200 {
            let m = 0.5 * (a + b);
            if self.v(m) > m * r {
                a = m
            } else {
                b = m
            }
        }
        let i = 0.5 * (a + b);
        (self.v(i), i)
    }

    /// Operating point (V, I) for a load setting in its mode's unit.
    pub fn operate(&self, mode: LoadMode, value: f64) -> (f64, f64) {
        match mode {
            LoadMode::ConstantCurrent => {
                let v = self.v(value);
                // Collapsed output: the load cannot draw more than the supply gives.
                let i = if v <= 0.0 {
                    self.current_at(1e-9)
                } else {
                    value
                };
                (v, i)
            }
            LoadMode::ConstantVoltage => {
                if value >= self.v0 {
                    (self.v0, 0.0)
                } else {
                    (value, self.current_at(value))
                }
            }
            LoadMode::ConstantResistance => self.with_resistance(value),
        }
    }
}
