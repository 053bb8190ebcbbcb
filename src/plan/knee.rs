//! Adaptive knee search: a pure state machine that locates a supply's limit current with few
//! load points. It never talks to instruments: the runner asks it for the next setpoint and
//! feeds it measurements.

use crate::measure::LoadMode;
use std::fmt;

/// Settings of the adaptive knee search (all currents in amperes).
///
/// **The limit current it locates** is the output current at which the output voltage has
/// fallen to `(1 - drop) * V_ref`, where `V_ref` is the output voltage measured at the
/// reference load (`reference_a`, well inside the regulation region). Between the two probes
/// that bracket the criterion the supply curve is taken as a straight line (the fixed-drop
/// criterion, interpolated).
///
/// **How.** After the reference point, the search probes `upper_a` (widening by 25 % steps up
/// to `ceiling_a` while the output still regulates), then bisects the nominal load current
/// between the highest probe that still regulates and the lowest that does not, until the
/// bracket is narrower than `resolution * lower end`. In CR mode (the default, stable even
/// with foldback) a nominal current `x` is set as the resistance `V_ref / x`; in CC mode the
/// runner returns the load to the reference current between probes so that a foldback supply
/// that latched low can recover.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KneeConfig {
    /// `ConstantResistance` or `ConstantCurrent`.
    pub mode: LoadMode,
    pub expected_a: f64,
    pub reference_a: f64,
    pub upper_a: f64,
    /// Never load the unit beyond this current.
    pub ceiling_a: f64,
    /// Fractional drop criterion (0.01 = 1 %).
    pub drop: f64,
    /// Stop when the bracket is narrower than this fraction of its lower end.
    pub resolution: f64,
    pub max_points: u32,
    /// Designed output voltage, used for the reference resistance in CR mode.
    pub vout_hint_v: f64,
}

/// What the knee search wants next.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum KneeRequest {
    /// Set the load and take a reading, then call [`KneeSearch::observe`].
    Measure { mode: LoadMode, setpoint: f64 },
    /// The search is over; see [`KneeSearch::result`].
    Finished,
}

/// How the knee search ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum KneeOutcome {
    /// Bracketed to the requested resolution.
    Located,
    /// Ran out of points before reaching the resolution; the estimate is the best so far.
    Unresolved,
    /// Still regulating at the ceiling: no knee below `ceiling_a`.
    NotReached,
    /// The output did not regulate even at the reference load.
    NoOutput,
}

/// The knee search's answer.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KneeResult {
    pub outcome: KneeOutcome,
    /// Interpolated limit current (A), when bracketed.
    pub limit_current_a: Option<f64>,
    /// Measured currents of the bracketing probes (regulating, not regulating).
    pub bracket_a: Option<(f64, f64)>,
    pub reference_voltage_v: f64,
    /// `(1 - drop) * reference_voltage_v`.
    pub threshold_v: f64,
    pub points: u32,
}

#[derive(Debug, Clone, Copy, PartialEq)]
struct Probe {
    nominal_a: f64,
    v: f64,
    i: f64,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Phase {
    Reference,
    Bracket,
    Bisect,
    Done,
}

/// The adaptive knee search as a pure state machine: ask [`next_setpoint`](Self::next_setpoint),
/// set the load, measure, and feed the output voltage and current to
/// [`observe`](Self::observe) until it answers [`KneeRequest::Finished`].
#[derive(Debug, Clone)]
pub struct KneeSearch {
    cfg: KneeConfig,
    phase: Phase,
    next_x: f64,
    v_ref: f64,
    lo: Option<Probe>,
    hi: Option<Probe>,
    points: u32,
    result: Option<KneeResult>,
}

impl KneeSearch {
    pub fn new(cfg: KneeConfig) -> KneeSearch {
        KneeSearch {
            cfg,
            phase: Phase::Reference,
            next_x: cfg.reference_a,
            v_ref: cfg.vout_hint_v,
            lo: None,
            hi: None,
            points: 0,
            result: None,
        }
    }

    pub fn config(&self) -> &KneeConfig {
        &self.cfg
    }

    /// Points observed so far.
    pub fn points(&self) -> u32 {
        self.points
    }

    /// The next load setting to measure, or `Finished`.
    pub fn next_setpoint(&self) -> KneeRequest {
        if self.phase == Phase::Done {
            return KneeRequest::Finished;
        }
        let setpoint = match self.cfg.mode {
            LoadMode::ConstantResistance => self.v_ref / self.next_x,
            _ => self.next_x,
        };
        KneeRequest::Measure {
            mode: self.cfg.mode,
            setpoint,
        }
    }

    /// The nominal current of the pending probe (A).
    pub fn nominal_current(&self) -> f64 {
        self.next_x
    }

