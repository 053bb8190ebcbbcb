//! Analysis, comparison and drift on SYNTHETIC units (see `support::report`): known answers
//! from the unit model, 20 seeded good units that must stay quiet, and a unit with a wrong
//! sense resistor that must be flagged.

use crate::support::report as sup;
use regulus::analysis::{analyse, AnalysisOptions, Metrics};
use regulus::compare::{
    self, compare, population, unit_drift, HistoryEntry, KeyMetric, KeyValues, Verdict,
};
use regulus::rng::Rng;

fn good_unit(seed: u64) -> (sup::Unit, Metrics) {
    let mut rng = Rng::new(seed);
    let u = sup::Unit::draw(&mut rng);
    let rows = sup::run_rows(&u, &mut rng, sup::day(0), 40, 40, 30.0, 0.5);
    (u, analyse(&rows, &AnalysisOptions::default()))
}

#[test]
fn analysis_recovers_the_model_parameters() {
    for seed in 1..=20 {
        let (u, m) = good_unit(seed);
        // Two-segment knee: the regulation line meets the steep limit line at the clamp's
        // onset, I_lim = V_BE / R_sense of the drawn unit, within 0.5 %.
        let k = m.knee.unwrap().two_segment.unwrap();
        assert!(
            (k.current / u.i_lim() - 1.0).abs() < 0.005,
            "seed {seed}: knee {} vs {}",
            k.current,
            u.i_lim()
        );
        // Output resistance: the model's r_out within 4 standard uncertainties.
        let r = m.output_resistance.unwrap();
        let un = r.std_uncertainty.unwrap();
        assert!(
            (r.ohms - u.r_out).abs() < 4.0 * un,
            "seed {seed}: {} +- {un} vs {}",
            r.ohms,
            u.r_out
        );
        // Thermal time constant of the short-circuit current within 5 %.
        let tau = m.short_circuit.unwrap().time_constant.unwrap().tau_s;
        assert!(
            (tau / u.tau - 1.0).abs() < 0.05,
            "seed {seed}: tau {tau} vs {}",
            u.tau
        );
    }
}

#[test]
fn good_units_pass_and_population_is_quiet() {
    let exp = sup::expectation();
    let mut units = Vec::new();
    for seed in 1..=20 {
        let (_, m) = good_unit(seed);
        let c = compare(&m, &exp);
        assert_ne!(c.verdict, Verdict::Fail, "seed {seed}: {:?}", c.checks);
        units.push((format!("SYN-{seed:03}"), KeyValues::from_metrics(&m)));
    }
    let p = population(&units, &[], compare::DEFAULT_OUTLIER_Z);
    assert!(p.outliers.is_empty(), "false outliers: {:?}", p.outliers);
}

#[test]
fn wrong_sense_resistor_is_flagged_across_units_and_named() {
    let exp = sup::expectation();
    let mut units: Vec<(String, KeyValues)> = (1..=20)
        .map(|seed| {
            let (_, m) = good_unit(seed);
            (format!("SYN-{seed:03}"), KeyValues::from_metrics(&m))
        })
        .collect();
    let mut rng = Rng::new(99);
    let bad = sup::Unit::draw(&mut rng).with_sense(0.68);
    let rows = sup::run_rows(&bad, &mut rng, sup::day(0), 40, 40, 30.0, 0.5);
    let m = analyse(&rows, &AnalysisOptions::default());
    let c = compare(&m, &exp);
    assert_eq!(c.verdict, Verdict::Fail);
    assert!(
        c.likely_causes
            .iter()
            .any(|s| s.contains("0.68 ohm sense resistor fitted instead of 0.47 ohm")),
        "{:?}",
        c.likely_causes
    );
    units.push(("SYN-BAD".into(), KeyValues::from_metrics(&m)));
    let p = population(&units, &[], compare::DEFAULT_OUTLIER_Z);
    assert!(!p.outliers.is_empty());
    assert!(
        p.outliers.iter().all(|o| o.unit == "SYN-BAD"),
        "{:?}",
        p.outliers
    );
    assert!(p
        .outliers
        .iter()
        .any(|o| o.metric == KeyMetric::LimitCurrent && o.z < -3.0));
}

#[test]
fn unit_history_flags_the_record_after_a_part_swap_only() {
    // One unit tested on six dates; before the sixth test its sense resistor was replaced
    // with a 0.68 ohm part.
    let mut rng = Rng::new(5);
    let unit = sup::Unit::draw(&mut rng);
    let mut entries = Vec::new();
    for d in 0..6 {
        let u = if d == 5 { unit.with_sense(0.68) } else { unit };
        let rows = sup::run_rows(&u, &mut rng, sup::day(d), 40, 40, 30.0, 0.5);
        let m = analyse(&rows, &AnalysisOptions::default());
        entries.push(HistoryEntry {
            record: format!("day{d}"),
            started_utc: sup::day(d).to_rfc3339(),
            outcome: "completed".into(),
            verdict: None,
            values: KeyValues::from_metrics(&m),
        });
    }
    let quiet = unit_drift(&entries[..5], &[]);
    assert!(quiet.is_empty(), "false drift flags: {quiet:?}");
    let flags = unit_drift(&entries, &[]);
    assert!(!flags.is_empty());
    assert!(flags.iter().all(|f| f.record == "day5"), "{flags:?}");
    assert!(flags.iter().any(|f| f.metric == KeyMetric::LimitCurrent));
}

#[test]
fn cpk_across_good_units_uses_the_worst_case_band_as_spec() {
    let exp = sup::expectation();
    let units: Vec<(String, KeyValues)> = (1..=20)
        .map(|seed| {
            let (_, m) = good_unit(seed);
            (format!("SYN-{seed:03}"), KeyValues::from_metrics(&m))
        })
        .collect();
    let spec = exp.limit_current.worst_case;
    let p = population(&units, &[(KeyMetric::LimitCurrent, spec)], 3.0);
    let st = p
        .stats
        .iter()
        .find(|s| s.metric == KeyMetric::LimitCurrent)
        .unwrap();
    // Textbook: Cpk = min(USL - mean, mean - LSL) / (3 s), s the sample standard deviation;
    // recomputed here from the raw values.
    let xs: Vec<f64> = units
        .iter()
        .map(|(_, kv)| kv.get(KeyMetric::LimitCurrent).unwrap())
        .collect();
    let n = xs.len() as f64;
    let mean = xs.iter().sum::<f64>() / n;
    let s = (xs.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0)).sqrt();
    let expected = (spec.max - mean).min(mean - spec.min) / (3.0 * s);
    assert_eq!(st.n, 20);
    assert!((st.cpk.unwrap() - expected).abs() < 1e-9);
    // Tolerances read as +-3 sigma and a worst case wider than the spread: Cpk above 1.
    assert!(st.cpk.unwrap() > 1.0, "Cpk {}", st.cpk.unwrap());
    // Too few units: no Cpk.
    let few = population(&units[..5], &[(KeyMetric::LimitCurrent, spec)], 3.0);
    assert!(few.stats.iter().all(|s| s.cpk.is_none()));
}
