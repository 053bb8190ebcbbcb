//! No panics on bad input: arbitrary readings text, and arbitrary (including non-finite)
//! values through analysis, comparison, plots and the HTML page.

use proptest::prelude::*;
use regulus::analysis::{analyse, AnalysisOptions};
use regulus::measure::{LoadMode, Quantity};
use regulus::record::{Cell, Flag, Flags, LoadState, Row, StepKind};
use regulus::report::{self, ReportOptions};

const READINGS: &str = include_str!("../../report_golden/readings.csv");
const RUN: &str = include_str!("../../report_golden/run.json");
const DESIGN: &str = include_str!("../../report_golden/bench12.toml");

fn expectation() -> &'static regulus::compare::DesignExpectation {
    static EXP: std::sync::OnceLock<regulus::compare::DesignExpectation> =
        std::sync::OnceLock::new();
    EXP.get_or_init(|| {
        let d = regulus::design::Design::parse(DESIGN, "bench12.toml").unwrap();
        let e = regulus::design::expect_with(&d, 500, 1);
        regulus::compare::DesignExpectation::from_design(&d, &e)
    })
}

fn any_value() -> impl Strategy<Value = f64> {
    prop_oneof![
        8 => -20.0f64..20.0,
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
        1 => Just(0.0),
        1 => Just(-0.0),
        1 => Just(1e300),
    ]
}

fn any_cell() -> impl Strategy<Value = Option<Cell>> {
    prop_oneof![
        6 => (any_value(), any_value()).prop_map(|(mean, spread)| Some(Cell::Value { mean, spread })),
        1 => Just(Some(Cell::Overrange)),
        1 => Just(None),
    ]
}

fn any_row() -> impl Strategy<Value = Row> {
    let kinds = prop_oneof![
        Just(StepKind::LoadSweep),
        Just(StepKind::LimitTrace),
        Just(StepKind::KneeSearch),
        Just(StepKind::ShortCircuit),
        Just(StepKind::LineSweep),
        Just(StepKind::Soak),
    ];
    let flags = proptest::collection::vec(
        prop_oneof![
            Just(Flag::DwellStart),
            Just(Flag::DwellEnd),
            Just(Flag::Recovery),
            Just(Flag::Overrange),
        ],
        0..2,
    );
    (
        kinds,
        any_value(),
        any_cell(),
        any_cell(),
        any_cell(),
        proptest::option::of(any_value()),
        flags,
    )
        .prop_map(|(kind, t, v, i, temp, src, flags)| Row {
            utc: "2026-11-02T09:00:00.000Z".into(),
            elapsed_s: t,
            step: 0,
            step_kind: kind,
            point: 0,
            load_mode: LoadState::On(LoadMode::ConstantVoltage),
            setpoint: None,
            source_volts: src,
            samples: 1,
            cells: [
                (Quantity::OutputVoltage, v),
                (Quantity::OutputCurrent, i),
                (Quantity::Temperature, temp),
            ]
            .into(),
            flags: Flags::from(flags),
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn arbitrary_rows_never_panic(rows in proptest::collection::vec(any_row(), 0..60)) {
        let info: regulus::record::RunInfo = serde_json::from_str(RUN).unwrap();
        let m = analyse(&rows, &AnalysisOptions::default());
        prop_assert_eq!(m.rows, rows.len());
        let exp = expectation();
        let s = report::summarize(&info, &rows, Some(exp), &ReportOptions::default());
        let curve = regulus::analysis::curve_points(&rows);
        let dwell = regulus::analysis::dwell_series(&rows);
        let charts = report::charts_for(&curve, &dwell, &s.metrics, Some(exp));
        let mut svgs = Vec::new();
        for c in &charts {
            // A chart may refuse odd data with an error; it must not panic.
            if let Ok(svg) = c.to_svg((400, 300)) {
                svgs.push((c.name(), c.caption(), svg));
            }
        }
        let line = regulus::analysis::line_points(&rows);
        let soak = regulus::analysis::soak_series(&rows);
        let limits = regulus::compare::MetricLimits {
            line_regulation_percent: Some(0.5),
            soak_drift_percent: Some(0.5),
            soak_rise_c: Some(25.0),
        };
        for c in report::line_charts_for(&line, &soak, &s.metrics, Some(exp), &limits) {
            if let Ok(svg) = c.to_svg((400, 300)) {
                svgs.push((c.name(), c.caption(), svg));
            }
        }
        let mut page = Vec::new();
        report::html::write_html(&mut page, &info, &s, &svgs).unwrap();
        let mut json = Vec::new();
        report::write_summary_json(&mut json, &s).unwrap();
    }

    #[test]
    fn mangled_readings_text_never_panics(cut in 0usize..2000, junk in "[ -~]{0,40}") {
        let mut text: String = READINGS.chars().take(cut).collect();
        text.push_str(&junk);
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("readings.csv");
        std::fs::write(&p, &text).unwrap();
        let _ = regulus::record::read_rows(&p);
    }
}
