//! Unit tests of the simulated instruments.

use super::channels::*;
use super::faults::*;
use super::kinds::*;
use super::scpi::*;
use crate::measure::LoadMode;
use crate::sim::unit::Controls;

fn snap() -> Snapshot {
    Snapshot {
        vout: 12.0341,
        iout: 1.2034,
        vin: 22.5,
        iin: 1.215,
        case_c: 41.26,
    }
}
fn quiet() -> Noise {
    Noise::new(1, 0.0)
}
fn ask(kind: InstrumentKind, line: &str, c: &mut Controls) -> Vec<String> {
    let mut st = InstrumentState::new(kind, "SIM-1");
    respond(&mut st, line, c, &snap(), &mut quiet())
}

#[test]
fn nr3_has_signed_mantissa_and_two_digit_exponent() {
    // SCPI / IEEE 488.2 NR3: mantissa, 'E', signed exponent.
    assert_eq!(nr3(12.0034), "+1.20034E+01");
    assert_eq!(nr3(-0.00125), "-1.25000E-03");
    assert_eq!(nr3(0.0), "+0.00000E+00");
    assert_eq!(nr3(1e40), "9.9E37");
    assert_eq!(nr3(f64::NAN), "9.9E37");
}

#[test]
fn identity_names_maker_model_serial_firmware() {
    // IEEE 488.2 *IDN?: four comma-separated fields.
    let mut c = Controls::default();
    for kind in InstrumentKind::ALL {
        let r = ask(kind, "*IDN?", &mut c);
        let fields: Vec<&str> = r[0].split(',').collect();
        assert_eq!(fields.len(), 4, "{r:?}");
        assert_eq!(fields[0], MAKER);
        assert_eq!(fields[2], "SIM-1");
    }
}

#[test]
fn meter_reads_voltage_current_and_overrange() {
    let mut c = Controls::default();
    assert_eq!(
        ask(InstrumentKind::QueryMeter, "MEAS:VOLT:DC?", &mut c),
        ["+1.20341E+01"]
    );
    assert_eq!(
        ask(InstrumentKind::QueryMeter, "measure:voltage:dc?", &mut c),
        ["+1.20341E+01"]
    );
    assert_eq!(
        ask(InstrumentKind::QueryMeter, "MEAS:CURR:DC?", &mut c),
        ["+1.20340E+00"]
    );
    // No probe on the meter: 9.9E37 is SCPI's overrange value.
    assert_eq!(
        ask(InstrumentKind::QueryMeter, "MEAS:TEMP?", &mut c),
        ["9.9E37"]
    );
    let mut st = InstrumentState::new(InstrumentKind::QueryMeter, "x");
    let big = Snapshot {
        vout: 250.0,
        ..snap()
    };
    assert_eq!(
        respond(&mut st, "MEAS:VOLT:DC?", &mut c, &big, &mut quiet()),
        ["9.9E37"]
    );
}

#[test]
fn thermometer_reads_case_temperature_to_a_tenth() {
    let mut c = Controls::default();
    assert_eq!(
        ask(InstrumentKind::Thermometer, "MEAS:TEMP?", &mut c),
        ["+4.13000E+01"]
    );
}

#[test]
fn load_commands_set_mode_setpoints_and_input() {
    let mut c = Controls::default();
    assert!(ask(InstrumentKind::Load, "FUNC VOLT", &mut c).is_empty());
    assert_eq!(c.load.mode, LoadMode::ConstantVoltage);
    ask(InstrumentKind::Load, "VOLT 5.5", &mut c);
    ask(InstrumentKind::Load, "CURR 500mA", &mut c);
    ask(InstrumentKind::Load, "RES 2.2E+00", &mut c);
    ask(InstrumentKind::Load, "INP ON", &mut c);
    assert_eq!(c.load.voltage, 5.5);
    assert_eq!(c.load.current, 0.5);
    assert_eq!(c.load.resistance, 2.2);
    assert!(c.load.input_on);
    assert_eq!(ask(InstrumentKind::Load, "FUNC?", &mut c), ["VOLT"]);
    assert_eq!(ask(InstrumentKind::Load, "INP?", &mut c), ["1"]);
    assert_eq!(
        ask(InstrumentKind::Load, "FUNC RES;INP OFF", &mut c),
        Vec::<String>::new()
    );
    assert_eq!(c.load.mode, LoadMode::ConstantResistance);
    assert!(!c.load.input_on);
    assert_eq!(
        ask(InstrumentKind::Load, "MEAS:VOLT?", &mut c),
        ["+1.20340E+01"]
    );
    assert_eq!(
        ask(InstrumentKind::Load, "MEAS:CURR?", &mut c),
        ["+1.20300E+00"]
    );
}

#[test]
fn source_commands_take_over_the_input() {
    let mut c = Controls::default();
    assert!(!c.source.in_use);
    ask(InstrumentKind::Source, "VOLT 18", &mut c);
    assert!(c.source.in_use && !c.source.output_on);
    ask(InstrumentKind::Source, "OUTP ON", &mut c);
    assert!(c.source.output_on);
    assert_eq!(c.source.volts, 18.0);
    assert_eq!(
        ask(InstrumentKind::Source, "MEAS:VOLT?", &mut c),
        ["+2.25000E+01"]
    );
    assert_eq!(
        ask(InstrumentKind::Source, "MEAS:CURR?", &mut c),
        ["+1.21500E+00"]
    );
}

