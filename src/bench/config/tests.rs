//! Tests of the bench file rules (messages and places as the user sees them).

use super::*;
use crate::bench::config::KEY_NAMES;
use crate::bench::BenchError;
use crate::measure::Role;
use std::path::Path;
use std::time::Duration;

fn parse(t: &str) -> Result<BenchConfig, BenchError> {
    BenchConfig::parse(t, "bench.toml")
}

fn config_err(t: &str) -> (usize, usize, String) {
    match parse(t) {
        Err(BenchError::Config(crate::config::Located {
            line: Some(line),
            column: Some(column),
            message,
            ..
        })) => (line, column, message),
        other => panic!("expected a config error, got {other:?}"),
    }
}

const MIN: &str = r#"
[[instrument]]
name = "dmm"
roles = ["output_voltmeter", "output_ammeter"]
preset = "scpi_meter"
tcp = { host = "127.0.0.1" }
"#;

#[test]
fn preset_fills_commands_and_defaults() {
    let c = parse(MIN).unwrap();
    let i = &c.instruments[0];
    assert_eq!(i.link.describe(), "tcp 127.0.0.1:5025");
    assert_eq!(
        i.commands.measure[&Role::OutputVoltmeter].source(),
        "MEAS:VOLT:DC?"
    );
    assert_eq!(
        i.commands.measure[&Role::OutputAmmeter].source(),
        "MEAS:CURR:DC?"
    );
    assert_eq!(i.identity_query.as_deref(), Some("*IDN?"));
    assert_eq!(i.read_terminator, "\n");
    assert_eq!(i.reply_timeout, Duration::from_millis(1000));
    assert_eq!(i.reading, ReadingStyle::Query);
    assert!(i.safe_state.is_empty());
}

#[test]
fn load_safe_state_defaults_to_input_off() {
    let c = parse(
        r#"
[[instrument]]
name = "eload"
roles = ["load", "output_ammeter"]
preset = "scpi_load"
serial = { port = "/dev/ttyUSB1", baud = 115200, parity = "even", stop_bits = 2 }
"#,
    )
    .unwrap();
    let i = &c.instruments[0];
    assert_eq!(i.safe_state, vec!["INP OFF".to_string()]);
    assert_eq!(i.link.describe(), "serial /dev/ttyUSB1 @ 115200 8E2");
    assert_eq!(
        i.commands
            .get(CommandKey::LoadSetCurrent)
            .unwrap()
            .render(0.5)
            .unwrap(),
        "CURR 0.5000"
    );
}

#[test]
fn unknown_key_names_line_and_column() {
    let (line, col, msg) = config_err(
        "[[instrument]]\nname = \"dmm\"\nroles = [\"thermometer\"]\npreset = \"scpi_meter\"\ntcp = { host = \"h\" }\nbaud_rate = 9600\n",
    );
    assert_eq!((line, col), (6, 1));
    assert!(msg.contains("unknown field `baud_rate`"), "{msg}");
}

#[test]
fn bad_template_points_at_the_string() {
    let (line, col, msg) = config_err(
        "[[instrument]]\nname = \"ld\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = { host = \"h\" }\n[instrument.commands]\nload_set_current = \"CURR {amps}\"\n",
    );
    assert_eq!((line, col), (7, 20));
    assert!(
        msg.contains("instrument 'ld'") && msg.contains("{value}"),
        "{msg}"
    );
}

#[test]
fn unknown_role_and_preset_are_explained() {
    let (line, _, msg) = config_err(
        "[[instrument]]\nname = \"x\"\nroles = [\"voltmeter\"]\ntcp = { host = \"h\" }\n",
    );
    assert_eq!(line, 3);
    assert!(msg.contains("output_voltmeter"), "{msg}");
    let (line, _, msg) = config_err(
        "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"fancy\"\ntcp = { host = \"h\" }\n",
    );
    assert_eq!(line, 4);
    assert!(msg.contains("scpi_thermometer"), "{msg}");
}

#[test]
fn missing_measuring_command_is_named() {
    let (_, _, msg) = config_err(
        "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\ntcp = { host = \"h\" }\n",
    );
    assert!(msg.contains("measure_temperature"), "{msg}");
}

#[test]
fn role_on_two_instruments_is_refused() {
    let t = format!("{MIN}{}", MIN.replace("\"dmm\"", "\"dmm2\""));
    let (_, _, msg) = config_err(&t);
    assert!(msg.contains("held by both 'dmm' and 'dmm2'"), "{msg}");
}

#[test]
fn link_must_be_given_once() {
    let (_, _, msg) = config_err(
        "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"scpi_thermometer\"\n",
    );
    assert!(msg.contains("no link"), "{msg}");
}

