//! Process capability and control-chart statistics of one metric across units: mean and
//! sample standard deviation, Cpk against two-sided limits with Bissell's approximate
//! confidence bounds, the individuals and moving-range chart limits (moving ranges of two,
//! sigma estimated as the mean moving range over d2 = 1.128), and the points outside the
//! individuals chart's limits. Pure: numbers in, numbers out.

use serde::Serialize;

/// Control-chart constant d2 for subgroups of two (standard tables).
pub const D2_N2: f64 = 1.128;
/// Control-chart constant D4 for subgroups of two (standard tables).
pub const D4_N2: f64 = 3.267;
/// Standard normal quantile for two-sided 95 % bounds.
pub const Z_95: f64 = 1.959_964;

/// Fewest values a Cpk is reported from, everywhere (compare, the batch tally, the
/// dashboard): a Cpk from fewer is noise, its bounds too wide to act on (project choice).
pub const MIN_N_FOR_CPK: usize = 10;

/// Cpk and its approximate 95 % confidence bounds.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Cpk {
    pub n: usize,
    pub mean: f64,
    pub std_dev: f64,
    pub cpk: f64,
    pub lower_95: f64,
    pub upper_95: f64,
}

/// Mean and sample standard deviation (n - 1), or `None` with fewer than two finite values.
pub fn mean_sd(values: &[f64]) -> Option<(f64, f64)> {
    let v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.len() < 2 {
        return None;
    }
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
    Some((mean, var.sqrt()))
}

/// Cpk = min(USL - mean, mean - LSL) / (3 s) with Bissell's approximate bounds
/// Cpk (1 -+ z sqrt(1 / (9 n Cpk^2) + 1 / (2 (n - 1)))). `None` with fewer than two values,
/// no spread, or limits that are not ordered.
pub fn cpk(values: &[f64], lsl: f64, usl: f64) -> Option<Cpk> {
    if lsl.partial_cmp(&usl) != Some(std::cmp::Ordering::Less) {
        return None;
    }
    let (mean, sd) = mean_sd(values)?;
    if sd <= 0.0 || !sd.is_finite() {
        return None;
    }
    let n = values.iter().filter(|x| x.is_finite()).count();
    let c = (usl - mean).min(mean - lsl) / (3.0 * sd);
    let nf = n as f64;
    let half = Z_95 * (1.0 / (9.0 * nf) + c * c / (2.0 * (nf - 1.0))).sqrt();
    Some(Cpk {
        n,
        mean,
        std_dev: sd,
        cpk: c,
        lower_95: c - half,
        upper_95: c + half,
    })
}

/// Limits of an individuals and moving-range chart.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImrChart {
    pub center: f64,
    /// Mean moving range (|x_i - x_(i-1)|).
    pub mr_bar: f64,
    /// Individuals chart: center -+ 3 MR-bar / d2.
    pub lcl: f64,
    pub ucl: f64,
    /// Moving-range chart upper limit D4 MR-bar (its lower limit is 0).
    pub mr_ucl: f64,
    pub moving_ranges: Vec<f64>,
    /// Indexes of the values outside the individuals chart's limits.
    pub outside: Vec<usize>,
}

/// Individuals and moving-range chart of values in production order; `None` with fewer than
/// two values.
pub fn imr(values: &[f64]) -> Option<ImrChart> {
    if values.len() < 2 || values.iter().any(|x| !x.is_finite()) {
        return None;
    }
    let n = values.len() as f64;
    let center = values.iter().sum::<f64>() / n;
    let moving_ranges: Vec<f64> = values.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    let mr_bar = moving_ranges.iter().sum::<f64>() / moving_ranges.len() as f64;
    let sigma = mr_bar / D2_N2;
    let (lcl, ucl) = (center - 3.0 * sigma, center + 3.0 * sigma);
    let outside = values
        .iter()
        .enumerate()
        .filter(|(_, &x)| x < lcl || x > ucl)
        .map(|(i, _)| i)
        .collect();
    Some(ImrChart {
        center,
        mr_bar,
        lcl,
        ucl,
        mr_ucl: D4_N2 * mr_bar,
        moving_ranges,
        outside,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bissell_bounds_match_the_textbook_example() {
        // Bissell's approximation for n = 20 and Cpk = 1.33 gives 0.88 <= Cpk <= 1.78
        // (textbook worked example of the interval, from memory). Build 20 values whose
        // sample mean and s give Cpk = 1.33 exactly: s = 1, mean 0, limits at -+3.99.
        let mut v: Vec<f64> = (0..10).map(|_| 1.0).collect();
        v.extend((0..10).map(|_| -1.0));
        let s = (20.0f64 / 19.0).sqrt();
        let v: Vec<f64> = v.iter().map(|x| x / s).collect();
        let c = cpk(&v, -3.99, 3.99).unwrap();
        assert!((c.std_dev - 1.0).abs() < 1e-12);
        assert!((c.cpk - 1.33).abs() < 1e-12);
        assert!((c.lower_95 - 0.88).abs() < 0.006, "{c:?}");
        assert!((c.upper_95 - 1.78).abs() < 0.006, "{c:?}");
        // Off-centre: Cpk takes the nearer limit (definition of Cpk).
        let c = cpk(&v, -3.99, 9.0).unwrap();
        assert!((c.cpk - 1.33).abs() < 1e-12);
        assert!(cpk(&[1.0], 0.0, 2.0).is_none());
        assert!(cpk(&[1.0, 1.0], 0.0, 2.0).is_none());
        assert!(cpk(&[1.0, 2.0], 2.0, 0.0).is_none());
    }

    #[test]
    fn individuals_chart_limits() {
        // MR-bar of 1, 3, 2, 4 is (2 + 1 + 2) / 3 = 5/3; sigma = MR-bar / d2 with d2 = 1.128
        // and the moving-range limit D4 MR-bar with D4 = 3.267 (control-chart constants for
        // subgroups of two, standard tables).
        let c = imr(&[1.0, 3.0, 2.0, 4.0]).unwrap();
        assert!((c.center - 2.5).abs() < 1e-12);
        assert!((c.mr_bar - 5.0 / 3.0).abs() < 1e-12);
        assert!((c.ucl - (2.5 + 3.0 * (5.0 / 3.0) / 1.128)).abs() < 1e-12);
        assert!((c.mr_ucl - 3.267 * 5.0 / 3.0).abs() < 1e-12);
        assert!(c.outside.is_empty());
        let mut v = vec![10.0; 20];
        for (i, x) in v.iter_mut().enumerate() {
            *x += if i % 2 == 0 { 0.1 } else { -0.1 };
        }
        v[12] = 20.0;
        assert_eq!(imr(&v).unwrap().outside, vec![12]);
        assert!(imr(&[1.0]).is_none());
        assert!(imr(&[1.0, f64::NAN]).is_none());
    }
}
