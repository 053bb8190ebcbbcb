//! Diagnosis by fitting the design model: every single-part hypothesis the design allows (a
//! sense resistor at a neighbouring preferred value, one clamp junction more or fewer, the
//! other pass stage, the output setting off through the reference or a feedback resistor,
//! the feedback pair swapped, the foldback divider off, extra junction heating) predicts the
//! output voltage, the limit knee and the short-circuit current through
//! `design::model::evaluate`; each is scored against every measurement with its uncertainty
//! and the spread the remaining tolerances leave; only hypotheses that fit are kept, ranked
//! by score. Pure.

use super::DesignExpectation;
use crate::design::eseries::{next_up, Series};
use crate::design::model::{evaluate, Point};
use crate::design::{Clamp, ClampMount, Design, Params, Stage};
use serde::{Deserialize, Serialize};

/// One measured value with its standard uncertainty.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Observed {
    pub value: f64,
    pub u: f64,
}

/// The measurements a diagnosis is fitted to (any may be missing).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Observations {
    pub vout: Option<Observed>,
    pub limit: Option<Observed>,
    pub short: Option<Observed>,
    /// Estimated pass junction temperature at the knee once settled against the case (case
    /// reading plus P theta_jc): the upper end of where the junction can be while heating.
    pub pass_junction_c: Option<f64>,
    /// The case reading at the knee: the lower end (heat flows from the junction to the
    /// case, so the junction is never cooler). With both, the junction is taken anywhere in
    /// between (uniform), since a case reading cannot tell how far the junction has settled.
    pub pass_case_c: Option<f64>,
    /// When the limit was not reached: the highest current at which the output still
    /// regulated (the limit lies above it).
    pub limit_at_least: Option<Observed>,
    /// Where the pass junction may be at the short's first reading, `(low, high)` degC: no
    /// cooler than the case before the short, no hotter than the case's peak plus the short's
    /// dissipation times theta_jc (the junction settles within about its time constant, so
    /// the first reading can be anywhere between). Without it, the knee's range is used.
    pub short_junction_c: Option<(f64, f64)>,
}

/// A hypothesis that fits, with its score and what it predicts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Hypothesis {
    /// The part, for people ("a 0.68 ohm sense resistor fitted instead of 0.39 ohm").
    pub part: String,
    /// Sum of squared normalised residuals, plus one per fitted free value (lower is better).
    pub score: f64,
    /// Largest |residual| / uncertainty over the measurements.
    pub worst_z: f64,
    /// Predicted output voltage, limit and short-circuit current.
    pub predicted: [f64; 3],
}

/// Largest normalised residual a fitting hypothesis may leave on any measurement (3 sigma:
/// common practice).
pub const FIT_Z: f64 = 3.0;

/// What the diagnosis found.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Diagnosis {
    /// True when the design as drawn (no part wrong) fits every measurement.
    pub nominal_fits: bool,
    /// The design as drawn's score (as [`Hypothesis::score`]).
    pub nominal_score: f64,
    /// Fitting hypotheses that explain the measurements better than the design as drawn,
    /// best first.
    pub fits: Vec<Hypothesis>,
}

/// The spread the remaining tolerances leave on each metric, in the order vout, limit,
/// short: relative (Monte Carlo sigma over nominal) and absolute (the Monte Carlo sigma; a
/// clamp's threshold spreads by the junctions' tolerances whatever the hypothesis). From the
/// as-built bands when known (part tolerances at the bench's room and input: what a bench
/// measurement varies by), else from the operating envelope's bands.
fn tolerance_spread(exp: &DesignExpectation) -> [(f64, f64); 3] {
    let rel = |b: &super::ExpectedBand| {
        let r = if b.nominal != 0.0 {
            (b.monte_carlo.sigma / b.nominal).abs()
        } else {
            0.0
        };
        (r, b.monte_carlo.sigma.abs())
    };
    if let Some(a) = &exp.as_built {
        return [
            (rel(&a.vout).0, 0.0),
            rel(&a.limit_current),
            rel(&a.short_circuit_current),
        ];
    }
    [
        (rel(&exp.vout).0, 0.0),
        rel(&exp.limit_current),
        exp.short_circuit_current
            .as_ref()
            .map(rel)
            .unwrap_or((0.0, 0.0)),
    ]
}