#[test]
fn stream_preset_with_tags() {
    let c = parse(
        r#"
[[instrument]]
name = "strm"
roles = ["output_voltmeter", "output_ammeter"]
preset = "tagged_stream_meter"
serial = { port = "/dev/pts/9" }
[instrument.reading]
pick = "average"
window_ms = 300
tags = { output_voltmeter = "DCV", output_ammeter = "DCI" }
"#,
    )
    .unwrap();
    match &c.instruments[0].reading {
        ReadingStyle::Stream {
            pick, window, tags, ..
        } => {
            assert_eq!(*pick, StreamPick::Average);
            assert_eq!(*window, Duration::from_millis(300));
            assert_eq!(tags[&Role::OutputAmmeter], "DCI");
        }
        other => panic!("{other:?}"),
    }
    // Two measuring roles without tags is ambiguous.
    let (_, _, msg) = config_err(
        "[[instrument]]\nname = \"s\"\nroles = [\"output_voltmeter\", \"output_ammeter\"]\npreset = \"tagged_stream_meter\"\nserial = { port = \"/dev/pts/9\" }\n",
    );
    assert!(msg.contains("tags"), "{msg}");
}

#[test]
fn bad_pattern_is_reported_at_its_line() {
    let (line, _, msg) = config_err(
        "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\npreset = \"scpi_thermometer\"\ntcp = { host = \"h\" }\n[instrument.reply]\npattern = '(\\d+)'\n",
    );
    assert_eq!(line, 7);
    assert!(msg.contains("named capture 'value'"), "{msg}");
}

// The streamed line format of docs/ARCHITECTURE.md ("DCV +12.0341 V OK", status OL =
// overrange), read with the shipped example file and with the preset.
#[test]
fn shipped_stream_example_reads_the_documented_line_format() {
    use crate::measure::Reading;
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/bench-stream-meter.toml");
    let example = BenchConfig::load(&path).unwrap();
    let preset = parse(
        "[[instrument]]\nname = \"s\"\nroles = [\"output_voltmeter\"]\npreset = \"tagged_stream_meter\"\nserial = { port = \"/dev/pts/9\" }\n",
    )
    .unwrap();
    for cfg in [example, preset] {
        let p = &cfg.instruments[0].reply;
        assert_eq!(p.parse("DCV +12.0341 V OK"), Ok(Reading::Value(12.0341)));
        assert_eq!(p.parse("DCV -0.5000 mV OK"), Ok(Reading::Value(-0.0005)));
        assert_eq!(p.parse("DCV +99.9999 V OL"), Ok(Reading::Overrange));
        assert!(p.parse("DCV +12.03").is_err());
        assert_eq!(p.parse_tagged("DCV +1.0 V OK").unwrap().0, Some("DCV"));
    }
}

#[test]
fn line_column_counts_characters() {
    assert_eq!(line_column("ab\ncd", 4), (2, 2));
    assert_eq!(line_column("\u{b5}x", 2), (1, 2));
    assert_eq!(line_column("", 10), (1, 1));
}

#[test]
fn the_shipped_bench_files_parse() {
    for f in [
        "bench-template.toml",
        "bench-stream-meter.toml",
        "bench-loopback-example.toml",
    ] {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("config").join(f);
        if let Err(e) = BenchConfig::load(&path) {
            panic!("{f}: {e}");
        }
    }
}

// Regression: the commands table is read through the key table; an unknown key, a wrong type
// and an array in its place are refused at the same place with the same words as serde's own
// struct reader gives.
#[test]
fn commands_table_refuses_what_serde_refused() {
    let base = "[[instrument]]\nname = \"x\"\nroles = [\"thermometer\"]\ntcp = { host = \"h\" }\n";
    let (line, col, msg) = config_err(&format!("{base}[instrument.commands]\nfoo = \"a\"\n"));
    assert_eq!((line, col), (6, 1));
    assert_eq!(
        msg,
        format!(
            "unknown field `foo`, expected one of {}",
            KEY_NAMES.map(|k| format!("`{k}`")).join(", ")
        )
    );
    let (line, col, msg) = config_err(&format!(
        "{base}[instrument.commands]\nmeasure_temperature = 5\n"
    ));
    assert_eq!(
        (line, col, msg.as_str()),
        (6, 23, "invalid type: integer `5`, expected a string")
    );
    let (line, col, msg) = config_err(&base.replace(
        "tcp = { host = \"h\" }\n",
        "tcp = { host = \"h\" }\ncommands = [\"A?\"]\n",
    ));
    assert_eq!(
        (line, col, msg.as_str()),
        (
            5,
            12,
            "invalid length 1, expected struct RawCommands with 14 elements"
        )
    );
}

// A bench file error with no place of its own points at the file's start, as before.
#[test]
fn an_error_without_a_place_points_at_the_file_start() {
    let e = parse("[bench]\nname = \"a\"\n").unwrap_err();
    assert_eq!(
        e.to_string(),
        "bench.toml:1:1: no instruments: add at least one [[instrument]] table (see config/bench-template.toml)"
    );
    assert!(e.is_config());
}