    /// Feed the measured output voltage and current at the requested setting.
    pub fn observe(&mut self, v_out: f64, i_out: f64) {
        if self.phase == Phase::Done {
            return;
        }
        self.points += 1;
        let p = Probe {
            nominal_a: self.next_x,
            v: v_out,
            i: i_out,
        };
        match self.phase {
            Phase::Reference => {
                if !(v_out.is_finite() && v_out > 0.05 * self.cfg.vout_hint_v.abs()) {
                    self.finish(KneeOutcome::NoOutput);
                    return;
                }
                self.v_ref = v_out;
                self.lo = Some(p);
                self.next_x = self.cfg.upper_a;
                self.phase = Phase::Bracket;
            }
            Phase::Bracket => {
                if self.regulates(&p) {
                    self.lo = Some(p);
                    if self.next_x >= self.cfg.ceiling_a {
                        self.finish(KneeOutcome::NotReached);
                        return;
                    }
                    self.next_x = (self.next_x * 1.25).min(self.cfg.ceiling_a);
                } else {
                    self.hi = Some(p);
                    self.phase = Phase::Bisect;
                }
            }
            Phase::Bisect => {
                if self.regulates(&p) {
                    self.lo = Some(p);
                } else {
                    self.hi = Some(p);
                }
            }
            Phase::Done => {}
        }
        if self.phase == Phase::Bisect {
            if let (Some(lo), Some(hi)) = (self.lo, self.hi) {
                if hi.nominal_a - lo.nominal_a <= self.cfg.resolution * lo.nominal_a {
                    self.finish(KneeOutcome::Located);
                    return;
                }
                self.next_x = 0.5 * (lo.nominal_a + hi.nominal_a);
            }
        }
        if self.phase != Phase::Done && self.points >= self.cfg.max_points {
            self.finish(KneeOutcome::Unresolved);
        }
    }

    /// The answer, once finished.
    pub fn result(&self) -> Option<KneeResult> {
        self.result
    }

    fn threshold(&self) -> f64 {
        (1.0 - self.cfg.drop) * self.v_ref
    }

    fn regulates(&self, p: &Probe) -> bool {
        p.v.is_finite() && p.v >= self.threshold()
    }

    fn finish(&mut self, outcome: KneeOutcome) {
        self.phase = Phase::Done;
        let th = self.threshold();
        let (estimate, bracket) = match (self.lo, self.hi) {
            (Some(lo), Some(hi)) => {
                let dv = lo.v - hi.v;
                let est = if dv > 0.0 {
                    lo.i + (lo.v - th) * (hi.i - lo.i) / dv
                } else {
                    0.5 * (lo.i + hi.i)
                };
                (Some(est), Some((lo.i, hi.i)))
            }
            _ => (None, None),
        };
        self.result = Some(KneeResult {
            outcome,
            limit_current_a: estimate,
            bracket_a: bracket,
            reference_voltage_v: self.v_ref,
            threshold_v: th,
            points: self.points,
        });
    }
}

impl fmt::Display for KneeOutcome {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            KneeOutcome::Located => "located",
            KneeOutcome::Unresolved => "unresolved (point budget spent)",
            KneeOutcome::NotReached => "not reached (still regulating at the ceiling)",
            KneeOutcome::NoOutput => "no output at the reference load",
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit::SoftKnee;

    // ---- knee search against the test kit's soft-knee supply curve ------------------------

    fn cfg(mode: LoadMode) -> KneeConfig {
        KneeConfig {
            mode,
            expected_a: 1.0,
            reference_a: 0.1,
            upper_a: 1.3,
            ceiling_a: 1.6,
            drop: 0.01,
            resolution: 0.0025,
            max_points: 20,
            vout_hint_v: 12.0,
        }
    }

    fn run_search(curve: &SoftKnee, cfg: KneeConfig, noise_v: f64) -> KneeResult {
        let mut ks = KneeSearch::new(cfg);
        let mut rng = crate::rng::Rng::new(7);
        while let KneeRequest::Measure { mode, setpoint } = ks.next_setpoint() {
            let (v, i) = curve.operate(mode, setpoint);
            ks.observe(v + noise_v * rng.normal(), i);
        }
        ks.result().expect("finished search has a result")
    }

    /// The true limit current under the search's own definition: the current where the
    /// curve crosses (1 - drop) * V at the reference load.
    fn truth(curve: &SoftKnee, cfg: &KneeConfig) -> f64 {
        let v_ref = match cfg.mode {
            LoadMode::ConstantResistance => {
                curve.with_resistance(cfg.vout_hint_v / cfg.reference_a).0
            }
            _ => curve.v(cfg.reference_a),
        };
        curve.current_at((1.0 - cfg.drop) * v_ref)
    }