/// Score added to a sense resistor outside the E12 series when the design's own part is in
/// it (project choice: the common series is the likelier part to be picked by mistake).
const OFF_SERIES_PENALTY: f64 = 1.0;

/// Score added per place along the E24 series beyond the neighbouring value (project choice:
/// a part from the next drawer is the likelier mistake; the further the value, the less
/// likely). It only orders hypotheses the measurements cannot tell apart.
const STEP_PENALTY: f64 = 0.5;

/// How many standard spreads of the limit above zero a unit's clamp must be for its output
/// to be taken as regulating unloaded (two-sided 95 %; common practice).
const COLLAPSE_SIGMA: f64 = 2.0;

/// Improvement of the score over the design as drawn that names a part even when the design
/// as drawn fits too (a chi-square difference of 9: three standard deviations of evidence for
/// the hypothesis, as in a likelihood-ratio test; common practice).
pub const EVIDENCE_SCORE: f64 = 9.0;

/// Most the pass junction may run above its estimate from the case reading for heating to
/// explain a limit (project choice: theta_jc and the dissipation at the knee are known to
/// about this).
const HEATING_SLACK_C: f64 = 25.0;

fn predict(d: &Design, p: &Params) -> [f64; 3] {
    let pt: Point = evaluate(d, p);
    // The limit as the clamp relation gives it, V_threshold / R_s, may be at or below zero
    // (a threshold the clamp reaches before any load current flows); the scorer decides what
    // the output does then.
    [
        pt.vout_set,
        pt.limit_current,
        pt.short_circuit_current.max(0.0),
    ]
}

/// Where the pass junction may be: `(low, high)` degC, both ends included.
type JunctionRange = Option<(f64, f64)>;

/// The junction's range at the knee (for the output and the limit) and at the short.
#[derive(Debug, Clone, Copy)]
struct Ranges {
    knee: JunctionRange,
    short: JunctionRange,
}

impl Ranges {
    /// Both ranges moved up by `dt` degC (extra heating).
    fn warmer(self, dt: f64) -> Ranges {
        let up = |r: JunctionRange| r.map(|(lo, hi)| (lo + dt, hi + dt));
        Ranges {
            knee: up(self.knee),
            short: up(self.short),
        }
    }
}

/// A prediction with the pass junction at the middle of its range, and the standard spread
/// per metric that the range leaves (uniform over the range: width / sqrt 12).
fn predict_over(d: &Design, p: &Params, tj: JunctionRange) -> ([f64; 3], [f64; 3]) {
    let at = |t: f64| {
        let mut q = p.clone();
        q.pass_junction_c = t;
        predict(d, &q)
    };
    match tj {
        Some((lo, hi)) if hi > lo => {
            let (a, b) = (at(lo), at(hi));
            let mid = at(0.5 * (lo + hi));
            let mut s = [0.0; 3];
            for k in 0..3 {
                s[k] = (b[k] - a[k]).abs() / 12f64.sqrt();
            }
            (mid, s)
        }
        Some((t, _)) => (at(t), [0.0; 3]),
        None => (predict(d, p), [0.0; 3]),
    }
}

/// The output and the limit predicted over the knee's junction range, the short-circuit
/// current over the short's.
fn predict_in(d: &Design, p: &Params, r: Ranges) -> ([f64; 3], [f64; 3]) {
    let (mut pred, mut spread) = predict_over(d, p, r.knee);
    if r.short.is_some() {
        let (ps, ss) = predict_over(d, p, r.short);
        pred[2] = ps[2];
        spread[2] = ss[2];
    }
    (pred, spread)
}

struct Scorer {
    obs: [Option<Observed>; 3],
    spread: [(f64, f64); 3],
    limit_at_least: Option<Observed>,
}

