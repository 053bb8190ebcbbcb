//! Unit tests of plan parsing, checking and expansion.

use super::*;
use crate::config::Located;
use crate::measure::{LoadMode, Role};
use std::time::Duration;

fn targets() -> DesignTargets {
    DesignTargets {
        vout_v: 12.0,
        limit_current_a: 1.5,
        short_circuit_current_a: 0.6,
        max_load_current_a: 1.0,
        input_voltage_v: Some(18.0),
    }
}

fn parse(text: &str) -> Result<Plan, PlanError> {
    Plan::parse(text, "plan.toml", &targets())
}

fn located(err: PlanError) -> (usize, usize, String) {
    match err {
        PlanError::Invalid(Located {
            line: Some(line),
            column: Some(column),
            message,
            ..
        }) => (line, column, message),
        other => panic!("expected a located error, got {other}"),
    }
}

const FULL: &str = r#"
name = "bring-up"
settle = "200 ms"
samples = 4

[interlocks]
max_output_voltage = "14 V"
max_short_dwell = "5 s"

[[step]]
kind = "load_sweep"
from = "0 A"
to = "90 % of limit"
step = "150 mA"

[[step]]
kind = "limit_trace"
mode = "cv"
from = "100% vout"
to = "10 % of vout"
points = 10
samples = 2

[[step]]
kind = "knee_search"

[[step]]
kind = "short_circuit"
dwell = "3 s"
interval = "500 ms"

[[step]]
kind = "line_sweep"
from = "15 V"
to = "20 V"
points = 6
load = "max_load"

[[step]]
kind = "soak"
load = "80 % of max_load"
duration = "10 min"
interval = "30 s"
"#;

#[test]
fn full_plan_expands_relative_ranges() {
    let p = parse(FULL).expect("plan parses");
    assert_eq!(p.name, "bring-up");
    assert_eq!(p.steps.len(), 6);
    assert_eq!(p.source_volts, Some(18.0), "defaults to the design's vin");
    assert_eq!(p.interlocks.max_output_voltage_v, 14.0);
    assert_eq!(p.interlocks.max_short_dwell, Duration::from_secs(5));
    // 0 .. 0.9 * 1.5 A = 1.35 A in 150 mA steps: 10 points, ending exactly on 1.35 A.
    match &p.steps[0].action {
        Action::Sweep { mode, setpoints } => {
            assert_eq!(*mode, LoadMode::ConstantCurrent);
            assert_eq!(setpoints.len(), 10);
            assert!((setpoints[9] - 1.35).abs() < 1e-12);
        }
        other => panic!("unexpected {other:?}"),
    }
    assert_eq!(p.steps[0].settle, Duration::from_millis(200));
    assert_eq!(p.steps[0].samples, 4);
    match &p.steps[1].action {
        Action::Sweep { mode, setpoints } => {
            assert_eq!(*mode, LoadMode::ConstantVoltage);
            assert_eq!(setpoints.len(), 10);
            assert!((setpoints[0] - 12.0).abs() < 1e-12);
            assert!((setpoints[9] - 1.2).abs() < 1e-12);
        }
        other => panic!("unexpected {other:?}"),
    }
    assert_eq!(p.steps[1].samples, 2);
    match &p.steps[2].action {
        Action::KneeSearch(k) => {
            assert_eq!(k.mode, LoadMode::ConstantResistance);
            assert!((k.expected_a - 1.5).abs() < 1e-12);
            assert!((k.reference_a - 0.15).abs() < 1e-12);
            assert_eq!(k.max_points, 20);
        }
        other => panic!("unexpected {other:?}"),
    }
    match &p.steps[3].action {
        Action::ShortCircuit(s) => {
            assert_eq!(s.dwell, Duration::from_secs(3));
            assert_eq!(s.interval, Duration::from_millis(500));
            assert!((s.expected_current_a - 0.6).abs() < 1e-12);
        }
        other => panic!("unexpected {other:?}"),
    }
    // dwell 3 s / 0.5 s -> 6 readings (0 .. 2.5 s), recovery 2 s / 0.5 s -> 4 readings,
    // plus one before the short.
    assert_eq!(p.steps[3].planned_points(), 11);
    match &p.steps[4].action {
        Action::LineSweep { load, source_volts } => {
            assert!((load.value - 1.0).abs() < 1e-12);
            assert_eq!(source_volts, &vec![15.0, 16.0, 17.0, 18.0, 19.0, 20.0]);
        }
        other => panic!("unexpected {other:?}"),
    }
    assert_eq!(p.steps[5].planned_points(), 21);
    assert!(p.has_short_circuit());
    // The CV limit trace needs an ammeter (the load's current is the unit's to choose).
    assert_eq!(
        p.required_roles(),
        vec![
            Role::Load,
            Role::OutputVoltmeter,
            Role::InputSource,
            Role::OutputAmmeter
        ]
    );
}

