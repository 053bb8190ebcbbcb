//! IEC 60063 preferred number series (E3 to E192) as published tables, not formulas: E3-E24
//! have two significant digits with published exceptions to the geometric formula (2.7, 3.0, 3.3,
//! 3.6, 3.9, 4.3, 4.7, 8.2 in E24); E48-E192 have three, with 9.20 in E192 the one exception.
//! Rounding to the nearest, next higher and next lower preferred value. Pure functions.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

/// An IEC 60063 series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Series {
    E3,
    E6,
    E12,
    E24,
    E48,
    E96,
    E192,
}

const E3: [f64; 3] = [1.0, 2.2, 4.7];
const E6: [f64; 6] = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8];
const E12: [f64; 12] = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2];
const E24: [f64; 24] = [
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6,
    6.2, 6.8, 7.5, 8.2, 9.1,
];
const E48: [f64; 48] = [
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69, 1.78, 1.87, 1.96, 2.05,
    2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01, 3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42,
    4.64, 4.87, 5.11, 5.36, 5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
];
const E96: [f64; 96] = [
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30, 1.33, 1.37, 1.40, 1.43,
    1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74, 1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10,
    2.15, 2.21, 2.26, 2.32, 2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12, 4.22, 4.32, 4.42, 4.53,
    4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49, 5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65,
    6.81, 6.98, 7.15, 7.32, 7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
];
const E192: [f64; 192] = [
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14, 1.15, 1.17, 1.18, 1.20,
    1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32, 1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45,
    1.47, 1.49, 1.50, 1.52, 1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03, 2.05, 2.08, 2.10, 2.13,
    2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34, 2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58,
    2.61, 2.64, 2.67, 2.71, 2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61, 3.65, 3.70, 3.74, 3.79,
    3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17, 4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59,
    4.64, 4.70, 4.75, 4.81, 4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42, 6.49, 6.57, 6.65, 6.73,
    6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41, 7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16,
    8.25, 8.35, 8.45, 8.56, 8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
];

impl Series {
    pub const ALL: [Series; 7] = [
        Series::E3,
        Series::E6,
        Series::E12,
        Series::E24,
        Series::E48,
        Series::E96,
        Series::E192,
    ];

    /// The series' values in one decade, from 1.00 up to below 10.
    pub fn values(self) -> &'static [f64] {
        match self {
            Series::E3 => &E3,
            Series::E6 => &E6,
            Series::E12 => &E12,
            Series::E24 => &E24,
            Series::E48 => &E48,
            Series::E96 => &E96,
            Series::E192 => &E192,
        }
    }

    /// Significant digits of the series' values.
    pub fn digits(self) -> i32 {
        match self {
            Series::E3 | Series::E6 | Series::E12 | Series::E24 => 2,
            _ => 3,
        }
    }

    /// Typical tolerance associated with the series, percent (IEC 60063 usage).
    pub fn tolerance_pct(self) -> f64 {
        match self {
            Series::E3 => 40.0,
            Series::E6 => 20.0,
            Series::E12 => 10.0,
            Series::E24 => 5.0,
            Series::E48 => 2.0,
            Series::E96 => 1.0,
            Series::E192 => 0.5,
        }
    }
}

impl fmt::Display for Series {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "E{}", self.values().len())
    }
}

impl FromStr for Series {
    type Err = String;
    fn from_str(s: &str) -> Result<Series, String> {
        let t = s.trim().to_ascii_uppercase();
        Series::ALL
            .into_iter()
            .find(|x| x.to_string() == t)
            .ok_or_else(|| format!("unknown series '{s}': use E3, E6, E12, E24, E48, E96 or E192"))
    }
}

/// Round to `digits` significant digits (removes binary noise from decade scaling).
fn round_sig(v: f64, digits: i32) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let k = digits - 1 - v.abs().log10().floor() as i32;
    if k >= 0 {
        let s = 10f64.powi(k);
        (v * s).round() / s
    } else {
        let s = 10f64.powi(-k);
        (v / s).round() * s
    }
}

/// Preferred values around `value`: every series value in the decades below, of and above it.
fn candidates(value: f64, series: Series) -> impl Iterator<Item = f64> {
    let dec = value.log10().floor() as i32;
    (dec - 1..=dec + 1).flat_map(move |d| {
        series
            .values()
            .iter()
            .map(move |m| round_sig(m * 10f64.powi(d), series.digits()))
    })
}

fn check(value: f64) -> Option<f64> {
    (value.is_finite() && value > 0.0).then_some(value)
}

/// The preferred value nearest to `value` (by ratio, as the series is geometric).
pub fn nearest(value: f64, series: Series) -> Option<f64> {
    let v = check(value)?;
    candidates(v, series).min_by(|a, b| (a / v).ln().abs().total_cmp(&(b / v).ln().abs()))
}

/// The smallest preferred value at or above `value`.
pub fn next_up(value: f64, series: Series) -> Option<f64> {
    let v = check(value)?;
    candidates(v, series)
        .filter(|c| *c >= v * (1.0 - 1e-9))
        .min_by(|a, b| a.total_cmp(b))
}

/// The largest preferred value at or below `value`.
pub fn next_down(value: f64, series: Series) -> Option<f64> {
    let v = check(value)?;
    candidates(v, series)
        .filter(|c| *c <= v * (1.0 + 1e-9))
        .max_by(|a, b| a.total_cmp(b))
}

/// The preferred values just below and just above `value` (excluding `value` itself): the
/// neighbours a fitter might have swapped in by mistake.
pub fn neighbours(value: f64, series: Series) -> Option<(f64, f64)> {
    let v = check(value)?;
    let below = candidates(v, series)
        .filter(|c| *c < v * (1.0 - 1e-9))
        .max_by(|a, b| a.total_cmp(b))?;
    let above = candidates(v, series)
        .filter(|c| *c > v * (1.0 + 1e-9))
        .min_by(|a, b| a.total_cmp(b))?;
    Some((below, above))
}

/// True when `value` is a member of the series (in any decade).
pub fn is_preferred(value: f64, series: Series) -> bool {
    nearest(value, series).is_some_and(|n| (n / value - 1.0).abs() < 1e-9)
}