impl Scorer {
    /// (score, worst z) of a prediction with the extra spread `temp` per metric (from the
    /// junction's temperature range).
    fn score(&self, (pred, temp): ([f64; 3], [f64; 3]), free: usize) -> (f64, f64) {
        let mut pred = pred;
        // A clamp that conducts before any load current flows leaves the pass stage no drive:
        // the output sits at 0 V even unloaded (common practice). Where the limit is within
        // COLLAPSE_SIGMA of zero by the tolerances, a built unit may or may not do so: the
        // output is then either the setting or 0 V, each as likely (a two-way mixture: the
        // nearer outcome is scored, plus -2 ln 1/2 for not knowing which).
        let (rel, abs) = self.spread[1];
        let lim_sigma = (rel * pred[1]).abs().max(abs).max(temp[1]).max(1e-9);
        let q = pred[1] / lim_sigma;
        let mut outcomes = vec![(pred[0], 0.0)];
        let mut anywhere_between = false;
        if q <= -COLLAPSE_SIGMA {
            outcomes = vec![(0.0, 0.0)];
        } else if q < COLLAPSE_SIGMA {
            let mix = 2.0 * std::f64::consts::LN_2;
            outcomes = vec![(pred[0], mix), (0.0, mix)];
            anywhere_between = true;
        }
        pred[1] = pred[1].max(0.0);
        let z_of = |k: usize, p: f64| -> Option<f64> {
            let o = self.obs[k]?;
            let (rel, abs) = self.spread[k];
            let tol = (rel * p).abs().max(abs);
            let s = (o.u.powi(2) + tol.powi(2) + temp[k].powi(2)).sqrt();
            Some(if s > 0.0 { (o.value - p) / s } else { 0.0 })
        };
        let mut chi2 = 0.0;
        let mut worst: f64 = 0.0;
        // The output: the likelier of its possible outcomes.
        if let Some(o) = self.obs[0] {
            // Or anywhere between, on the clamp's soft knee: uniform over the setting, which
            // costs -2 ln of its density against the reading's own spread.
            if anywhere_between && o.value > 0.0 && o.value < pred[0] {
                let (rel, abs) = self.spread[0];
                let s = (o.u.powi(2) + ((rel * pred[0]).abs().max(abs)).powi(2)).sqrt();
                let cost = 2.0 * (pred[0] / (s * (2.0 * std::f64::consts::PI).sqrt())).ln();
                outcomes.push((o.value, cost.max(2.0 * std::f64::consts::LN_2)));
            }
            let (z, extra) = outcomes
                .iter()
                .map(|&(v, extra)| (z_of(0, v).unwrap_or(0.0), extra))
                .min_by(|a, b| (a.0 * a.0 + a.1).total_cmp(&(b.0 * b.0 + b.1)))
                .unwrap_or((0.0, 0.0));
            chi2 += z * z + extra;
            worst = worst.max(z.abs());
        }
        for (k, &p) in pred.iter().enumerate().skip(1) {
            if let Some(z) = z_of(k, p) {
                chi2 += z * z;
                worst = worst.max(z.abs());
            }
        }
        // A one-sided observation: only a predicted limit below the bound is a residual.
        if let Some(b) = self.limit_at_least {
            let s =
                (b.u.powi(2) + ((rel * pred[1]).abs().max(abs)).powi(2) + temp[1].powi(2)).sqrt();
            if pred[1] < b.value && s > 0.0 {
                let z = (b.value - pred[1]) / s;
                chi2 += z * z;
                worst = worst.max(z);
            }
        }
        (chi2 + free as f64, worst)
    }
}

/// Values in `[lo, hi]` of a preferred-value series (IEC 60063 tables in `design::eseries`).
fn preferred_between(lo: f64, hi: f64, series: Series) -> Vec<f64> {
    let mut v = Vec::new();
    let mut c = next_up(lo, series);
    while let Some(x) = c.filter(|x| *x <= hi) {
        v.push(x);
        c = next_up(x * (1.0 + 1e-6), series);
    }
    v
}

