//! Drift: a key metric's change over one unit's dated records (a step from the previous
//! record, or a slow drift since the first), and, across units of one design, outliers by
//! leave-one-out z-score and process capability (Cpk). Pure: values in, flags out.

use super::{Limits, Verdict};
use crate::analysis::Metrics;
use serde::{Deserialize, Serialize};

/// A key metric tracked over dates and across units.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum KeyMetric {
    OutputVoltage,
    LoadRegulation,
    OutputResistance,
    LimitCurrent,
    ShortCircuitCurrent,
    ShortCircuitDrift,
}

/// How large a change between records is flagged.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Threshold {
    /// Fraction of the earlier value.
    Relative(f64),
    /// Absolute change in the metric's unit.
    Absolute(f64),
}

impl KeyMetric {
    pub const ALL: [KeyMetric; 6] = [
        KeyMetric::OutputVoltage,
        KeyMetric::LoadRegulation,
        KeyMetric::OutputResistance,
        KeyMetric::LimitCurrent,
        KeyMetric::ShortCircuitCurrent,
        KeyMetric::ShortCircuitDrift,
    ];
    pub fn as_str(self) -> &'static str {
        match self {
            KeyMetric::OutputVoltage => "output_voltage",
            KeyMetric::LoadRegulation => "load_regulation",
            KeyMetric::OutputResistance => "output_resistance",
            KeyMetric::LimitCurrent => "limit_current",
            KeyMetric::ShortCircuitCurrent => "short_circuit_current",
            KeyMetric::ShortCircuitDrift => "short_circuit_drift",
        }
    }
    pub fn unit(self) -> &'static str {
        match self {
            KeyMetric::OutputVoltage => "V",
            KeyMetric::LoadRegulation | KeyMetric::ShortCircuitDrift => "%",
            KeyMetric::OutputResistance => "ohm",
            KeyMetric::LimitCurrent | KeyMetric::ShortCircuitCurrent => "A",
        }
    }
    /// Default change flagged between one record and the next (project choice: 1 % on the
    /// output voltage, 5 % on currents, 0.5 percentage points on regulation and drift,
    /// 50 % on the small and noisy output resistance).
    pub fn default_threshold(self) -> Threshold {
        match self {
            KeyMetric::OutputVoltage => Threshold::Relative(0.01),
            KeyMetric::LoadRegulation => Threshold::Absolute(0.5),
            KeyMetric::OutputResistance => Threshold::Relative(0.5),
            KeyMetric::LimitCurrent | KeyMetric::ShortCircuitCurrent => Threshold::Relative(0.05),
            KeyMetric::ShortCircuitDrift => Threshold::Absolute(5.0),
        }
    }
    /// The smallest difference worth a flag when nothing better is known (project choice,
    /// about ten counts of a 4.5-digit bench meter on a 20 V or 2 A range, or the scale of a
    /// metric's rounding): 1 mV, 0.01 percentage point of regulation, 1 mohm, 1 mA, 0.5
    /// percentage point of short-circuit drift. Below it a change has no practical meaning
    /// however many sigmas it is.
    pub fn default_floor(self) -> f64 {
        match self {
            KeyMetric::OutputVoltage => 1e-3,
            KeyMetric::LoadRegulation => 0.01,
            KeyMetric::OutputResistance => 1e-3,
            KeyMetric::LimitCurrent | KeyMetric::ShortCircuitCurrent => 1e-3,
            KeyMetric::ShortCircuitDrift => 0.5,
        }
    }

    /// The practical-significance floor of a metric with spec limits: 5 % of the spec's width
    /// (the design's tolerance band), and never below [`KeyMetric::default_floor`].
    pub fn floor_for(self, spec: Option<Limits>) -> f64 {
        let base = self.default_floor();
        match spec {
            Some(l) if (l.max - l.min).is_finite() => base.max(0.05 * (l.max - l.min).abs()),
            _ => base,
        }
    }

    /// Parse a metric name as written in output (`output_resistance`).
    pub fn parse(s: &str) -> Option<KeyMetric> {
        KeyMetric::ALL.into_iter().find(|k| k.as_str() == s)
    }

    /// The metric's value in a record's metrics.
    pub fn value(self, m: &Metrics) -> Option<f64> {
        match self {
            KeyMetric::OutputVoltage => m.no_load.map(|p| p.voltage),
            KeyMetric::LoadRegulation => m.load_regulation.map(|r| r.percent),
            KeyMetric::OutputResistance => m.output_resistance.map(|r| r.ohms),
            KeyMetric::LimitCurrent => m.limit_current(),
            KeyMetric::ShortCircuitCurrent => m.short_circuit.map(|s| s.start_current),
            KeyMetric::ShortCircuitDrift => m.short_circuit.map(|s| s.drift_percent),
        }
    }
}

