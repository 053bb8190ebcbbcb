//! Unit tests of the analysis, each against the formula or source it names.

use super::*;
use crate::measure::{LoadMode, Quantity};
use crate::record::{Cell, Flag, Flags, LoadState, Row, StepKind};

fn row(kind: StepKind, t: f64, v: f64, i: f64) -> Row {
    Row {
        utc: "2026-12-01T10:00:00.000Z".into(),
        elapsed_s: t,
        step: 0,
        step_kind: kind,
        point: 0,
        load_mode: LoadState::On(LoadMode::ConstantCurrent),
        setpoint: Some(i),
        source_volts: Some(18.0),
        samples: 1,
        cells: [
            (
                Quantity::OutputVoltage,
                Some(Cell::Value {
                    mean: v,
                    spread: 0.0,
                }),
            ),
            (
                Quantity::OutputCurrent,
                Some(Cell::Value {
                    mean: i,
                    spread: 0.0,
                }),
            ),
        ]
        .into(),
        flags: Flags::new(),
    }
}

/// Ideal piecewise-linear supply: V = 12 - 0.05 I up to 1.0 A, then a vertical limit line
/// at 1.0 A down to 0 V.
fn ideal_curve() -> Vec<Row> {
    let mut rows = Vec::new();
    for k in 0..=9 {
        let i = k as f64 * 0.1;
        rows.push(row(StepKind::LoadSweep, k as f64, 12.0 - 0.05 * i, i));
    }
    for k in 1..=10 {
        let v = 11.95 - k as f64 * 1.1;
        rows.push(row(StepKind::LimitTrace, 10.0 + k as f64, v, 1.0));
    }
    rows
}

#[test]
fn load_regulation_textbook_worked_example() {
    // Common textbook definition: load regulation = (V_NL - V_FL) / V_FL x 100 %.
    // Worked example: V_NL = 12.00 V, V_FL = 11.76 V -> 0.24 / 11.76 = 2.0408 %.
    let p = load_regulation_percent(12.0, 11.76, 11.76);
    assert!((p - 2.040_816).abs() < 1e-5, "{p}");
}

#[test]
fn ideal_curve_gives_known_answers() {
    let m = analyse(&ideal_curve(), &AnalysisOptions::default());
    let nl = m.no_load.unwrap();
    assert_eq!(nl.current, 0.0);
    assert!((nl.voltage - 12.0).abs() < 1e-12);
    // Output resistance: slope of the regulation line, 0.05 ohm.
    let r = m.output_resistance.unwrap();
    assert!((r.ohms - 0.05).abs() < 1e-9, "{}", r.ohms);
    // Two-segment intersection: V = 12 - 0.05 I meets I = 1.0 at (1.0 A, 11.95 V).
    let k = m.knee.unwrap();
    let ts = k.two_segment.unwrap();
    assert!((ts.current - 1.0).abs() < 1e-9, "{ts:?}");
    assert!((ts.voltage - 11.95).abs() < 1e-9);
    // Fixed-drop: threshold 11.76 V; between (0.9 A, 11.955 V) and (1.0 A, 10.85 V):
    // t = (11.955 - 11.76) / (11.955 - 10.85) -> I = 0.9 + 0.1 t.
    let fd = k.fixed_drop.unwrap();
    let t = (11.955 - 11.76) / (11.955 - 10.85);
    assert!((fd.current - (0.9 + 0.1 * t)).abs() < 1e-9);
    assert!((fd.voltage - 11.76).abs() < 1e-12);
    // Full load: last sweep point in regulation (0.9 A, 11.955 V); textbook regulation.
    let lr = m.load_regulation.unwrap();
    assert_eq!(lr.reference, RegulationReference::FullLoad);
    assert!((lr.percent - (0.045 / 11.955 * 100.0)).abs() < 1e-9);
}

#[test]
fn knee_at_known_current_with_foldback_limit_line() {
    // Regulation V = 15 V flat to 2 A; foldback limit line I = 0.5 + 0.1 V below it,
    // which meets V = 15 at I = 2.0 A.
    let mut rows = Vec::new();
    for k in 0..=15 {
        let i = k as f64 * 0.1;
        rows.push(row(StepKind::LoadSweep, k as f64, 15.0, i));
    }
    for k in 1..=12 {
        let v = 15.0 - k as f64 * 1.2;
        rows.push(row(StepKind::LimitTrace, 20.0 + k as f64, v, 0.5 + 0.1 * v));
    }
    let m = analyse(&rows, &AnalysisOptions::default());
    let ts = m.knee.unwrap().two_segment.unwrap();
    assert!((ts.current - 2.0).abs() < 1e-9, "{ts:?}");
    assert!((ts.voltage - 15.0).abs() < 1e-9);
}

#[test]
fn short_circuit_drift_and_foldback_ratio() {
    let mut rows = ideal_curve();
    for k in 0..=20 {
        let t = k as f64;
        let mut r = row(StepKind::ShortCircuit, 100.0 + t, 0.01, 0.6 - 0.005 * t);
        if k == 0 {
            r.flags.insert(Flag::DwellStart);
        }
        if k == 20 {
            r.flags.insert(Flag::DwellEnd);
        }
        rows.push(r);
    }
    let mut rec = row(StepKind::ShortCircuit, 125.0, 11.9, 0.0);
    rec.flags.insert(Flag::Recovery);
    rows.push(rec);
    let m = analyse(&rows, &AnalysisOptions::default());
    let sc = m.short_circuit.unwrap();
    assert!((sc.start_current - 0.6).abs() < 1e-12);
    assert!((sc.end_current - 0.5).abs() < 1e-12);
    assert!((sc.drift_a_per_s + 0.005).abs() < 1e-12);
    assert!((sc.drift_percent + 100.0 / 6.0).abs() < 1e-9);
    assert_eq!(sc.recovered, Some(true));
    let knee = m.knee.unwrap().fixed_drop.unwrap().current;
    assert!((m.foldback_ratio.unwrap() - 0.6 / knee).abs() < 1e-12);
}