/// The best value of one free parameter in `[lo, hi]` (a scan, then golden-section search).
fn fit_free(lo: f64, hi: f64, f: impl Fn(f64) -> f64) -> f64 {
    const N: usize = 60;
    let mut best = (f64::INFINITY, lo);
    for k in 0..=N {
        let x = lo + (hi - lo) * k as f64 / N as f64;
        let s = f(x);
        if s < best.0 {
            best = (s, x);
        }
    }
    let step = (hi - lo) / N as f64;
    let (mut a, mut b) = ((best.1 - step).max(lo), (best.1 + step).min(hi));
    let g = 0.618_033_988_749_895;
    for _ in 0..40 {
        let c = b - g * (b - a);
        let e = a + g * (b - a);
        if f(c) < f(e) {
            b = e;
        } else {
            a = c;
        }
    }
    0.5 * (a + b)
}

/// A resistance for people: `0.68 ohm` below 100 ohm (as sense resistors are marked),
/// engineering prefixes above (`30.0 kohm`).
fn ohms(r: f64) -> String {
    if r.abs() < 100.0 {
        let s = format!("{r:.3}");
        format!("{} ohm", s.trim_end_matches('0').trim_end_matches('.'))
    } else {
        crate::quantity::eng(r, "ohm")
    }
}