    /// Points a linear sweep from `reference` to `upper` needs at a step of `resolution` of
    /// the expected current, and the knee it finds (first point below the threshold,
    /// interpolated with the point before it).
    fn linear_sweep(curve: &SoftKnee, cfg: &KneeConfig) -> (usize, f64) {
        let step = 0.005 * cfg.expected_a;
        let v_ref = curve.v(cfg.reference_a);
        let th = (1.0 - cfg.drop) * v_ref;
        let mut prev = (cfg.reference_a, v_ref);
        let mut found = f64::NAN;
        let n = ((cfg.upper_a - cfg.reference_a) / step).round() as usize + 1;
        for k in 0..n {
            let i = cfg.reference_a + step * k as f64;
            let v = curve.v(i);
            if found.is_nan() && v < th {
                found = prev.0 + (prev.1 - th) * (i - prev.0) / (prev.1 - v);
            }
            prev = (i, v);
        }
        (n, found)
    }

    #[test]
    fn knee_search_finds_knee_within_half_percent_in_twenty_points() {
        for mode in [LoadMode::ConstantResistance, LoadMode::ConstantCurrent] {
            for i_l in [0.7, 0.9, 1.0, 1.04, 1.2, 1.45] {
                let curve = SoftKnee {
                    v0: 12.0,
                    r_out: 0.02,
                    i_l,
                    w: 0.005,
                    s: 200.0,
                };
                let c = cfg(mode);
                let r = run_search(&curve, c, 0.0);
                let t = truth(&curve, &c);
                let est = r.limit_current_a.expect("bracketed");
                assert_eq!(r.outcome, KneeOutcome::Located, "{mode} I_L={i_l}");
                assert!(r.points <= 20, "{mode} I_L={i_l}: {} points", r.points);
                let err = (est - t).abs() / t;
                assert!(
                    err <= 0.005,
                    "{mode} I_L={i_l}: est {est} truth {t} err {err}"
                );
            }
        }
    }

    #[test]
    fn linear_sweep_at_equal_resolution_needs_over_200_points() {
        let curve = SoftKnee {
            v0: 12.0,
            r_out: 0.02,
            i_l: 1.0,
            w: 0.005,
            s: 200.0,
        };
        let c = cfg(LoadMode::ConstantCurrent);
        let (n, found) = linear_sweep(&curve, &c);
        let t = truth(&curve, &c);
        assert!(
            (found - t).abs() / t <= 0.005,
            "linear sweep found {found}, truth {t}"
        );
        let r = run_search(&curve, c, 0.0);
        assert!(n >= 200, "linear sweep used {n} points");
        assert!(
            (r.points as usize) * 10 <= n,
            "search {} vs sweep {n}",
            r.points
        );
    }

    #[test]
    fn knee_search_tolerates_meter_noise() {
        // 2 mV rms noise on a 12 V output (a 4.5-digit meter's last digit, from memory).
        let curve = SoftKnee {
            v0: 12.0,
            r_out: 0.05,
            i_l: 1.1,
            w: 0.01,
            s: 100.0,
        };
        let c = cfg(LoadMode::ConstantResistance);
        let r = run_search(&curve, c, 0.002);
        let t = truth(&curve, &c);
        let est = r.limit_current_a.expect("bracketed");
        assert!(r.points <= 20);
        assert!((est - t).abs() / t <= 0.005, "est {est} truth {t}");
    }

    #[test]
    fn knee_search_reports_no_knee_below_ceiling_and_dead_output() {
        let strong = SoftKnee {
            v0: 12.0,
            r_out: 0.02,
            i_l: 5.0,
            w: 0.005,
            s: 200.0,
        };
        let r = run_search(&strong, cfg(LoadMode::ConstantCurrent), 0.0);
        assert_eq!(r.outcome, KneeOutcome::NotReached);
        assert_eq!(r.limit_current_a, None);

        let mut ks = KneeSearch::new(cfg(LoadMode::ConstantCurrent));
        ks.observe(0.01, 0.1);
        assert_eq!(ks.next_setpoint(), KneeRequest::Finished);
        assert_eq!(ks.result().map(|r| r.outcome), Some(KneeOutcome::NoOutput));
    }

    #[test]
    fn knee_search_stops_at_point_budget() {
        let curve = SoftKnee {
            v0: 12.0,
            r_out: 0.02,
            i_l: 1.0,
            w: 0.005,
            s: 200.0,
        };
        let mut c = cfg(LoadMode::ConstantCurrent);
        c.max_points = 5;
        c.resolution = 0.0001;
        let r = run_search(&curve, c, 0.0);
        assert_eq!(r.outcome, KneeOutcome::Unresolved);
        assert_eq!(r.points, 5);
        assert!(r.limit_current_a.is_some());
    }
}
