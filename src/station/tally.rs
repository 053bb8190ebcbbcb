//! A batch's running tally: how many units passed, were marginal, failed, did not finish or
//! hit a station error; the yield; and, once enough judged units exist, Cpk of each key
//! metric against the design's limits. A unit is counted once, by its serial: a unit tested
//! again stands at its latest result (the final yield), and the first-pass yield counts each
//! unit's first result. Yield counts judged results only: an incomplete or error run says
//! nothing about the unit. Pure.

use super::FloorResult;
use crate::capability::{self, Cpk};

/// Units a Cpk is shown from ([`crate::capability::MIN_N_FOR_CPK`]).
pub const CPK_MIN_UNITS: usize = crate::capability::MIN_N_FOR_CPK;

/// One metric value with its limits: `(name, value, lower, upper)`.
pub type MetricValue = (String, f64, f64, f64);

/// One unit of the batch: its first and latest result and the latest test's values.
#[derive(Debug, Clone)]
struct Unit {
    serial: String,
    first: FloorResult,
    latest: FloorResult,
    tests: usize,
    values: Vec<MetricValue>,
}

/// A batch's tally so far.
#[derive(Debug, Clone, Default)]
pub struct Tally {
    /// In the order their serials were first tested.
    units: Vec<Unit>,
}

impl Tally {
    pub fn new() -> Tally {
        Tally::default()
    }

    /// Count one test of unit `serial`: its result and metric values. A serial tested before
    /// takes this result and these values in place of its earlier ones.
    pub fn add(&mut self, serial: &str, result: FloorResult, values: &[MetricValue]) {
        match self.units.iter_mut().find(|u| u.serial == serial) {
            Some(u) => {
                u.latest = result;
                u.tests += 1;
                u.values = values.to_vec();
            }
            None => self.units.push(Unit {
                serial: serial.to_string(),
                first: result,
                latest: result,
                tests: 1,
                values: values.to_vec(),
            }),
        }
    }

    /// Units whose latest result is `r`.
    pub fn count(&self, r: FloorResult) -> usize {
        self.units.iter().filter(|u| u.latest == r).count()
    }

    /// Distinct units (serials) tested.
    pub fn units(&self) -> usize {
        self.units.len()
    }

    /// Tests run, re-tests included.
    pub fn tests(&self) -> usize {
        self.units.iter().map(|u| u.tests).sum()
    }

    /// Units tested more than once.
    pub fn retested(&self) -> usize {
        self.units.iter().filter(|u| u.tests > 1).count()
    }

    /// Accepted / judged units at their latest result (the final yield), or `None` before any
    /// unit was judged.
    pub fn yield_fraction(&self) -> Option<f64> {
        accepted_fraction(self.units.iter().map(|u| u.latest))
    }

    /// Accepted / judged units at their first result, or `None` before any unit was judged.
    pub fn first_pass_yield(&self) -> Option<f64> {
        accepted_fraction(self.units.iter().map(|u| u.first))
    }

    /// Cpk per metric once at least [`CPK_MIN_UNITS`] units have a judged latest value (one
    /// value per unit; the limits are the latest given).
    pub fn cpks(&self) -> Vec<(String, Cpk)> {
        // Per metric, in the order first given: its latest limits and one value per unit.
        let mut metrics: Vec<(&str, f64, f64, Vec<f64>)> = Vec::new();
        for u in self.units.iter().filter(|u| u.latest.judged()) {
            for (name, v, lo, hi) in &u.values {
                match metrics.iter_mut().find(|m| m.0 == name) {
                    Some(m) => {
                        m.1 = *lo;
                        m.2 = *hi;
                        m.3.push(*v);
                    }
                    None => metrics.push((name, *lo, *hi, vec![*v])),
                }
            }
        }
        metrics
            .into_iter()
            .filter(|m| m.3.len() >= CPK_MIN_UNITS)
            .filter_map(|(name, lo, hi, v)| capability::cpk(&v, lo, hi).map(|c| (name.into(), c)))
            .collect()
    }

    /// One line for the screen.
    pub fn line(&self) -> String {
        let retests = match self.retested() {
            0 => String::new(),
            n => format!(
                " ({} tests, {n} unit(s) tested again: latest result)",
                self.tests()
            ),
        };
        let mut s = format!(
            "tally: {} unit(s){retests}: {} passed, {} marginal, {} failed, {} incomplete, {} error",
            self.units(),
            self.count(FloorResult::Pass),
            self.count(FloorResult::Marginal),
            self.count(FloorResult::Fail),
            self.count(FloorResult::Incomplete),
            self.count(FloorResult::Error)
        );
        match self.yield_fraction() {
            Some(y) => s.push_str(&format!("; yield {:.1} %", 100.0 * y)),
            None => s.push_str("; yield -"),
        }
        if self.retested() > 0 {
            if let Some(y) = self.first_pass_yield() {
                s.push_str(&format!("; first-pass yield {:.1} %", 100.0 * y));
            }
        }
        for (name, c) in self.cpks() {
            s.push_str(&format!(
                "; Cpk {name} {:.2} (95 % {:.2} .. {:.2}, n={})",
                c.cpk, c.lower_95, c.upper_95, c.n
            ));
        }
        s
    }
}

