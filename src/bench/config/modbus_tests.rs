//! Register maps in bench files: what parses into which actions, and where mistakes are
//! reported (file:line:column).

use super::{BenchConfig, CommandKey, Fixed, Framing, LinkConfig, ModbusConfirm, Payload};
use crate::bench::BenchError;
use crate::protocol::modbus::{DataType, ObjectKind, WordOrder};
use std::time::Duration;

const LOAD: &str = r#"[[instrument]]
name = "eload"
roles = ["load"]
serial = { port = "/dev/ttyUSB0", baud = 9600, parity = "even" }

[instrument.modbus]
unit = 3

[instrument.modbus.registers]
load_mode_cc = { object = "holding", address = 0, value = 0 }
load_set_current = { object = "holding", address = 0x10, type = "f32", word_order = "low_first", unit = "mA", scale = 0.5 }
load_input_on = { object = "coil", address = 1, value = true }
load_input_off = { object = "coil", address = 1, value = false }
measure_voltage = { object = "input", address = 0x100, type = "i32", scale = 0.1, unit = "mV" }
"#;

fn err(text: &str) -> String {
    match BenchConfig::parse(text, "b.toml") {
        Err(e @ BenchError::Config(_)) => e.to_string(),
        other => panic!("expected a config error, got {other:?}"),
    }
}

#[test]
fn a_register_map_becomes_actions_and_command_texts() {
    let cfg = BenchConfig::parse(LOAD, "b.toml").unwrap();
    let i = &cfg.instruments[0];
    let m = i.modbus.as_ref().unwrap();
    assert_eq!(
        (m.framing, m.unit, m.confirm),
        (Framing::Rtu, 3, ModbusConfirm::Readback)
    );
    // 3.5 characters of 11 bits at 9600 baud: 4.01 ms (Modbus over Serial Line V1.02
    // section 2.5.1.1).
    assert_eq!(m.frame_gap, Duration::from_secs_f64(3.5 * 11.0 / 9600.0));
    let set = &m.actions[&CommandKey::LoadSetCurrent];
    assert_eq!(
        (set.object, set.address, set.count()),
        (ObjectKind::Holding, 0x10, 2)
    );
    let Payload::Number { encoding, unit, .. } = &set.payload else {
        panic!()
    };
    assert_eq!(
        (encoding.data_type, encoding.word_order),
        (DataType::F32, WordOrder::LowFirst)
    );
    assert!((encoding.scale - 0.5e-3).abs() < 1e-15, "0.5 mA per count");
    assert_eq!(unit, "mA");
    assert_eq!(
        m.actions[&CommandKey::LoadInputOff].payload,
        Payload::Fixed(Fixed::Coil(false))
    );
    // The generic rules see one command per mapped key; the safe state switches the input off.
    assert_eq!(
        i.commands.get(CommandKey::LoadSetCurrent).unwrap().source(),
        "load_set_current {value}"
    );
    assert_eq!(i.safe_state, vec!["load_input_off".to_string()]);
    assert_eq!(
        m.action_for("load_set_current 1.25").map(|a| a.key),
        Some(CommandKey::LoadSetCurrent)
    );
    assert!(i.modbus.as_ref().unwrap().identity.is_none());
    assert_eq!(
        i.link_description(),
        "modbus rtu unit 3 on serial /dev/ttyUSB0 @ 9600 8E1"
    );
    assert_eq!(i.identity_query, None);
}

#[test]
fn modbus_tcp_defaults_to_port_502_and_no_gap() {
    let text = LOAD.replace(
        r#"serial = { port = "/dev/ttyUSB0", baud = 9600, parity = "even" }"#,
        r#"tcp = { host = "192.168.0.9" }"#,
    );
    let cfg = BenchConfig::parse(&text, "b.toml").unwrap();
    let i = &cfg.instruments[0];
    let LinkConfig::Tcp(t) = &i.link else {
        panic!()
    };
    assert_eq!(t.port.get(), 502, "the port registered for Modbus TCP");
    let m = i.modbus.as_ref().unwrap();
    assert_eq!((m.framing, m.frame_gap), (Framing::Tcp, Duration::ZERO));
}

#[test]
fn mistakes_are_reported_at_their_place() {
    let e = err(&LOAD.replace("load_mode_cc =", "load_mode_xx ="));
    assert!(
        e.starts_with(
            "b.toml:10:1: instrument 'eload': modbus: unknown register entry 'load_mode_xx'"
        ),
        "{e}"
    );
    let e = err(&LOAD.replace("address = 1, value = true", "address = 1, value = 3"));
    assert!(e.starts_with("b.toml:12:"), "{e}");
    assert!(e.contains("a coil is written true or false"), "{e}");
    let e = err(&LOAD.replace("unit = \"mV\"", "unit = \"mA\""));
    assert!(e.starts_with("b.toml:14:"), "{e}");
    assert!(e.contains("is not V"), "{e}");
    let e = err(&LOAD.replace("unit = 3", "unit = 0"));
    assert!(e.starts_with("b.toml:7:8:"), "{e}");
    assert!(e.contains("1-247"), "{e}");
    let e = err(&LOAD.replace(
        "object = \"input\", address = 0x100",
        "object = \"coil\", address = 0x100",
    ));
    assert!(e.contains("measure_voltage: a number in a coil"), "{e}");
    let e = err(&LOAD.replace("address = 0x10,", "address = 65535,"));
    assert!(e.contains("run past 65535"), "{e}");
    // A role's needs are the generic rule's: a load without a setpoint command.
    let e = err(&LOAD.replace("load_set_current =", "# load_set_current ="));
    assert!(e.contains("role 'load' needs"), "{e}");
}