#[test]
fn unknown_and_bad_commands_reply_nothing_and_queue_errors() {
    // SCPI error queue: -113 undefined header, -222 data out of range, -224 illegal value.
    let mut c = Controls::default();
    let mut st = InstrumentState::new(InstrumentKind::Load, "x");
    let s = snap();
    assert!(respond(&mut st, "FROB 3", &mut c, &s, &mut quiet()).is_empty());
    assert!(respond(&mut st, "CURR 99", &mut c, &s, &mut quiet()).is_empty());
    assert!(respond(&mut st, "CURR lots", &mut c, &s, &mut quiet()).is_empty());
    assert_eq!(c.load.current, 0.0);
    // A meter does not know load commands.
    let mut m = InstrumentState::new(InstrumentKind::QueryMeter, "y");
    assert!(respond(&mut m, "INP ON", &mut c, &s, &mut quiet()).is_empty());
    assert!(!c.load.input_on);
    let e = |st: &mut InstrumentState, c: &mut Controls| {
        respond(st, "SYST:ERR?", c, &s, &mut quiet())[0].clone()
    };
    assert_eq!(e(&mut st, &mut c), "-113,\"Undefined header\"");
    assert_eq!(e(&mut st, &mut c), "-222,\"Data out of range\"");
    assert_eq!(e(&mut st, &mut c), "-224,\"Illegal parameter value\"");
    assert_eq!(e(&mut st, &mut c), "+0,\"No error\"");
    assert_eq!(e(&mut m, &mut c), "-113,\"Undefined header\"");
}

#[test]
fn stream_line_has_the_fixed_format() {
    let mut n = quiet();
    assert_eq!(stream_line(&snap(), &mut n), "DCI +1.2034 A OK");
    let big = Snapshot {
        iout: 12.0,
        ..snap()
    };
    assert_eq!(stream_line(&big, &mut n), "DCI +9.9999 A OL");
}

#[test]
fn noise_is_seeded_and_scaled() {
    let s = snap();
    let mut a = Noise::new(5, 1.0);
    let mut b = Noise::new(5, 1.0);
    let xs: Vec<String> = (0..50).map(|_| stream_line(&s, &mut a)).collect();
    let ys: Vec<String> = (0..50).map(|_| stream_line(&s, &mut b)).collect();
    assert_eq!(xs, ys);
    let distinct: std::collections::BTreeSet<&String> = xs.iter().collect();
    assert!(distinct.len() > 3, "noise visible at 0.1 mA resolution");
    for x in &xs {
        let v: f64 = x[4..11].parse().unwrap();
        assert!((v - s.iout).abs() < 0.003, "{x}");
    }
}

#[test]
fn numbers_parse_in_scpi_forms_and_suffixes() {
    assert_eq!(parse_number("12"), Some(12.0));
    assert_eq!(parse_number("1.5E+00"), Some(1.5));
    assert_eq!(parse_number("500mA"), Some(0.5));
    assert_eq!(parse_number("2.2 OHM"), Some(2.2));
    assert_eq!(parse_number("3e"), None);
    assert_eq!(parse_number("abc"), None);
    assert_eq!(parse_number(""), None);
}

proptest::proptest! {
    #[test]
    fn any_line_gets_an_answer_or_silence_never_a_panic(line in "\\PC{0,80}") {
        let mut c = Controls::default();
        for kind in InstrumentKind::ALL {
            let mut st = InstrumentState::new(kind, "p");
            let out = respond(&mut st, &line, &mut c, &snap(), &mut quiet());
            // At most one reply per ';'-separated command.
            proptest::prop_assert!(out.len() <= line.split(';').count());
            // Settings stay within what the instruments accept.
            proptest::prop_assert!(c.load.current >= 0.0 && c.load.current <= 30.0);
            proptest::prop_assert!(c.source.volts >= 0.0 && c.source.volts <= 60.0);
        }
    }
}

#[test]
fn fault_schedule_drops_garbles_and_closes() {
    let mut f = FaultSchedule::new(PortFaults {
        garbage_every: Some(2),
        drop_every: Some(3),
        close_after: Some(4),
        close_at_s: Some(1.5),
        ..Default::default()
    });
    let fates: Vec<Fate> = (0..6).map(|_| f.next_reply()).collect();
    assert_eq!(
        fates,
        [
            Fate::Send,
            Fate::GarbageThenSend,
            Fate::Drop,
            Fate::GarbageThenSend,
            Fate::Send,
            Fate::Drop
        ]
    );
    assert_eq!(
        (0..4).map(|_| f.count_command()).collect::<Vec<_>>(),
        [false, false, false, true]
    );
    assert!(!f.closed_by_time(1.0) && f.closed_by_time(1.5));
}

/// The simulated family carries names of its own: a word and a kind, never a code of letters and
/// digits that could be taken for a real product line's model number (project rule).
#[test]
fn simulated_models_are_named_not_coded() {
    let code = regex::Regex::new(r"\b[A-Z]{1,3}-?\d{1,4}\b").expect("pattern");
    for kind in InstrumentKind::ALL {
        let model = kind.model();
        assert!(!code.is_match(model), "{model} looks like a model code");
        assert!(model.split(' ').count() >= 2, "{model}");
    }
}