const LOAD_HEAD: &str = r#"
[[instrument]]
name = "eload"
roles = ["load"]
tcp = { host = "127.0.0.1" }
"#;

// Regression: a blank load_input_off was accepted and the load stayed on after the run.
#[test]
fn blank_commands_are_refused_with_their_place() {
    let t = format!(
        "{LOAD_HEAD}[instrument.commands]\nload_set_current = \"CURR {{value:.4}}\"\nload_input_on = \"INP ON\"\nload_input_off = \"  \"\n"
    );
    let (line, _, msg) = config_err(&t);
    assert_eq!(line, 9, "{msg}");
    assert!(msg.contains("load_input_off is blank"), "{msg}");
    let t = format!("{LOAD_HEAD}preset = \"scpi_load\"\nsafe_state = [\"INP OFF\", \"\"]\n");
    let (_, _, msg) = config_err(&t);
    assert!(msg.contains("safe_state entry 2 is blank"), "{msg}");
}

// IEEE 488.2 section 10.19: *OPC? answers "1"; any other confirm query must say what its
// reply is, so no other line can confirm a setting.
#[test]
fn confirm_queries_have_an_expected_reply() {
    let c = parse(&format!("{LOAD_HEAD}preset = \"scpi_load\"\n")).unwrap();
    let confirm = c.instruments[0].lockstep.confirm.clone().unwrap();
    assert_eq!(confirm.query, "*OPC?");
    assert!(confirm.expect.is_match("1"));
    assert!(confirm.expect.is_match("+1"));
    assert!(!confirm.expect.is_match("+1.20000E+01"));
    assert!(!confirm.expect.is_match("10"));
    let (_, _, msg) = config_err(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\nconfirm_query = \"STAT?\"\n"
    ));
    assert!(msg.contains("needs confirm_reply"), "{msg}");
    let c = parse(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\nconfirm_query = \"STAT?\"\nconfirm_reply = \"^READY$\"\n"
    ))
    .unwrap();
    assert!(c.instruments[0]
        .lockstep
        .confirm
        .as_ref()
        .unwrap()
        .expect
        .is_match("READY"));
}

#[test]
fn scpi_presets_read_settings_back_and_check_the_error_queue() {
    let c = parse(&format!("{LOAD_HEAD}preset = \"scpi_load\"\n")).unwrap();
    let ls = &c.instruments[0].lockstep;
    assert_eq!(ls.readback[&CommandKey::LoadSetCurrent].query(), "CURR?");
    assert_eq!(ls.readback[&CommandKey::LoadInputOff].query(), "INP?");
    let eq = ls.error_query.as_ref().unwrap();
    assert_eq!(eq.query, "SYST:ERR?");
    assert!(eq.none.is_match("+0,\"No error\""));
    assert!(!eq.none.is_match("-222,\"Data out of range\""));
    // A command the file replaces loses the preset's readback; the file may give its own.
    let c = parse(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\n[instrument.commands]\nload_set_current = \"ISET {{value:.3}}\"\n[instrument.readback]\nload_input_on = {{ query = \"STAT?\", expect = \"INP=1\" }}\n"
    ))
    .unwrap();
    let ls = &c.instruments[0].lockstep;
    assert!(!ls.readback.contains_key(&CommandKey::LoadSetCurrent));
    assert_eq!(ls.readback[&CommandKey::LoadInputOn].query(), "STAT?");
    // A switch cannot be compared with a number, a value must not be matched as text.
    let (_, _, msg) = config_err(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\n[instrument.readback]\nload_input_on = \"INP?\"\n"
    ));
    assert!(msg.contains("takes no value"), "{msg}");
}

#[test]
fn acknowledging_instruments_and_unit_texts_are_checked() {
    let c = parse(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\nacknowledge = {{ success = \"^ACK$\", error = \"^NAK\" }}\n"
    ))
    .unwrap();
    let ack = c.instruments[0].lockstep.acknowledge.clone().unwrap();
    assert!(ack.success.is_match("ACK") && ack.error.is_match("NAK 3"));
    let (_, _, msg) = config_err(&format!(
        "{LOAD_HEAD}preset = \"scpi_load\"\nacknowledge = {{ success = \"(\", error = \"^NAK\" }}\n"
    ));
    assert!(msg.contains("not a valid regular expression"), "{msg}");
    let c = parse(&format!(
        "{}[instrument.reply]\nunits = {{ output_voltmeter = \"VDC\" }}\n",
        MIN
    ))
    .unwrap();
    assert_eq!(
        c.instruments[0].expected_unit(Role::OutputVoltmeter),
        crate::protocol::ExpectedUnit::Text("VDC".into())
    );
    let (_, _, msg) = config_err(&format!(
        "{}[instrument.reply]\nunits = {{ thermometer = \"K\" }}\n",
        MIN
    ));
    assert!(
        msg.contains("not one of this instrument's measuring roles"),
        "{msg}"
    );
}