/// Fit every single-part hypothesis of `d` to the observations.
pub fn diagnose(d: &Design, exp: &DesignExpectation, obs: &Observations) -> Diagnosis {
    let spread = tolerance_spread(exp);
    let scorer = Scorer {
        obs: [obs.vout, obs.limit, obs.short],
        spread,
        limit_at_least: obs.limit_at_least,
    };
    // The pass junction lies between the case reading and its settled value above it.
    let knee: JunctionRange = match (obs.pass_case_c, obs.pass_junction_c) {
        (Some(c), Some(j)) => Some((c.min(j), c.max(j))),
        (None, Some(j)) => Some((j, j)),
        _ => None,
    };
    let tj = Ranges {
        knee,
        short: obs
            .short_junction_c
            .map(|(a, b)| (a.min(b), a.max(b)))
            .or(knee),
    };
    let mut base = Params::nominal(d);
    if let Some((lo, hi)) = knee {
        base.pass_junction_c = 0.5 * (lo + hi);
    }
    // Clamp parts sit at ambient unless the design mounts them on the heatsink; there they
    // are at the sink, T_case - P theta_cs (thermal Ohm's law), never below ambient.
    if let (ClampMount::Heatsink, Some(case), Some(j)) =
        (d.limit.clamp_mount, obs.pass_case_c, obs.pass_junction_c)
    {
        let watts = if d.pass.theta_jc > 0.0 {
            (j - case).max(0.0) / d.pass.theta_jc
        } else {
            0.0
        };
        base.clamp_junction_c = (case - watts * d.pass.theta_cs).max(base.ambient_c);
    }
    let (nominal_score, nominal_z) = scorer.score(predict_in(d, &base, tj), 0);
    let mut out = Vec::new();
    let mut push = |part: String, d2: &Design, p: &Params, free: usize, prior: f64, at: Ranges| {
        let pred = predict_in(d2, p, at);
        let (score, worst_z) = scorer.score(pred, free);
        let pred = pred.0;
        let score = score + prior;
        if worst_z <= FIT_Z && score < nominal_score {
            out.push(Hypothesis {
                part,
                score,
                worst_z,
                predicted: pred,
            });
        }
    };

    // Sense resistor at each neighbouring preferred value (E24 within a factor of two).
    let r0 = d.limit.sense.ohms;
    for r in preferred_between(r0 * 0.5, r0 * 2.0, Series::E24) {
        if (r / r0 - 1.0).abs() < 0.01 {
            continue;
        }
        let mut p = base.clone();
        p.r_sense = r;
        let in_e12 = |x: f64| preferred_between(x * 0.999, x * 1.001, Series::E12).len() == 1;
        // Preferred values strictly between the two, plus one: how many places along the
        // E24 series the part is from the design's.
        let steps = preferred_between(r.min(r0) * 1.001, r.max(r0) * 0.999, Series::E24).len() + 1;
        let prior = if in_e12(r0) && !in_e12(r) {
            OFF_SERIES_PENALTY
        } else {
            0.0
        } + STEP_PENALTY * (steps - 1) as f64;
        push(
            format!(
                "a {} sense resistor fitted instead of {}",
                ohms(r),
                ohms(r0)
            ),
            d,
            &p,
            0,
            prior,
            tj,
        );
    }
    // One clamp junction more or fewer; the other pass stage (diode-string clamp).
    if d.limit.clamp == Clamp::DiodeString {
        for delta in [1i64, -1] {
            let n = base.diodes as i64 + delta;
            if n < 1 {
                continue;
            }
            let mut p = base.clone();
            p.diodes = n as u32;
            let word = if delta > 0 { "more" } else { "fewer" };
            push(
                format!(
                    "one clamp diode {word}: {n} diodes in the string instead of {}",
                    base.diodes
                ),
                d,
                &p,
                0,
                0.0,
                tj,
            );
        }
    }
    {
        let mut other = d.clone();
        other.pass.stage = match d.pass.stage {
            Stage::Single => Stage::Darlington,
            Stage::Darlington => Stage::Single,
        };
        let word = |s: Stage| match s {
            Stage::Single => "a single pass transistor",
            Stage::Darlington => "a Darlington pass stage",
        };
        if predict(&other, &base) != predict(d, &base) {
            push(
                format!(
                    "{} fitted instead of {}",
                    word(other.pass.stage),
                    word(d.pass.stage)
                ),
                &other,
                &base,
                0,
                0.0,
                tj,
            );
        }
    }
    // The feedback pair swapped.
    {
        let mut p = base.clone();
        std::mem::swap(&mut p.fb_top, &mut p.fb_bottom);
        push(
            format!(
                "the feedback resistors swapped ({} in the upper place, {} in the lower)",
                ohms(base.fb_bottom),
                ohms(base.fb_top)
            ),
            d,
            &p,
            0,
            0.0,
            tj,
        );
    }
    // The output setting off: the reference, or either feedback resistor (the measurements
    // cannot tell these apart, so they are one hypothesis with the value each would need).
    if obs.vout.is_some() {
        let f = |x: f64| {
            let mut p = base.clone();
            p.vref = base.vref * x;
            scorer.score(predict_in(d, &p, tj), 1).0
        };
        // From a quarter to twice the design's setting: a wrong part, not a drift.
        let x = fit_free(0.25, 2.0, f);
        let mut p = base.clone();
        p.vref = base.vref * x;
        let v_nom = predict(d, &base)[0];
        let v_fit = predict(d, &p)[0];
        // The same output from the divider: V = V_ref (1 + Rt / Rb).
        let gain = v_fit / base.vref - 1.0;
        let (rt, rb) = if gain > 0.0 {
            (base.fb_bottom * gain, base.fb_top / gain)
        } else {
            (f64::NAN, f64::NAN)
        };
        if (x - 1.0).abs() > 1e-3 {
            push(
                format!(
                    "the output setting {:+.1} % off: a reference of {:.3} V (design {:.3} V), or \
                     an upper feedback resistor of {} (design {}), or a lower one of {} (design {})",
                    (v_fit / v_nom - 1.0) * 100.0,
                    base.vref * x,
                    base.vref,
                    ohms(rt),
                    ohms(base.fb_top),
                    ohms(rb),
                    ohms(base.fb_bottom)
                ),
                d,
                &p,
                1,
                0.0,
                tj,
            );
        }
    }
    // The foldback divider ratio off (either element).
    if d.limit.clamp == Clamp::Foldback {
        let f = |x: f64| {
            let mut p = base.clone();
            p.fold_bottom = base.fold_bottom * x;
            scorer.score(predict_in(d, &p, tj), 1).0
        };
        let x = fit_free(0.5, 2.0, f);
        if (x - 1.0).abs() > 0.01 {
            let mut p = base.clone();
            p.fold_bottom = base.fold_bottom * x;
            // The same ratio k = Rb / (Rt + Rb) from the upper element: Rt' = Rt / x.
            push(
                format!(
                    "the foldback divider off: a lower resistor of {} (design {}) or an upper \
                     one of {} (design {})",
                    ohms(base.fold_bottom * x),
                    ohms(base.fold_bottom),
                    ohms(base.fold_top / x),
                    ohms(base.fold_top)
                ),
                d,
                &p,
                1,
                0.0,
                tj,
            );
        }
    }
    // Junction heating beyond what the case reading explains: only with a temperature
    // reading, and only where the fitted temperature lies within HEATING_SLACK_C of it (the
    // sign and the size must fit).
    if let Some(t_est) = obs.pass_junction_c {
        let t0 = t_est.max(base.ambient_c);
        let t_max = (t0 + HEATING_SLACK_C).min(d.pass.tj_max_c.max(t0 + 1.0));
        let hot = |t: f64| {
            let mut p = base.clone();
            p.pass_junction_c = t;
            p
        };
        // The knee read with the junction at t; the short as much warmer than its own range.
        let hot_at = |t: f64| Ranges {
            knee: Some((t, t)),
            short: tj.warmer(t - t0).short,
        };
        let t = fit_free(t0, t_max, |t| {
            scorer.score(predict_in(d, &hot(t), hot_at(t)), 1).0
        });
        if t > t0 + 5.0 && t < t_max - 0.5 {
            push(
                format!(
                    "junction heating: the limit reads as with the pass junction near {t:.0} degC \
                     ({:.0} degC above the estimate from the case reading)",
                    t - t0
                ),
                d,
                &hot(t),
                1,
                0.0,
                hot_at(t),
            );
        }
    }
    out.sort_by(|a, b| a.score.total_cmp(&b.score));
    // Parts whose predictions cannot be told apart by these measurements (one clamp diode
    // more and a single pass transistor both raise the threshold by one junction) are one
    // hypothesis naming each.
    let mut merged: Vec<Hypothesis> = Vec::new();
    for h in out {
        let same = merged.iter_mut().find(|m| {
            m.predicted
                .iter()
                .zip(h.predicted.iter())
                .all(|(a, b)| (a - b).abs() <= 1e-6 * a.abs().max(b.abs()).max(1e-9))
        });
        match same {
            Some(m) => {
                m.part = format!("{}, or {}", m.part, h.part);
                m.score = m.score.min(h.score);
            }
            None => merged.push(h),
        }
    }
    let out = merged;
    Diagnosis {
        nominal_fits: nominal_z <= FIT_Z,
        nominal_score,
        fits: out,
    }
}

