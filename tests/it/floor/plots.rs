//! Plot fixes: the history axis with one or two records, the short-circuit axis from zero,
//! and the V-I axis fitted to the design.

use regulus::compare::{HistoryEntry, KeyMetric, KeyValues, Verdict};
use regulus::report::plots::{Chart, SIZE};

fn entry(t: &str, limit: f64) -> HistoryEntry {
    HistoryEntry {
        record: format!("{t}_standard"),
        started_utc: t.into(),
        outcome: "completed".into(),
        verdict: Some(Verdict::Pass),
        values: KeyValues(vec![(KeyMetric::LimitCurrent, Some(limit))]),
    }
}

/// The numbers of the axis tick labels in an SVG (text elements holding only a number).
fn tick_numbers(svg: &str) -> Vec<f64> {
    svg.split("<text")
        .skip(1)
        .filter_map(|t| t.split('>').nth(1)?.split('<').next()?.trim().parse().ok())
        .collect()
}

#[test]
fn history_axis_reads_sensibly_with_one_or_two_records() {
    let one = [entry("2026-11-02T09:00:00.000Z", 1.7)];
    let svg = Chart::History {
        unit: "U-1",
        entries: &one,
    }
    .to_svg(SIZE)
    .unwrap();
    assert!(svg.contains("Minutes since the first record"), "{svg}");
    assert!(!svg.contains(">-0.0<") && !svg.contains(">0.0000"), "{svg}");
    let ticks = tick_numbers(&svg);
    assert!(
        ticks.iter().any(|t| *t <= -0.5) && ticks.iter().any(|t| *t >= 0.5),
        "{ticks:?}"
    );

    // Two records 20 s apart: minutes, not 0.00005 .. 0.0003 days.
    let two = [
        entry("2026-11-02T09:00:00.000Z", 1.7),
        entry("2026-11-02T09:00:20.000Z", 1.71),
    ];
    let svg = Chart::History {
        unit: "U-1",
        entries: &two,
    }
    .to_svg(SIZE)
    .unwrap();
    assert!(svg.contains("Minutes since the first record"), "{svg}");
    assert!(!svg.contains("0.0000"), "{svg}");
    // Three days apart: days.
    let far = [
        entry("2026-11-02T09:00:00.000Z", 1.7),
        entry("2026-11-05T09:00:00.000Z", 1.71),
    ];
    let svg = Chart::History {
        unit: "U-1",
        entries: &far,
    }
    .to_svg(SIZE)
    .unwrap();
    assert!(svg.contains("Days since the first record"), "{svg}");
}

#[test]
fn short_circuit_axis_starts_at_zero() {
    // A 4 % drift over the dwell must not fill the plot: the axis starts at 0 A.
    let series: Vec<(f64, f64)> = (0..30)
        .map(|k| (k as f64 * 0.1, 1.80 + 0.0024 * k as f64))
        .collect();
    let svg = Chart::ShortCircuit {
        series: &series,
        fit: None,
        band: Some((1.15, 2.21)),
    }
    .to_svg(SIZE)
    .unwrap();
    let ticks = tick_numbers(&svg);
    assert!(ticks.contains(&0.0), "{ticks:?}");
    assert!(ticks.iter().all(|t| *t >= 0.0), "{ticks:?}");
    // The design's worst-case band is drawn and named, and the axis covers its top.
    assert!(svg.contains("design worst-case band"), "{svg}");
    assert!(ticks.iter().any(|t| *t >= 2.2), "{ticks:?}");
}

#[test]
fn the_vi_axis_is_fitted_to_the_design() {
    use crate::support::report as sup;
    let mut rng = regulus::rng::Rng::new(3);
    let unit = sup::Unit::draw(&mut rng);
    let rows = sup::run_rows(&unit, &mut rng, sup::day(0), 30, 30, 3.0, 0.5);
    let exp = sup::expectation();
    let metrics = regulus::analysis::analyse(&rows, &regulus::analysis::AnalysisOptions::default());
    let curve = regulus::analysis::curve_points(&rows);
    let svg = Chart::VoltageCurrent {
        curve: &curve,
        metrics: &metrics,
        expectation: Some(&exp),
        knee_search: &[],
    }
    .to_svg(SIZE)
    .unwrap();
    // The voltage axis ends a little above the design's highest worst-case output, not at
    // one and a half times it.
    let top = exp.vout.worst_case.max;
    let ticks = tick_numbers(&svg);
    let highest = ticks.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    assert!(
        highest >= top * 0.9 && highest <= top * 1.1,
        "ticks {ticks:?}, design top {top}"
    );
    assert!(svg.contains("design Monte Carlo band"), "{svg}");
}

#[test]
fn knee_search_points_are_drawn_apart_from_the_sweep() {
    use regulus::analysis::CurvePoint;
    let curve = [
        CurvePoint {
            current: 0.0,
            voltage: 12.0,
        },
        CurvePoint {
            current: 0.5,
            voltage: 11.99,
        },
        CurvePoint {
            current: 1.4,
            voltage: 11.7,
        },
    ];
    let knee = [curve[2]];
    let metrics = regulus::analysis::analyse(&[], &regulus::analysis::AnalysisOptions::default());
    let draw = |knee: &[CurvePoint]| {
        Chart::VoltageCurrent {
            curve: &curve,
            metrics: &metrics,
            expectation: None,
            knee_search: knee,
        }
        .to_svg(SIZE)
        .unwrap()
    };
    let with = draw(&knee);
    let without = draw(&[]);
    assert!(with.contains("knee search points (crosses)"));
    assert!(!without.contains("knee search points"));
    // The knee point is drawn as a cross, not also as a sweep circle.
    assert_eq!(
        with.matches("<circle").count() + 1,
        without.matches("<circle").count()
    );
}