/// Key metric values of one record, in [`KeyMetric::ALL`] order (serialized as a map).
#[derive(Debug, Clone, PartialEq)]
pub struct KeyValues(pub Vec<(KeyMetric, Option<f64>)>);

impl Serialize for KeyValues {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut m = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in &self.0 {
            m.serialize_entry(k.as_str(), v)?;
        }
        m.end()
    }
}

impl KeyValues {
    pub fn from_metrics(m: &Metrics) -> KeyValues {
        KeyValues(KeyMetric::ALL.iter().map(|k| (*k, k.value(m))).collect())
    }
    pub fn get(&self, k: KeyMetric) -> Option<f64> {
        self.0.iter().find(|(m, _)| *m == k).and_then(|(_, v)| *v)
    }
}

/// One dated record of a unit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HistoryEntry {
    /// Record folder name (dated).
    pub record: String,
    /// Run start, RFC 3339 UTC.
    pub started_utc: String,
    pub outcome: String,
    pub verdict: Option<Verdict>,
    pub values: KeyValues,
}

/// What a drift flag compares with.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DriftBasis {
    /// A step from the previous record.
    PreviousRecord,
    /// A slow change: the sum of small steps since the unit's first record.
    FirstRecord,
}

/// A flagged change.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DriftFlag {
    pub record: String,
    pub metric: KeyMetric,
    pub basis: DriftBasis,
    /// The value compared with (previous or first record).
    pub previous: f64,
    pub value: f64,
    /// value - previous, in the metric's unit.
    pub change: f64,
    pub message: String,
}

fn beyond(th: Threshold, base: f64, change: f64, floor: f64) -> bool {
    change.abs() > floor
        && match th {
            Threshold::Relative(f) => base != 0.0 && (change / base).abs() > f,
            Threshold::Absolute(a) => change.abs() > a,
        }
}

fn drift_flag(e: &HistoryEntry, k: KeyMetric, basis: DriftBasis, base: f64, v: f64) -> DriftFlag {
    let change = v - base;
    let rel = if base != 0.0 {
        format!(" ({:+.1} %)", change / base * 100.0)
    } else {
        String::new()
    };
    let since = match basis {
        DriftBasis::PreviousRecord => "since the previous record",
        DriftBasis::FirstRecord => "since the unit's first record (slow drift)",
    };
    DriftFlag {
        record: e.record.clone(),
        metric: k,
        basis,
        previous: base,
        value: v,
        change,
        message: format!(
            "{} changed from {} to {}{rel} {since}",
            k.as_str(),
            crate::quantity::eng(base, k.unit()),
            crate::quantity::eng(v, k.unit())
        ),
    }
}

/// Flags where a key metric changed beyond its threshold (`thresholds` overrides the
/// defaults by metric), entries sorted by date: a step from the previous record, or a slow
/// drift whose sum since the unit's first record crosses the threshold (flagged once, at the
/// crossing, unless a step flag already marks that record).
pub fn unit_drift(
    entries: &[HistoryEntry],
    thresholds: &[(KeyMetric, Threshold)],
) -> Vec<DriftFlag> {
    let mut flags = Vec::new();
    for k in KeyMetric::ALL {
        let th = thresholds
            .iter()
            .find(|(m, _)| *m == k)
            .map(|(_, t)| *t)
            .unwrap_or(k.default_threshold());
        let floor = k.default_floor();
        let mut prev: Option<f64> = None;
        let mut first: Option<f64> = None;
        let mut crossed = false;
        for e in entries {
            let Some(v) = e.values.get(k) else { continue };
            let mut stepped = false;
            if let Some(p) = prev {
                if beyond(th, p, v - p, floor) {
                    flags.push(drift_flag(e, k, DriftBasis::PreviousRecord, p, v));
                    stepped = true;
                }
            }
            if let Some(f) = first {
                let out = beyond(th, f, v - f, floor);
                if out && !crossed && !stepped {
                    flags.push(drift_flag(e, k, DriftBasis::FirstRecord, f, v));
                }
                crossed = out;
            }
            first.get_or_insert(v);
            prev = Some(v);
        }
    }
    flags
}