/// Lines for people: the ranked fitting hypotheses, or that none fits.
pub fn diagnosis_lines(diag: &Diagnosis) -> Vec<String> {
    let fits = named(diag);
    if diag.nominal_fits && fits.is_empty() {
        return Vec::new();
    }
    if fits.is_empty() {
        return vec!["no single-part explanation fits the measurements".to_string()];
    }
    let best = fits[0].score;
    let mut lines: Vec<String> = fits
        .iter()
        .enumerate()
        .map(|(k, h)| {
            let tie = if k > 0 && h.score - best < TIE_SCORE {
                "; fits about as well as the first: these measurements cannot tell them apart"
            } else {
                ""
            };
            format!(
                "{} (score {:.1}, worst residual {:.1} sigma{tie})",
                h.part, h.score, h.worst_z
            )
        })
        .collect();
    if let (true, Some(first)) = (diag.nominal_fits, lines.first_mut()) {
        first.push_str(&format!(
            "; the design as drawn, no part wrong, also fits, less well (score {:.1})",
            diag.nominal_score
        ));
    }
    lines
}

/// The hypotheses a diagnosis names, best first: the fitting ones, and where the design as
/// drawn fits too, only those with strong evidence over it.
pub fn named(diag: &Diagnosis) -> Vec<&Hypothesis> {
    diag.fits
        .iter()
        .filter(|h| !diag.nominal_fits || diag.nominal_score - h.score >= EVIDENCE_SCORE)
        .collect()
}

/// Score difference under which two hypotheses are said to fit equally well (a chi-square
/// difference of 1 bounds one standard deviation for one parameter; common practice).
pub const TIE_SCORE: f64 = 1.0;

#[cfg(test)]
mod tests;
