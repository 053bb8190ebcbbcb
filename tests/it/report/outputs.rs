//! Outputs checked byte for byte on fixed inputs: `summary.json` of a hand-written record of
//! invented test data (tests/report_golden/, not a real unit)
//! whose metrics are worked out by hand below, and the history CSV and JSON.

use regulus::compare::{
    Clamp, DesignExpectation, ExpectedBand, HistoryEntry, KeyMetric, KeyValues, LimitModel, Limits,
    MonteCarlo, Verdict,
};
use regulus::record::RunInfo;
use regulus::report::{self, ReportOptions};

const READINGS: &str = include_str!("../../report_golden/readings.csv");
const RUN: &str = include_str!("../../report_golden/run.json");
const SUMMARY: &str = include_str!("../../report_golden/summary.json");

fn expectation() -> DesignExpectation {
    DesignExpectation {
        design_name: "bench12 rev A".into(),
        vout: ExpectedBand {
            nominal: 12.0,
            worst_case: Limits {
                min: 11.4,
                max: 12.6,
            },
            monte_carlo: MonteCarlo {
                samples: 1000,
                mean: 12.0,
                sigma: 0.1,
                p_low: 11.7,
                p_high: 12.3,
            },
        },
        limit_current: ExpectedBand {
            nominal: 1.0,
            worst_case: Limits { min: 0.9, max: 1.1 },
            monte_carlo: MonteCarlo {
                samples: 1000,
                mean: 1.0,
                sigma: 0.0167,
                p_low: 0.95,
                p_high: 1.05,
            },
        },
        short_circuit_current: None,
        limit: Some(LimitModel {
            sense_ohms: 0.6,
            clamp: Clamp::Transistor { v_be: 0.6 },
            tempco_v_per_c: -0.002,
            pass_theta_jc: None,
        }),
        curve: vec![],
        curve_low: vec![],
        curve_high: vec![],
        rated_load_a: None,
        design: None,
        as_built: None,
        envelope: None,
    }
}

/// Rows of the fixed readings, read through the record module from a temporary file.
fn read(text: &str) -> Result<Vec<regulus::record::Row>, regulus::record::RecordError> {
    let dir = tempfile::tempdir().expect("tempdir");
    let p = dir.path().join("readings.csv");
    std::fs::write(&p, text).expect("write readings");
    regulus::record::read_rows(&p)
}

fn summary() -> report::Summary {
    let rows = read(READINGS).expect("fixed readings parse");
    let info: RunInfo = serde_json::from_str(RUN).expect("fixed run.json parses");
    report::summarize(
        &info,
        &rows,
        Some(&expectation()),
        &ReportOptions::default(),
    )
}

#[test]
fn summary_metrics_match_hand_calculation() {
    let s = summary();
    let m = &s.metrics;
    // Sweep V = 12 - 0.05 I: output resistance 0.05 ohm (points 0..0.6 A; the regulation
    // region stops at 80 % of the fixed-drop knee).
    assert!((m.output_resistance.unwrap().ohms - 0.05).abs() < 1e-9);
    assert!((m.output_resistance.unwrap().intercept_voltage - 12.0).abs() < 1e-9);
    // Fixed drop (d = 2 %): threshold 11.76 V between (0.8 A, 11.96 V) and (1.0 A, 11.0 V):
    // I = 0.8 + 0.2 * (0.2 / 0.96) = 0.841667 A.
    let k = m.knee.unwrap();
    assert!((k.fixed_drop.unwrap().current - (0.8 + 0.2 * 0.2 / 0.96)).abs() < 1e-9);
    // Two-segment: V = 12 - 0.05 I meets I = 1.0 A at 11.95 V.
    assert!((k.two_segment.unwrap().current - 1.0).abs() < 1e-9);
    assert!((k.two_segment.unwrap().voltage - 11.95).abs() < 1e-9);
    // Load regulation (textbook, full-load reference): (12 - 11.96) / 11.96 = 0.334448 %.
    assert!((m.load_regulation.unwrap().percent - 0.04 / 11.96 * 100.0).abs() < 1e-9);
    // Short circuit 1.10 A -> 1.02 A over 4 s: -0.02 A/s, -7.27 %; straight line, so no
    // first-order time constant is claimed.
    let sc = m.short_circuit.unwrap();
    assert!((sc.drift_a_per_s + 0.02).abs() < 1e-9);
    assert!((sc.drift_percent + 0.08 / 1.1 * 100.0).abs() < 1e-9);
    assert!(sc.time_constant.is_none());
    assert_eq!(sc.recovered, Some(true));
    assert_eq!(sc.peak_temperature, Some(31.0));
    // Foldback ratio 1.10 / 0.841667.
    assert!((m.foldback_ratio.unwrap() - 1.1 / (0.8 + 0.2 * 0.2 / 0.96)).abs() < 1e-9);
    // Knee conditions: first row nearest the 1.0 A knee is (11.0 V, 1.0 A) with 18.000 V in
    // and 26 degC on the case: (18 - 11) * 1.0 = 7 W.
    let kc = m.knee_conditions.unwrap();
    assert_eq!(kc.case_temperature, Some(26.0));
    assert!((kc.pass_watts.unwrap() - 7.0).abs() < 1e-9);
    assert_eq!(s.verdict, Some(Verdict::Pass));
}

#[test]
fn summary_json_is_byte_for_byte_stable() {
    let mut out = Vec::new();
    report::write_summary_json(&mut out, &summary()).unwrap();
    let text = String::from_utf8(out).unwrap();
    if text != SUMMARY {
        if let Some(p) = std::env::var_os("REGULUS_WRITE_GOLDEN") {
            std::fs::write(p, &text).unwrap();
        }
        panic!("summary.json differs from tests/report_golden/summary.json:\n{text}");
    }
}