#[test]
fn line_regulation_from_sweep() {
    // Vout = 12 + 0.002 (Vin - 15) over 15..25 V: 20 mV change, 0.1667 % of 12 V.
    let rows: Vec<Row> = (0..=10)
        .map(|k| {
            let vin = 15.0 + k as f64;
            let mut r = row(
                StepKind::LineSweep,
                k as f64,
                12.0 + 0.002 * (vin - 15.0),
                0.5,
            );
            r.source_volts = Some(vin);
            r
        })
        .collect();
    let opts = AnalysisOptions {
        nominal_voltage: Some(12.0),
        ..AnalysisOptions::default()
    };
    let lr = analyse(&rows, &opts).line_regulation.unwrap();
    assert_eq!(lr.reference, RegulationReference::Nominal);
    assert!((lr.delta_output - 0.02).abs() < 1e-12);
    assert!((lr.percent - 0.02 / 12.0 * 100.0).abs() < 1e-9);
}

#[test]
fn empty_record_gives_notes_not_panics() {
    let m = analyse(&[], &AnalysisOptions::default());
    assert!(m.no_load.is_none() && m.knee.is_none() && m.short_circuit.is_none());
    assert!(!m.notes.is_empty());
}

#[test]
fn sweep_that_never_limits_has_no_knee_and_says_why() {
    let rows: Vec<Row> = (0..10)
        .map(|k| {
            let i = k as f64 * 0.1;
            row(StepKind::LoadSweep, k as f64, 12.0 - 0.05 * i, i)
        })
        .collect();
    let m = analyse(&rows, &AnalysisOptions::default());
    let k = m.knee.unwrap();
    assert!(k.fixed_drop.is_none() && k.two_segment.is_none());
    assert!(m.limit_current().is_none());
    assert!(m.notes.iter().any(|n| n.contains("limit was not reached")));
    // The regulation figures still exist.
    assert!((m.output_resistance.unwrap().ohms - 0.05).abs() < 1e-9);
}

#[test]
fn dwell_ignores_a_start_reading_taken_before_the_output_collapsed() {
    // The first row flagged dwell_start still shows 12 V (the short was applied during
    // the reading); the dwell starts at the first shorted row.
    let mut rows = ideal_curve();
    let mut first = row(StepKind::ShortCircuit, 100.0, 11.95, 0.4);
    first.flags.insert(Flag::DwellStart);
    rows.push(first);
    for k in 1..=10 {
        let mut r = row(
            StepKind::ShortCircuit,
            100.0 + k as f64,
            0.05,
            1.0 + 0.01 * k as f64,
        );
        if k == 10 {
            r.flags.insert(Flag::DwellEnd);
        }
        rows.push(r);
    }
    let sc = analyse(&rows, &AnalysisOptions::default())
        .short_circuit
        .unwrap();
    assert_eq!(sc.points, 10);
    assert!((sc.start_current - 1.01).abs() < 1e-12);
    assert!((sc.dwell_s - 9.0).abs() < 1e-12);
}

#[test]
fn output_resistance_fit_stops_before_the_knee_onset() {
    // A regulation line V = 12 - 0.010 I (10 mohm) with an exponential knee onset
    // 0.05 V x exp((I - 1.5) / 0.08) (the shape of a junction clamp turning on, Shockley's
    // law), sampled every 50 mA up to 1.6 A and then a limit line. The onset is 1.6 mV at
    // 1.22 A and grows from there: a fit over the whole region below the fixed-drop knee bends
    // with it; the fit cut at the onset finds the line's 10 mohm.
    let v = |i: f64| 12.0 - 0.010 * i - 0.05 * ((i - 1.5) / 0.08).exp();
    let mut rows = Vec::new();
    for k in 0..=32 {
        let i = k as f64 * 0.05;
        rows.push(row(StepKind::LoadSweep, k as f64, v(i), i));
    }
    for k in 1..=8 {
        rows.push(row(
            StepKind::LimitTrace,
            40.0 + k as f64,
            11.0 - k as f64,
            1.62,
        ));
    }
    let m = analyse(&rows, &AnalysisOptions::default());
    let r = m.output_resistance.unwrap();
    assert!((r.ohms - 0.010).abs() < 0.0002, "{r:?} {:?}", m.notes);
    assert!(
        m.notes.iter().any(|n| n.contains("knee onset")),
        "{:?}",
        m.notes
    );
    // Without the cut, the same points give a visibly higher resistance.
    let k = m.knee.unwrap();
    let wide = super::curve::regulation_region(
        &curve_points(&rows),
        k.threshold_voltage,
        k.fixed_drop,
        DEFAULT_REGULATION_SPAN,
    );
    let xs: Vec<f64> = wide.iter().map(|p| p.current).collect();
    let ys: Vec<f64> = wide.iter().map(|p| p.voltage).collect();
    let old = -linear_fit(&xs, &ys).unwrap().slope;
    assert!(old > 0.0105, "{old}");
}