#[test]
fn default_interlocks_derive_from_design() {
    let p = parse(
        "name = \"x\"\n[[step]]\nkind = \"soak\"\nload = \"1 A\"\nduration = 60\ninterval = 5\n",
    )
    .expect("parses");
    assert!((p.interlocks.max_output_voltage_v - 14.4).abs() < 1e-9);
    // 1.25 * 12 V * max(1.5 A, 1.0 A)
    assert!((p.interlocks.max_load_power_w - 22.5).abs() < 1e-9);
    assert_eq!(p.interlocks.max_temperature_c, 85.0);
}

#[test]
fn quantities_read_units_prefixes_and_design_bases() {
    let t = targets();
    assert_eq!(parse_quantity("450 mA", Dim::Current, &t), Ok(0.45));
    assert_eq!(parse_quantity("1.5A", Dim::Current, &t), Ok(1.5));
    assert_eq!(parse_quantity("50 mohm", Dim::Resistance, &t), Ok(0.05));
    assert_eq!(parse_quantity("2.2 kohm", Dim::Resistance, &t), Ok(2200.0));
    assert_eq!(parse_quantity("300 ms", Dim::Time, &t), Ok(0.3));
    assert_eq!(parse_quantity("10 min", Dim::Time, &t), Ok(600.0));
    assert_eq!(parse_quantity("1e-1 V", Dim::Voltage, &t), Ok(0.1));
    assert_eq!(parse_quantity("120 % of short", Dim::Current, &t), Ok(0.72));
    assert_eq!(parse_quantity("50% vout", Dim::Voltage, &t), Ok(6.0));
    assert_eq!(parse_quantity("r_knee", Dim::Resistance, &t), Ok(8.0));
    assert!(parse_quantity("12 V", Dim::Current, &t).is_err());
    assert!(parse_quantity("1e999 A", Dim::Current, &t).is_err());
    assert!(parse_quantity("90 % of vout", Dim::Current, &t)
        .unwrap_err()
        .contains("a voltage"));
    assert!(parse_quantity("90 % of knee", Dim::Current, &t)
        .unwrap_err()
        .contains("not a design value"));
    let no_vin = DesignTargets {
        input_voltage_v: None,
        ..t
    };
    assert!(parse_quantity("vin", Dim::Voltage, &no_vin).is_err());
}