fn entries() -> Vec<HistoryEntry> {
    let kv = |v: f64, i: f64| {
        KeyValues(
            KeyMetric::ALL
                .iter()
                .map(|k| {
                    (
                        *k,
                        match k {
                            KeyMetric::OutputVoltage => Some(v),
                            KeyMetric::LimitCurrent => Some(i),
                            _ => None,
                        },
                    )
                })
                .collect(),
        )
    };
    vec![
        HistoryEntry {
            record: "20261103T090000Z_standard".into(),
            started_utc: "2026-11-03T09:00:00.000Z".into(),
            outcome: "completed".into(),
            verdict: Some(Verdict::Fail),
            values: kv(12.01, 0.70),
        },
        HistoryEntry {
            record: "20261102T090000Z_standard".into(),
            started_utc: "2026-11-02T09:00:00.000Z".into(),
            outcome: "completed".into(),
            verdict: Some(Verdict::Pass),
            values: kv(12.0, 1.0),
        },
    ]
}

#[test]
fn history_csv_is_byte_for_byte_stable() {
    // Entries are sorted by date; the limit falling from 1.0 A to 0.7 A (-30 %) is beyond the
    // 5 % default threshold, the output voltage change (+0.08 %) is within 1 %.
    let h = report::history_from_entries("SN-0007", entries());
    let mut out = Vec::new();
    report::write_history_csv(&mut out, &h).unwrap();
    let expected = "\
record,started_utc,outcome,verdict,output_voltage [V],load_regulation [%],output_resistance [ohm],limit_current [A],short_circuit_current [A],short_circuit_drift [%],drift
20261102T090000Z_standard,2026-11-02T09:00:00.000Z,completed,pass,12.0000,,,1.0000,,,
20261103T090000Z_standard,2026-11-03T09:00:00.000Z,completed,fail,12.0100,,,0.7000,,,limit_current
";
    assert_eq!(String::from_utf8(out).unwrap(), expected);
}

#[test]
fn history_json_is_byte_for_byte_stable() {
    let h = report::history_from_entries("SN-0007", entries()[..1].to_vec());
    let mut out = Vec::new();
    report::write_history_json(&mut out, &h).unwrap();
    let expected = r#"{
  "unit": "SN-0007",
  "entries": [
    {
      "record": "20261103T090000Z_standard",
      "started_utc": "2026-11-03T09:00:00.000Z",
      "outcome": "completed",
      "verdict": "fail",
      "values": {
        "output_voltage": 12.01,
        "load_regulation": null,
        "output_resistance": null,
        "limit_current": 0.7,
        "short_circuit_current": null,
        "short_circuit_drift": null
      }
    }
  ],
  "drift": [],
  "unreadable": []
}
"#;
    assert_eq!(String::from_utf8(out).unwrap(), expected);
}

#[test]
fn bad_readings_report_the_line() {
    let mut text = READINGS.to_string();
    text.push_str("2026-11-02T09:00:15.000Z,15.000,2,short_circuit,6,off,,18,4,twelve,0.001,0.0,0.001,18.000,0.002,,,31,0.1,\n");
    text.push_str("2026-11-02T09:00:16.000Z,16.000,2,short_circuit,7,off,,18,4,12.0,0.001,0.0,0.001,18.000,0.002,,,31,0.1,\n");
    let err = read(&text).unwrap_err().to_string();
    assert!(err.contains("line 17") && err.contains("twelve"), "{err}");
}

#[test]
fn knee_conditions_come_from_the_row_at_the_knee_not_deep_in_the_limit() {
    // The same readings with the limit trace recorded from the deepest point up, and the case
    // warmer at the deep points. All four trace rows carry 1.0 A, so the current alone cannot
    // tell them apart; the row at the knee (1.0 A, 11.95 V from the two-segment fit) is the
    // 11.0 V one: (18 - 11) x 1.0 = 7 W at 26 degC. The 2.0 V row would give (18 - 2) x 1.0 =
    // 16 W, the dissipation of a unit held deep in its limit, not at its knee (common practice:
    // P = (V_in - V_out) x I in the series-pass device).
    let lines: Vec<&str> = READINGS.lines().collect();
    let mut trace: Vec<String> = lines
        .iter()
        .filter(|l| l.contains(",limit_trace,"))
        .map(|l| {
            if l.contains(",11.000,") {
                l.to_string()
            } else {
                l.replace(",26,0.1,", ",33,0.1,")
            }
        })
        .collect();
    trace.reverse();
    let mut text = String::new();
    let mut trace_written = false;
    for l in &lines {
        if l.contains(",limit_trace,") {
            if !trace_written {
                for t in &trace {
                    text.push_str(t);
                    text.push('\n');
                }
                trace_written = true;
            }
        } else {
            text.push_str(l);
            text.push('\n');
        }
    }
    assert!(
        trace_written && text.find(",2.000,").unwrap() < text.find(",11.000,").unwrap(),
        "the deep row comes first"
    );
    let rows = read(&text).expect("reordered readings parse");
    let info: RunInfo = serde_json::from_str(RUN).expect("fixed run.json parses");
    let s = report::summarize(
        &info,
        &rows,
        Some(&expectation()),
        &ReportOptions::default(),
    );
    let kc = s.metrics.knee_conditions.expect("knee conditions");
    assert_eq!(kc.case_temperature, Some(26.0));
    assert!((kc.pass_watts.unwrap() - 7.0).abs() < 1e-9, "{kc:?}");
}