/// Accepted ([`FloorResult::accepted`]) over judged results, or `None` when none is judged.
fn accepted_fraction(results: impl Iterator<Item = FloorResult>) -> Option<f64> {
    let (mut judged, mut ok) = (0usize, 0usize);
    for r in results.filter(|r| r.judged()) {
        judged += 1;
        ok += usize::from(r.accepted());
    }
    (judged > 0).then(|| ok as f64 / judged as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn yield_counts_judged_units_only() {
        let mut t = Tally::new();
        assert_eq!(t.yield_fraction(), None);
        t.add("U1", FloorResult::Pass, &[]);
        t.add("U2", FloorResult::Marginal, &[]);
        t.add("U3", FloorResult::Fail, &[]);
        t.add("U4", FloorResult::Incomplete, &[]);
        t.add("U5", FloorResult::Error, &[]);
        assert_eq!(t.units(), 5);
        // 2 accepted of 3 judged.
        assert!((t.yield_fraction().unwrap() - 2.0 / 3.0).abs() < 1e-12);
        assert!(t.line().contains("yield 66.7 %"), "{}", t.line());
        assert!(!t.line().contains("first-pass"), "{}", t.line());
    }

    #[test]
    fn a_unit_tested_again_counts_once_at_its_latest_result() {
        // Final yield counts each unit at its latest result, first-pass yield at its first
        // (common practice in production test).
        let mut t = Tally::new();
        t.add("U1", FloorResult::Pass, &[]);
        t.add("U2", FloorResult::Fail, &[]);
        t.add("U3", FloorResult::Pass, &[]);
        t.add("U2", FloorResult::Pass, &[]);
        assert_eq!(t.units(), 3);
        assert_eq!(t.tests(), 4);
        assert_eq!(t.retested(), 1);
        assert_eq!(t.count(FloorResult::Pass), 3);
        assert_eq!(t.count(FloorResult::Fail), 0);
        assert!((t.yield_fraction().unwrap() - 1.0).abs() < 1e-12);
        assert!((t.first_pass_yield().unwrap() - 2.0 / 3.0).abs() < 1e-12);
        let line = t.line();
        assert!(
            line.starts_with("tally: 3 unit(s) (4 tests, 1 unit(s) tested again: latest result): 3 passed, 0 marginal, 0 failed"),
            "{line}"
        );
        assert!(
            line.contains("yield 100.0 %; first-pass yield 66.7 %"),
            "{line}"
        );
        // A re-test that did not finish leaves the unit unjudged, not passed.
        t.add("U3", FloorResult::Incomplete, &[]);
        assert_eq!(t.count(FloorResult::Pass), 2);
        assert_eq!(t.count(FloorResult::Incomplete), 1);
        assert!((t.yield_fraction().unwrap() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn cpk_appears_once_enough_units_exist() {
        let mut t = Tally::new();
        for k in 0..CPK_MIN_UNITS {
            assert!(t.cpks().is_empty());
            let v = 1.6 + 0.01 * (k % 3) as f64;
            t.add(
                &format!("U{k}"),
                FloorResult::Pass,
                &[("limit_current".into(), v, 1.2, 2.2)],
            );
            // An incomplete run's values are not counted.
            t.add(
                &format!("X{k}"),
                FloorResult::Incomplete,
                &[("limit_current".into(), 9.0, 1.2, 2.2)],
            );
        }
        let c = t.cpks();
        assert_eq!(c.len(), 1);
        assert_eq!(c[0].1.n, CPK_MIN_UNITS);
        assert!(c[0].1.mean < 1.7);
        assert!(t.line().contains("Cpk limit_current"));
        // Testing the same units again replaces their values: still one value per unit.
        for k in 0..CPK_MIN_UNITS {
            t.add(
                &format!("U{k}"),
                FloorResult::Pass,
                &[(
                    "limit_current".into(),
                    1.8 + 0.01 * (k % 3) as f64,
                    1.2,
                    2.2,
                )],
            );
        }
        let c = t.cpks();
        assert_eq!(c.len(), 1);
        assert_eq!(c[0].1.n, CPK_MIN_UNITS);
        assert!(c[0].1.mean > 1.79, "{:?}", c[0].1);
    }
}