#[test]
fn plans_take_the_bench_prefixes_and_both_micro_signs() {
    let t = targets();
    // SI prefixes (BIPM SI Brochure): u and both micro signs are 1e-6.
    for text in ["20 uA", "20 \u{b5}A", "20 \u{3bc}A"] {
        let v = parse_quantity(text, Dim::Current, &t).unwrap();
        assert!((v - 20e-6).abs() < 1e-15, "{text}: {v}");
    }
    assert_eq!(parse_quantity("1 MV", Dim::Voltage, &t), Ok(1e6));
    assert_eq!(parse_quantity("500 us", Dim::Time, &t), Ok(0.0005));
    assert_eq!(parse_quantity("500 \u{b5}s", Dim::Time, &t), Ok(0.0005));
    // Prefixes a bench plan does not need are refused, as before: likely typos.
    for (text, dim) in [
        ("5 nA", Dim::Current),
        ("100 pA", Dim::Current),
        ("1 GV", Dim::Voltage),
        ("4.7 Kohm", Dim::Resistance),
        ("1 ks", Dim::Time),
        ("5 ns", Dim::Time),
        ("2 msec", Dim::Time),
    ] {
        assert!(parse_quantity(text, dim, &t).is_err(), "{text}");
    }
}

#[test]
fn wrong_dimension_names_line_and_column() {
    let text =
        "name = \"x\"\n[[step]]\nkind = \"load_sweep\"\nfrom = 0\nto = \"12 V\"\npoints = 3\n";
    let (line, col, msg) = located(parse(text).unwrap_err());
    assert_eq!((line, col), (5, 6));
    assert!(msg.contains("`to`"), "{msg}");
}

#[test]
fn unknown_kind_and_stray_fields_are_located() {
    let text = "name = \"x\"\n\n[[step]]\nkind = \"load_swep\"\n";
    let (line, col, msg) = located(parse(text).unwrap_err());
    assert_eq!((line, col), (4, 8));
    assert!(msg.contains("unknown step kind"), "{msg}");
    // The pre-flight reading's row kind is not a plan step.
    let text = "name = \"x\"\n\n[[step]]\nkind = \"preflight\"\n";
    let (line, _, msg) = located(parse(text).unwrap_err());
    assert_eq!(line, 4);
    assert!(msg.contains("unknown step kind 'preflight'"), "{msg}");

    let text = "name = \"x\"\n[[step]]\nkind = \"soak\"\nload = 1\nduration = 5\ninterval = 1\ndwell = 3\n";
    let (line, col, msg) = located(parse(text).unwrap_err());
    assert_eq!((line, col), (7, 9));
    assert!(msg.contains("does not apply"), "{msg}");

    let text = "name = \"x\"\n[[step]]\nkind = \"soak\"\nlaod = 1\n";
    let (line, _, msg) = located(parse(text).unwrap_err());
    assert_eq!(line, 4, "{msg}");
    assert!(msg.contains("laod"), "{msg}");
}

#[test]
fn syntax_errors_and_missing_fields_are_located() {
    let text = "name = \"x\"\n[[step]]\nkind = \"soak\nload = 1\n";
    let (line, _, _) = located(parse(text).unwrap_err());
    assert_eq!(line, 3);

    let text = "name = \"x\"\n\n[[step]]\nkind = \"load_sweep\"\nfrom = 0\n";
    let (line, _, msg) = located(parse(text).unwrap_err());
    assert!(msg.contains("needs `to`"), "{msg}");
    assert!(
        (3..=5).contains(&line),
        "step located near its table, got line {line}"
    );
}

#[test]
fn short_dwell_beyond_interlock_is_rejected() {
    let text = "name = \"x\"\n[interlocks]\nmax_short_dwell = \"2 s\"\n[[step]]\nkind = \"short_circuit\"\ndwell = \"5 s\"\n";
    let (line, col, msg) = located(parse(text).unwrap_err());
    assert_eq!((line, col), (6, 9));
    assert!(msg.contains("max_short_dwell"), "{msg}");
}

#[test]
fn plan_without_steps_or_bad_name_is_rejected() {
    assert!(matches!(
        parse("name = \"x\"\n"),
        Err(PlanError::Invalid(Located { line: None, .. }))
    ));
    let (line, col, _) = located(parse("name = \"a b\"\n").unwrap_err());
    assert_eq!((line, col), (1, 8));
}

