//! Curve fits used by the analysis: ordinary least squares with standard uncertainties, a
//! robust refit that drops outliers, and a first-order exponential fit by variable projection.
//! Pure numerics; no I/O and no knowledge of records.

use serde::{Deserialize, Serialize};

/// A straight-line least-squares fit `y = intercept + slope * x` with standard uncertainties.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LineFit {
    pub intercept: f64,
    pub slope: f64,
    /// Standard uncertainty of the slope (None with only two points).
    pub slope_u: Option<f64>,
    /// Standard uncertainty of the intercept (None with only two points).
    pub intercept_u: Option<f64>,
    /// Residual standard deviation (None with only two points).
    pub residual_sd: Option<f64>,
    pub n: usize,
}

/// Ordinary least squares of `ys` on `xs`. Needs two or more points with distinct `x`.
/// Uncertainties follow the usual formulas: s^2 = SSR / (n - 2), u(b) = s / sqrt(Sxx),
/// u(a) = s * sqrt(1/n + xbar^2 / Sxx).
pub fn linear_fit(xs: &[f64], ys: &[f64]) -> Option<LineFit> {
    let n = xs.len().min(ys.len());
    if n < 2 {
        return None;
    }
    let nf = n as f64;
    let xbar = xs[..n].iter().sum::<f64>() / nf;
    let ybar = ys[..n].iter().sum::<f64>() / nf;
    let mut sxx = 0.0;
    let mut sxy = 0.0;
    for i in 0..n {
        let dx = xs[i] - xbar;
        sxx += dx * dx;
        sxy += dx * (ys[i] - ybar);
    }
    if sxx <= 0.0 || !sxx.is_finite() {
        return None;
    }
    let slope = sxy / sxx;
    let intercept = ybar - slope * xbar;
    let (slope_u, intercept_u, residual_sd) = if n > 2 {
        let ssr: f64 = (0..n)
            .map(|i| (ys[i] - intercept - slope * xs[i]).powi(2))
            .sum();
        let s2 = ssr / (nf - 2.0);
        (
            Some((s2 / sxx).sqrt()),
            Some((s2 * (1.0 / nf + xbar * xbar / sxx)).sqrt()),
            Some(s2.sqrt()),
        )
    } else {
        (None, None, None)
    };
    Some(LineFit {
        intercept,
        slope,
        slope_u,
        intercept_u,
        residual_sd,
        n,
    })
}

/// Least squares with one pass of outlier rejection: points whose residual exceeds four
/// robust standard deviations (1.4826 x the median absolute residual, the normal-consistent
/// MAD) are dropped and the line refitted, when at least two points remain. A reading taken
/// while the output was still settling then does not tilt a near-vertical limit line.
pub fn robust_fit(xs: &[f64], ys: &[f64]) -> Option<LineFit> {
    let first = linear_fit(xs, ys)?;
    let n = xs.len().min(ys.len());
    let res: Vec<f64> = (0..n)
        .map(|i| (ys[i] - first.intercept - first.slope * xs[i]).abs())
        .collect();
    let mut sorted = res.clone();
    sorted.sort_by(|a, b| a.total_cmp(b));
    let mad = sorted[sorted.len() / 2];
    let limit = 4.0 * 1.4826 * mad;
    if limit.is_nan() || limit <= 0.0 {
        return Some(first);
    }
    let keep: Vec<usize> = (0..n).filter(|i| res[*i] <= limit).collect();
    if keep.len() == n || keep.len() < 2 {
        return Some(first);
    }
    let kx: Vec<f64> = keep.iter().map(|i| xs[*i]).collect();
    let ky: Vec<f64> = keep.iter().map(|i| ys[*i]).collect();
    linear_fit(&kx, &ky).or(Some(first))
}

/// Fitted `I(t) = I_inf + (I_0 - I_inf) exp(-t / tau)`, t from the start of the dwell.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ExpFit {
    pub tau_s: f64,
    pub i_0: f64,
    pub i_inf: f64,
    pub rms_residual: f64,
}