#[test]
fn text_instrument_settings_are_refused_with_a_register_map() {
    let e = err(&LOAD.replace(
        "[instrument.modbus]\n",
        "preset = \"scpi_load\"\n[instrument.modbus]\n",
    ));
    assert!(e.starts_with("b.toml:6:"), "{e}");
    assert!(e.contains("preset applies to text instruments"), "{e}");
    let e = err(&LOAD.replace(
        "[instrument.modbus]\n",
        "[instrument.reading]\nstyle = \"stream\"\n[instrument.modbus]\n",
    ));
    assert!(e.contains("reading applies to text instruments"), "{e}");
    let e = err(&LOAD.replace(
        "[instrument.modbus]\n",
        "safe_state = [\"INP OFF\"]\n[instrument.modbus]\n",
    ));
    assert!(e.contains("safe_state line \"INP OFF\""), "{e}");
    assert!(e.contains("load_input_off"), "{e}");
}

#[test]
fn the_shipped_modbus_example_parses() {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("config/bench-modbus.toml");
    let cfg = BenchConfig::load(&path).unwrap_or_else(|e| panic!("{e}"));
    let psu = &cfg.instruments[1];
    let LinkConfig::Tcp(t) = &psu.link else {
        panic!()
    };
    assert_eq!(t.port.get(), 502);
    assert_eq!(psu.safe_state, vec!["source_output_off".to_string()]);
    let eload = cfg.instruments[0].modbus.as_ref().unwrap();
    assert_eq!(eload.frame_gap, Duration::from_millis(5));
}

const METER: &str = r#"[[instrument]]
name = "dmm"
roles = ["output_voltmeter"]
tcp = { host = "127.0.0.1", port = 502 }

[instrument.modbus]
unit = 1

[instrument.modbus.registers]
measure_voltage = { object = "input", address = 0, type = "i16", scale = 0.001, unit = "V", overrange = OVER }
"#;

#[test]
fn overrange_raw_values_are_kept_with_the_measurement() {
    let cfg = BenchConfig::parse(&METER.replace("OVER", "[0x7FFF, 0x8000]"), "b.toml").unwrap();
    let m = cfg.instruments[0].modbus.as_ref().unwrap();
    let Payload::Number { overrange, .. } = &m.actions[&CommandKey::MeasureVoltage].payload else {
        panic!()
    };
    assert_eq!(overrange, &[0x7FFF, 0x8000]);
    let cfg = BenchConfig::parse(&METER.replace("OVER", "0xFFFF"), "b.toml").unwrap();
    let m = cfg.instruments[0].modbus.as_ref().unwrap();
    let Payload::Number { overrange, .. } = &m.actions[&CommandKey::MeasureVoltage].payload else {
        panic!()
    };
    assert_eq!(overrange, &[0xFFFF]);
}

#[test]
fn overrange_mistakes_are_reported_where_written() {
    // 0x10000 does not fit a 16-bit register; the value starts at line 10, column 105.
    let e = err(&METER.replace("OVER", "0x10000"));
    assert!(e.starts_with("b.toml:10:105:"), "{e}");
    assert!(e.contains("each 0 to 0xFFFF for i16"), "{e}");
    // A negative number is not raw bits; text is not a value.
    assert!(err(&METER.replace("OVER", "-1")).contains("overrange takes the raw"));
    assert!(err(&METER.replace("OVER", "\"max\"")).contains("overrange takes the raw"));
    // Only a measurement has an over-range value.
    let text = LOAD.replace(
        "load_input_on = { object = \"coil\", address = 1, value = true }",
        "load_input_on = { object = \"coil\", address = 1, value = true, overrange = 1 }",
    );
    let e = err(&text);
    // Line 12, at the value of overrange.
    assert!(e.starts_with("b.toml:12:75:"), "{e}");
    assert!(
        e.contains("overrange belongs to a measurement's register"),
        "{e}"
    );
}

#[test]
fn overrange_flag_mistakes_are_reported_where_written() {
    // A register needs its bit; the flag's table starts at line 10, column 130.
    let e = err(&METER.replace(
        "OVER",
        "0x7FFF, overrange_flag = { object = \"input\", address = 7 }",
    ));
    assert!(e.starts_with("b.toml:10:130:"), "{e}");
    assert!(
        e.contains("overrange_flag: the input register needs the bit that flags over range"),
        "{e}"
    );
    let e = err(&METER.replace(
        "OVER",
        "0x7FFF, overrange_flag = { object = \"input\", address = 7, bit = 16 }",
    ));
    assert!(e.contains("bit = 0-15"), "{e}");
    let e = err(&METER.replace(
        "OVER",
        "0x7FFF, overrange_flag = { object = \"coil\", address = 7, bit = 1 }",
    ));
    assert!(e.contains("is one bit: give no bit"), "{e}");
    let cfg = BenchConfig::parse(
        &METER.replace(
            "OVER",
            "0x7FFF, overrange_flag = { object = \"coil\", address = 7 }",
        ),
        "b.toml",
    )
    .unwrap();
    let m = cfg.instruments[0].modbus.as_ref().unwrap();
    let Payload::Number { overrange_flag, .. } = &m.actions[&CommandKey::MeasureVoltage].payload
    else {
        panic!()
    };
    assert_eq!(
        overrange_flag.map(|f| (f.object, f.address, f.bit)),
        Some((ObjectKind::Coil, 7, None))
    );
}