#[test]
fn knee_bounds_must_be_ordered() {
    let text = "name = \"x\"\n[[step]]\nkind = \"knee_search\"\nupper = \"1 A\"\n";
    let (_, _, msg) = located(parse(text).unwrap_err());
    assert!(msg.contains("reference < expected < upper"), "{msg}");
}

#[test]
fn roles_are_checked_by_name() {
    let p = parse(FULL).expect("parses");
    let err = p
        .check_roles(|r| r == Role::Load || r == Role::OutputVoltmeter)
        .unwrap_err();
    assert!(err.contains("input_source"), "{err}");
    assert!(p.check_roles(|_| true).is_ok());
}

#[test]
fn tidy_removes_binary_noise_only() {
    assert_eq!(tidy(4.800000000000001), 4.8);
    assert_eq!(tidy(0.15000000000000002), 0.15);
    assert_eq!(tidy(24.055844122715715), 24.0558441);
    assert_eq!(tidy(-1.2345678912e-3), -1.23456789e-3);
    assert_eq!(tidy(0.0), 0.0);
}

#[test]
fn line_col_counts_characters() {
    assert_eq!(line_col("ab\ncd", 0), (1, 1));
    assert_eq!(line_col("ab\ncd", 4), (2, 2));
    assert_eq!(line_col("\u{3a9}x\ny", 2), (1, 2));
    // An offset inside a multi-byte character counts as that character.
    assert_eq!(line_col("a\n\u{3a9}x", 3), (2, 1));
    assert_eq!(line_col("ab", 99), (1, 3));
}

proptest::proptest! {
    #[test]
    fn quantity_parser_never_panics(text in "\\PC{0,24}") {
        for dim in [Dim::Current, Dim::Time] {
            match parse_quantity(&text, dim, &targets()) {
                Ok(v) => proptest::prop_assert!(v.is_finite()),
                Err(m) => proptest::prop_assert!(!m.is_empty()),
            }
        }
    }

    #[test]
    fn plan_parser_never_panics(
        kind in "(load_sweep|limit_trace|knee_search|short_circuit|line_sweep|soak|x)",
        key in "(from|to|step|points|load|dwell|interval|mode|expected|drop|duration)",
        value in "(\"[-0-9.e%a-zA-Z ]{0,12}\"|-?[0-9]{1,6}|-?[0-9]{1,3}\\.[0-9]{1,3})",
    ) {
        let text = format!("name = \"p\"\n[[step]]\nkind = \"{kind}\"\n{key} = {value}\n");
        match parse(&text) {
            Ok(p) => proptest::prop_assert_eq!(p.steps.len(), 1),
            Err(PlanError::Invalid(Located { line: Some(line), column: Some(column), message, .. })) => {
                proptest::prop_assert!((1..=4).contains(&line) && column >= 1);
                proptest::prop_assert!(!message.is_empty());
            }
            Err(e) => proptest::prop_assert!(!e.to_string().is_empty()),
        }
    }
}

#[test]
fn absolute_quantities_use_the_one_si_prefix_table() {
    // SI prefixes: BIPM, The International System of Units (SI Brochure, 9th edition).
    let t = targets();
    assert_eq!(parse_quantity("470 mA", Dim::Current, &t), Ok(0.47));
    assert_eq!(parse_quantity("1.2 kohm", Dim::Resistance, &t), Ok(1200.0));
    // Both micro signs (U+00B5 and the Greek U+03BC) read as micro.
    assert_eq!(parse_quantity("250 \u{b5}s", Dim::Time, &t), Ok(250e-6));
    assert_eq!(parse_quantity("250 \u{3bc}s", Dim::Time, &t), Ok(250e-6));
    assert_eq!(parse_quantity("250 us", Dim::Time, &t), Ok(250e-6));
    // Prefixes never apply to temperatures, and an unknown prefix is refused.
    assert!(parse_quantity("85 mdegC", Dim::Temperature, &t).is_err());
    assert!(parse_quantity("3 xA", Dim::Current, &t).is_err());
}