/// Default |z| beyond which a unit is an outlier among its design's units.
pub const DEFAULT_OUTLIER_Z: f64 = 3.0;
/// Fewest units for outlier flags (leave-one-out z needs a spread of the others).
pub const MIN_UNITS_FOR_OUTLIERS: usize = 5;
/// Fewest units before a Cpk is reported ([`crate::capability::MIN_N_FOR_CPK`]).
pub const MIN_UNITS_FOR_CPK: usize = crate::capability::MIN_N_FOR_CPK;

/// One unit flagged as an outlier for one metric.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Outlier {
    pub unit: String,
    pub metric: KeyMetric,
    pub value: f64,
    /// Leave-one-out z-score: (x - mean of the others) / sd of the others.
    pub z: f64,
}

/// Population statistics of one metric.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MetricStats {
    pub metric: KeyMetric,
    pub n: usize,
    pub mean: f64,
    /// Sample standard deviation (n - 1).
    pub sigma: f64,
    pub spec: Option<Limits>,
    pub cpk: Option<f64>,
}

/// Outliers and capability across units of one design.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Population {
    pub stats: Vec<MetricStats>,
    pub outliers: Vec<Outlier>,
}

/// Mean and sample standard deviation (n - 1).
pub fn mean_sd(xs: &[f64]) -> Option<(f64, f64)> {
    if xs.len() < 2 {
        return None;
    }
    let n = xs.len() as f64;
    let mean = xs.iter().sum::<f64>() / n;
    let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
    Some((mean, var.sqrt()))
}

/// Process capability: Cpk = min(USL - mean, mean - LSL) / (3 sigma).
pub fn cpk(mean: f64, sigma: f64, spec: Limits) -> Option<f64> {
    (sigma > 0.0).then(|| (spec.max - mean).min(mean - spec.min) / (3.0 * sigma))
}

/// Outliers (leave-one-out |z| > `z_limit`) and Cpk per metric across units. `specs` gives
/// spec limits per metric (usually the design's worst-case band). An outlier must also lie
/// farther than its practical-significance floor ([`KeyMetric::floor_for`]) from the others'
/// mean.
pub fn population(
    units: &[(String, KeyValues)],
    specs: &[(KeyMetric, Limits)],
    z_limit: f64,
) -> Population {
    population_with_floors(units, specs, z_limit, &[])
}

