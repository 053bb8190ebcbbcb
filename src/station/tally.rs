//! A batch's running tally: how many units passed, were marginal, failed, did not finish or
//! hit a station error; the yield; and, once enough judged units exist, Cpk of each key
//! metric against the design's limits. Yield counts judged units only: an incomplete or
//! error run says nothing about the unit. Pure.

use super::FloorResult;
use crate::capability::{self, Cpk};
use std::collections::BTreeMap;

/// Units a Cpk is shown from ([`crate::capability::MIN_N_FOR_CPK`]).
pub const CPK_MIN_UNITS: usize = crate::capability::MIN_N_FOR_CPK;

/// A batch's tally so far.
#[derive(Debug, Clone, Default)]
pub struct Tally {
    counts: BTreeMap<FloorResult, usize>,
    /// Per metric: its limits and the values of judged units in test order.
    metrics: Vec<(String, f64, f64, Vec<f64>)>,
}

impl Tally {
    pub fn new() -> Tally {
        Tally::default()
    }

    /// Count one unit's result and its metric values `(name, value, lower, upper limit)`.
    pub fn add(&mut self, result: FloorResult, values: &[(String, f64, f64, f64)]) {
        *self.counts.entry(result).or_default() += 1;
        if !result.judged() {
            return;
        }
        for (name, v, lo, hi) in values {
            match self.metrics.iter_mut().find(|m| &m.0 == name) {
                Some(m) => {
                    m.1 = *lo;
                    m.2 = *hi;
                    m.3.push(*v);
                }
                None => self.metrics.push((name.clone(), *lo, *hi, vec![*v])),
            }
        }
    }

    pub fn count(&self, r: FloorResult) -> usize {
        self.counts.get(&r).copied().unwrap_or(0)
    }

    pub fn units(&self) -> usize {
        self.counts.values().sum()
    }

    /// Accepted / judged units, or `None` before any unit was judged.
    pub fn yield_fraction(&self) -> Option<f64> {
        let judged: usize = FloorResult::ALL
            .iter()
            .filter(|r| r.judged())
            .map(|r| self.count(*r))
            .sum();
        let ok = self.count(FloorResult::Pass) + self.count(FloorResult::Marginal);
        (judged > 0).then(|| ok as f64 / judged as f64)
    }

    /// Cpk per metric once at least [`CPK_MIN_UNITS`] judged units have a value.
    pub fn cpks(&self) -> Vec<(String, Cpk)> {
        self.metrics
            .iter()
            .filter(|m| m.3.len() >= CPK_MIN_UNITS)
            .filter_map(|(name, lo, hi, v)| capability::cpk(v, *lo, *hi).map(|c| (name.clone(), c)))
            .collect()
    }

    /// One line for the screen.
    pub fn line(&self) -> String {
        let mut s = format!(
            "tally: {} unit(s): {} passed, {} marginal, {} failed, {} incomplete, {} error",
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
        for (name, c) in self.cpks() {
            s.push_str(&format!(
                "; Cpk {name} {:.2} (95 % {:.2} .. {:.2}, n={})",
                c.cpk, c.lower_95, c.upper_95, c.n
            ));
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn yield_counts_judged_units_only() {
        let mut t = Tally::new();
        assert_eq!(t.yield_fraction(), None);
        t.add(FloorResult::Pass, &[]);
        t.add(FloorResult::Marginal, &[]);
        t.add(FloorResult::Fail, &[]);
        t.add(FloorResult::Incomplete, &[]);
        t.add(FloorResult::Error, &[]);
        assert_eq!(t.units(), 5);
        // 2 accepted of 3 judged.
        assert!((t.yield_fraction().unwrap() - 2.0 / 3.0).abs() < 1e-12);
        assert!(t.line().contains("yield 66.7 %"), "{}", t.line());
    }

    #[test]
    fn cpk_appears_once_enough_units_exist() {
        let mut t = Tally::new();
        for k in 0..CPK_MIN_UNITS {
            assert!(t.cpks().is_empty());
            let v = 1.6 + 0.01 * (k % 3) as f64;
            t.add(FloorResult::Pass, &[("limit_current".into(), v, 1.2, 2.2)]);
            // An incomplete run's values are not counted.
            t.add(
                FloorResult::Incomplete,
                &[("limit_current".into(), 9.0, 1.2, 2.2)],
            );
        }
        let c = t.cpks();
        assert_eq!(c.len(), 1);
        assert_eq!(c[0].1.n, CPK_MIN_UNITS);
        assert!(c[0].1.mean < 1.7);
        assert!(t.line().contains("Cpk limit_current"));
    }
}