/// Least-squares fit of `y = c + a exp(-t / tau)` (variable projection: for each tau the model
/// is linear in c and a; tau is found by a log-spaced scan refined by golden-section search).
/// Returns None with fewer than four points, or when the best tau lies at the edge of the
/// searched range (no settling visible within the data).
pub fn fit_exponential(ts: &[f64], ys: &[f64]) -> Option<ExpFit> {
    let n = ts.len().min(ys.len());
    if n < 4 {
        return None;
    }
    let t0 = ts[0];
    let span = ts[n - 1] - t0;
    if span <= 0.0 {
        return None;
    }
    let min_dt = ts
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| *d > 0.0)
        .fold(f64::INFINITY, f64::min);
    let lo = (min_dt / 4.0).ln();
    let hi = (span * 20.0).ln();
    let ssr_at = |ln_tau: f64| -> (f64, f64, f64) {
        let tau = ln_tau.exp();
        let e: Vec<f64> = ts[..n].iter().map(|t| (-(t - t0) / tau).exp()).collect();
        match linear_fit(&e, &ys[..n]) {
            Some(f) => {
                let ssr: f64 = (0..n)
                    .map(|i| (ys[i] - f.intercept - f.slope * e[i]).powi(2))
                    .sum();
                (ssr, f.intercept, f.slope)
            }
            None => (f64::INFINITY, 0.0, 0.0),
        }
    };
    const STEPS: usize = 80;
    let grid: Vec<f64> = (0..=STEPS)
        .map(|k| lo + (hi - lo) * k as f64 / STEPS as f64)
        .collect();
    let (best_k, _) = grid
        .iter()
        .enumerate()
        .map(|(k, x)| (k, ssr_at(*x).0))
        .min_by(|a, b| a.1.total_cmp(&b.1))?;
    if best_k == 0 || best_k == STEPS {
        return None;
    }
    // A time constant under two sample intervals is not resolved by the data (a meter's
    // settling or one transitional reading, not first-order heating).
    let mut dts: Vec<f64> = ts[..n].windows(2).map(|w| w[1] - w[0]).collect();
    dts.sort_by(|a, b| a.total_cmp(b));
    let median_dt = dts[dts.len() / 2];
    // Golden-section refinement between the neighbours of the best grid point.
    let (mut a, mut b) = (grid[best_k - 1], grid[best_k + 1]);
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let mut c = b - g * (b - a);
    let mut dd = a + g * (b - a);
    for _ in 0..60 {
        if ssr_at(c).0 < ssr_at(dd).0 {
            b = dd;
        } else {
            a = c;
        }
        c = b - g * (b - a);
        dd = a + g * (b - a);
    }
    let ln_tau = (a + b) / 2.0;
    let (ssr, i_inf, amp) = ssr_at(ln_tau);
    if !ssr.is_finite() || ln_tau.exp() < 2.0 * median_dt {
        return None;
    }
    Some(ExpFit {
        tau_s: ln_tau.exp(),
        i_0: i_inf + amp,
        i_inf,
        rms_residual: (ssr / n as f64).sqrt(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn straight_line_fit_recovers_slope_and_intercept() {
        // y = 3 + 2x exactly: the fit returns slope 2, intercept 3 and zero uncertainty.
        let xs = [0.0, 1.0, 2.0, 3.0, 4.0];
        let ys: Vec<f64> = xs.iter().map(|x| 3.0 + 2.0 * x).collect();
        let f = linear_fit(&xs, &ys).unwrap();
        assert!((f.slope - 2.0).abs() < 1e-12);
        assert!((f.intercept - 3.0).abs() < 1e-12);
        assert!(f.slope_u.unwrap() < 1e-12);
    }

    #[test]
    fn slope_uncertainty_matches_hand_computation() {
        // x = 0,1,2,3 ; y = 0,1,1,3 (worked by hand from the OLS formulas):
        // xbar 1.5, ybar 1.25, Sxx 5, Sxy 4.5 -> slope 0.9, intercept -0.1;
        // residuals 0.1, 0.2, -0.7, 0.4 -> SSR 0.70, s^2 = 0.35, u(slope) = sqrt(0.35/5).
        let f = linear_fit(&[0.0, 1.0, 2.0, 3.0], &[0.0, 1.0, 1.0, 3.0]).unwrap();
        assert!((f.slope - 0.9).abs() < 1e-12);
        assert!((f.intercept + 0.1).abs() < 1e-12);
        assert!((f.slope_u.unwrap() - (0.35f64 / 5.0).sqrt()).abs() < 1e-12);
    }

    #[test]
    fn fit_rejects_degenerate_input() {
        assert!(linear_fit(&[1.0], &[2.0]).is_none());
        assert!(linear_fit(&[1.0, 1.0, 1.0], &[2.0, 3.0, 4.0]).is_none());
    }

    #[test]
    fn time_constant_fit_on_synthetic_exponential() {
        // I(t) = 1.2 + (1.5 - 1.2) exp(-t / 8 s), sampled every 0.5 s for 30 s.
        let ts: Vec<f64> = (0..=60).map(|k| k as f64 * 0.5).collect();
        let is: Vec<f64> = ts.iter().map(|t| 1.2 + 0.3 * (-t / 8.0f64).exp()).collect();
        let f = fit_exponential(&ts, &is).unwrap();
        assert!((f.tau_s - 8.0).abs() < 1e-3, "{f:?}");
        assert!((f.i_inf - 1.2).abs() < 1e-6);
        assert!((f.i_0 - 1.5).abs() < 1e-6);
    }

    #[test]
    fn flat_current_has_no_time_constant() {
        let ts: Vec<f64> = (0..20).map(|k| k as f64).collect();
        let is: Vec<f64> = ts.iter().map(|t| 1.0 + 0.001 * t).collect();
        assert!(fit_exponential(&ts, &is).is_none());
    }

    #[test]
    fn a_step_faster_than_the_sampling_is_not_a_time_constant() {
        // One low first reading then a slow linear rise: the best exponential has a time
        // constant under the 0.2 s sample interval, which the data cannot resolve.
        let ts: Vec<f64> = (0..15).map(|k| k as f64 * 0.2).collect();
        let is: Vec<f64> = ts
            .iter()
            .enumerate()
            .map(|(k, t)| if k == 0 { 1.5 } else { 1.84 + 0.06 * t })
            .collect();
        assert!(fit_exponential(&ts, &is).is_none());
    }

    #[test]
    fn robust_fit_drops_a_settling_reading() {
        // Limit line I = 1.7 + 0.005 V, plus one reading at (15.8 V, 1.08 A) taken while the
        // output settled; the plain fit tilts, the robust fit recovers the line.
        let mut v: Vec<f64> = (0..12).map(|k| 19.0 - 1.5 * k as f64).collect();
        let mut i: Vec<f64> = v.iter().map(|v| 1.7 + 0.005 * v).collect();
        v.push(15.8);
        i.push(1.08);
        let plain = linear_fit(&v, &i).unwrap();
        let robust = robust_fit(&v, &i).unwrap();
        assert!((plain.slope - 0.005).abs() > 0.005);
        assert!((robust.slope - 0.005).abs() < 1e-12);
        assert!((robust.intercept - 1.7).abs() < 1e-12);
        assert_eq!(robust.n, 12);
    }
}