/// [`population`] with floors set by metric (`floors` overrides the defaults).
pub fn population_with_floors(
    units: &[(String, KeyValues)],
    specs: &[(KeyMetric, Limits)],
    z_limit: f64,
    floors: &[(KeyMetric, f64)],
) -> Population {
    let mut stats = Vec::new();
    let mut outliers = Vec::new();
    for k in KeyMetric::ALL {
        let vals: Vec<(&str, f64)> = units
            .iter()
            .filter_map(|(u, kv)| kv.get(k).map(|v| (u.as_str(), v)))
            .filter(|(_, v)| v.is_finite())
            .collect();
        let xs: Vec<f64> = vals.iter().map(|v| v.1).collect();
        let Some((mean, sigma)) = mean_sd(&xs) else {
            continue;
        };
        let spec = specs.iter().find(|(m, _)| *m == k).map(|(_, l)| *l);
        let floor = floors
            .iter()
            .find(|(m, _)| *m == k)
            .map(|(_, f)| *f)
            .unwrap_or_else(|| k.floor_for(spec));
        let cpk = match spec {
            Some(s) if xs.len() >= MIN_UNITS_FOR_CPK => cpk(mean, sigma, s),
            _ => None,
        };
        stats.push(MetricStats {
            metric: k,
            n: xs.len(),
            mean,
            sigma,
            spec,
            cpk,
        });
        if xs.len() >= MIN_UNITS_FOR_OUTLIERS && xs.len() > 2 {
            // Each unit against the others: their mean and sample deviation follow from the
            // whole set's (leave-one-out update of the mean and the sum of squares), so the
            // population costs one pass, not one pass per unit.
            let n = xs.len() as f64;
            let ss: f64 = xs.iter().map(|v| (v - mean).powi(2)).sum();
            for (unit, x) in vals.iter() {
                let d = x - mean;
                let m = mean - d / (n - 1.0);
                let s = ((ss - d * d * n / (n - 1.0)).max(0.0) / (n - 2.0)).sqrt();
                if s > 0.0 {
                    let z = (x - m) / s;
                    if z.abs() > z_limit && (x - m).abs() > floor {
                        outliers.push(Outlier {
                            unit: unit.to_string(),
                            metric: k,
                            value: *x,
                            z,
                        });
                    }
                }
            }
        }
    }
    Population { stats, outliers }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cpk_textbook_example() {
        // Cpk = min(USL - mean, mean - LSL) / (3 sigma) (common definition).
        // Data 9.9, 10.0, 10.1: mean 10.0, sample sigma 0.1; LSL 9.5, USL 10.6:
        // min(0.6, 0.5) / 0.3 = 1.667.
        let (m, s) = mean_sd(&[9.9, 10.0, 10.1]).unwrap();
        assert!((m - 10.0).abs() < 1e-12 && (s - 0.1).abs() < 1e-12);
        let c = cpk(
            m,
            s,
            Limits {
                min: 9.5,
                max: 10.6,
            },
        )
        .unwrap();
        assert!((c - 5.0 / 3.0).abs() < 1e-9, "{c}");
    }

    #[test]
    fn leave_one_out_z_flags_a_single_outlier() {
        let mk = |v: f64| KeyValues(vec![(KeyMetric::LimitCurrent, Some(v))]);
        let mut units: Vec<(String, KeyValues)> = (0..10)
            .map(|k| (format!("U{k}"), mk(1.0 + 0.01 * (k as f64 - 4.5))))
            .collect();
        let quiet = population(&units, &[], DEFAULT_OUTLIER_Z);
        assert!(quiet.outliers.is_empty());
        units.push(("BAD".into(), mk(0.7)));
        let p = population(&units, &[], DEFAULT_OUTLIER_Z);
        assert_eq!(p.outliers.len(), 1);
        assert_eq!(p.outliers[0].unit, "BAD");
    }

    #[test]
    fn a_difference_without_practical_meaning_is_no_outlier() {
        // Output resistances within a few micro-ohm of each other: one unit 40 uohm off is
        // many sigmas out but far below the 1 mohm floor; 5 mohm off is flagged.
        let mk = |v: f64| KeyValues(vec![(KeyMetric::OutputResistance, Some(v))]);
        let mut units: Vec<(String, KeyValues)> = (0..10)
            .map(|k| (format!("U{k}"), mk(0.010 + 2e-6 * (k as f64 - 4.5))))
            .collect();
        units.push(("TINY".into(), mk(0.010 + 40e-6)));
        assert!(population(&units, &[], DEFAULT_OUTLIER_Z)
            .outliers
            .is_empty());
        let p = population_with_floors(
            &units,
            &[],
            DEFAULT_OUTLIER_Z,
            &[(KeyMetric::OutputResistance, 1e-6)],
        );
        assert_eq!(p.outliers.len(), 1, "a floor set lower flags it: {p:?}");
        units.push(("BIG".into(), mk(0.015)));
        let p = population(&units, &[], DEFAULT_OUTLIER_Z);
        assert!(p.outliers.iter().any(|o| o.unit == "BIG"), "{p:?}");
        assert!(!p.outliers.iter().any(|o| o.unit == "TINY"), "{p:?}");
        // The floor from a spec: 5 % of the band's width.
        let spec = Limits { min: 1.0, max: 2.0 };
        assert!((KeyMetric::LimitCurrent.floor_for(Some(spec)) - 0.05).abs() < 1e-12);
    }

    #[test]
    fn slow_drift_is_flagged_once_at_the_crossing() {
        // Limit current falling 2 % per record: each step is within the 5 % default, the sum
        // since the first record passes 5 % at the third step (1 - 0.98^3 = 5.9 %).
        let entries: Vec<HistoryEntry> = (0..6)
            .map(|k| HistoryEntry {
                record: format!("r{k}"),
                started_utc: format!("2026-11-0{}T09:00:00.000Z", k + 1),
                outcome: "completed".into(),
                verdict: None,
                values: KeyValues(vec![(KeyMetric::LimitCurrent, Some(1.0 * 0.98f64.powi(k)))]),
            })
            .collect();
        let flags = unit_drift(&entries, &[]);
        assert_eq!(flags.len(), 1, "{flags:?}");
        assert_eq!(flags[0].record, "r3");
        assert_eq!(flags[0].basis, DriftBasis::FirstRecord);
    }
}
