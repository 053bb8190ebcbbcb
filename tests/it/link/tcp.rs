//! The bench over loopback TCP against test-side responders: reply formats, identity,
//! concurrent reads, garbage, timeouts, closed and refused connections, safe state.

use super::peer::{scpi_peer, settings};
use crate::support::link::{reply, runtime, tcp_responder, Act};
use crate::support::lock::serial;
use regulus::bench::{Bench, BenchConfig, BenchError};
use regulus::control::BenchControl;
use regulus::measure::{LoadMode, Quantity, Reading, Role};
use std::collections::VecDeque;
use std::sync::{Arc, Condvar, Mutex};
use std::time::Duration;

const IDN: &str = "Regulus Simulated Bench,DMM-7,SN20261201-07,2.1.0";

fn instrument(name: &str, roles: &str, preset: &str, port: &str, extra: &str) -> String {
    format!(
        "[[instrument]]\nname = \"{name}\"\nroles = [{roles}]\npreset = \"{preset}\"\ntcp = {{ host = \"127.0.0.1\", port = {port} }}\n{extra}\n"
    )
}

fn config(text: &str) -> BenchConfig {
    BenchConfig::parse(text, "test-bench.toml").unwrap_or_else(|e| panic!("{e}\n{text}"))
}

/// A meter that answers `*IDN?` and gives the next canned line for every measuring query.
fn canned_meter(replies: Vec<&str>) -> crate::support::link::Responder {
    let mut queue: VecDeque<String> = replies.into_iter().map(String::from).collect();
    tcp_responder(move |line| match line {
        "*IDN?" => reply(IDN),
        l if l.starts_with("MEAS") => match queue.pop_front() {
            Some(r) => reply(&r),
            None => Act::Silent,
        },
        _ => Act::Silent,
    })
}

// Reply forms: IEEE 488.2 section 8.7, section numbers from memory (NR1, NR2, NR3 response data); SCPI 1999 vol. 1,
// 7.2.1.5 (9.9E37 = overrange); SI prefixes from the BIPM SI Brochure, table 7.
#[test]
fn reply_forms_of_scpi_instruments_are_read() {
    let _g = serial();
    let cases: Vec<(&str, Reading)> = vec![
        ("+1.20034E+01", Reading::Value(12.0034)), // NR3 as the simulated bench sends it
        ("12", Reading::Value(12.0)),              // NR1
        ("-0.0125", Reading::Value(-0.0125)),      // NR2
        ("5.832E-1", Reading::Value(0.5832)),      // NR3, no exponent sign
        ("583.2 mV", Reading::Value(0.5832)),      // unit with SI prefix
        ("583.2m", Reading::Value(0.5832)),        // engineering suffix
        ("9.9E37", Reading::Overrange),            // SCPI overrange
        ("+9.90000000E+37", Reading::Overrange),   // SCPI overrange, long NR3
        ("OL", Reading::Overrange),                // common practice: display token
    ];
    let meter = canned_meter(cases.iter().map(|c| c.0).collect());
    let cfg = config(&instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &meter.address,
        "retries = 0",
    ));
    let rt = runtime();
    rt.block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        for (raw, want) in &cases {
            let (got, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
            match (got, want) {
                (Reading::Value(g), Reading::Value(w)) => {
                    assert!((g - w).abs() <= 1e-12 * w.abs(), "{raw}: got {g}, want {w}")
                }
                _ => assert_eq!(got, *want, "{raw}"),
            }
        }
    });
    let sent = meter.received();
    assert_eq!(sent[0], "*IDN?");
    assert!(sent[1..].iter().all(|l| l == "MEAS:VOLT:DC?"), "{sent:?}");
}

#[test]
fn a_meter_reporting_milliamperes_is_scaled() {
    let _g = serial();
    let meter = canned_meter(vec!["250", "1500"]);
    let cfg = config(&instrument(
        "ma-meter",
        "\"output_ammeter\"",
        "scpi_meter",
        &meter.address,
        "[instrument.reply]\nscale = 0.001",
    ));
    runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        assert_eq!(
            bench.read_role(Role::OutputAmmeter).await.unwrap().0,
            Reading::Value(0.25)
        );
        assert_eq!(
            bench.read_role(Role::OutputAmmeter).await.unwrap().0,
            Reading::Value(1.5)
        );
    });
}

// IEEE 488.2 section 10.14: the *IDN? reply is maker, model, serial number, firmware.
#[test]
fn identity_is_queried_on_open_and_split_into_its_fields() {
    let _g = serial();
    let meter = canned_meter(vec![]);
    let cfg = config(&instrument(
        "dmm",
        "\"thermometer\"",
        "scpi_thermometer",
        &meter.address,
        "",
    ));
    let ids = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.identities()
    });
    assert_eq!(ids.len(), 1);
    assert_eq!(ids[0].name, "dmm");
    assert_eq!(ids[0].roles, vec![Role::Thermometer]);
    assert!(ids[0].link.starts_with("tcp 127.0.0.1:"));
    let raw = ids[0].identity.as_deref().unwrap();
    let f = regulus::protocol::parse_identity(raw).unwrap();
    assert_eq!(
        (
            f.maker.as_str(),
            f.model.as_str(),
            f.serial.as_str(),
            f.firmware.as_str()
        ),
        ("Regulus Simulated Bench", "DMM-7", "SN20261201-07", "2.1.0")
    );
}

/// Each meter holds its reply until all k queries have arrived. A reader that waits for one
/// reply before asking the next meter never gets there: the first meter gives up after its
/// own wait and answers with a line that cannot be parsed, so a sequential reader fails.
#[test]
fn all_meters_of_a_step_are_read_concurrently() {
    let _g = serial();
    const K: usize = 4;
    let gate = Arc::new((Mutex::new(0usize), Condvar::new()));
    let roles = [
        ("vout", "\"output_voltmeter\"", "+1.20000E+01"),
        ("iout", "\"output_ammeter\"", "+5.00000E-01"),
        ("vin", "\"input_voltmeter\"", "+1.80000E+01"),
        ("temp", "\"thermometer\"", "+4.10000E+01"),
    ];
    let mut responders = Vec::new();
    let mut text = String::new();
    for (name, role, value) in roles {
        let gate = Arc::clone(&gate);
        let value = value.to_string();
        let r = tcp_responder(move |line| {
            if line == "*IDN?" {
                return reply(IDN);
            }
            let (count, cv) = &*gate;
            let mut n = count.lock().unwrap();
            *n += 1;
            cv.notify_all();
            let (n, res) = cv
                .wait_timeout_while(n, Duration::from_secs(3), |n| *n < K)
                .unwrap();
            drop(n);
            if res.timed_out() {
                reply("SEQUENTIAL-READ")
            } else {
                reply(&value)
            }
        });
        text.push_str(&instrument(
            name,
            role,
            "scpi_meter",
            &r.address,
            "reply_timeout_ms = 10000\nretries = 0",
        ));
        responders.push(r);
    }
    let cfg = config(&text);
    let m = runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        bench.measure().await
    });
    let m = m.unwrap_or_else(|e| panic!("meters were not read concurrently: {e}"));
    assert_eq!(m.get(Quantity::OutputVoltage), Some(12.0));
    assert_eq!(m.get(Quantity::OutputCurrent), Some(0.5));
    assert_eq!(m.get(Quantity::InputVoltage), Some(18.0));
    assert_eq!(m.get(Quantity::Temperature), Some(41.0));
}

#[test]
fn stray_lines_before_the_reply_are_skipped() {
    let _g = serial();
    let meter = tcp_responder(|line| match line {
        "*IDN?" => reply(IDN),
        _ => Act::Send(b"\r\n#noise#\n+3.30000E+00\n".to_vec()),
    });
    let cfg = config(&instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &meter.address,
        "",
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.read_role(Role::OutputVoltmeter).await
    });
    assert_eq!(r.unwrap().0, Reading::Value(3.3));
}

#[test]
fn garbage_reply_names_instrument_command_raw_line_and_pattern() {
    let _g = serial();
    let meter = tcp_responder(|line| match line {
        "*IDN?" => reply(IDN),
        _ => Act::Send(b"\x01\xffVOLTS??\n".to_vec()),
    });
    let cfg = config(&instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &meter.address,
        "reply_timeout_ms = 150\nretries = 1",
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.read_role(Role::OutputVoltmeter).await
    });
    let e = r.unwrap_err();
    assert!(matches!(e, BenchError::Unparseable { .. }), "{e:?}");
    let msg = e.to_string();
    assert!(
        msg.contains("'dmm'") && msg.contains("MEAS:VOLT:DC?"),
        "{msg}"
    );
    assert!(msg.contains("VOLTS??") && msg.contains("pattern"), "{msg}");
    // One retry: the query was sent twice.
    let n = meter
        .received()
        .iter()
        .filter(|l| *l == "MEAS:VOLT:DC?")
        .count();
    assert_eq!(n, 2);
}

#[test]
fn silence_is_a_timeout_naming_the_command() {
    let _g = serial();
    let meter = tcp_responder(|line| match line {
        "*IDN?" => reply(IDN),
        _ => Act::Silent,
    });
    let cfg = config(&instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &meter.address,
        "reply_timeout_ms = 100\nretries = 0",
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.read_role(Role::OutputVoltmeter).await
    });
    let e = r.unwrap_err();
    assert_eq!(
        e,
        BenchError::NoReply {
            instrument: "dmm".into(),
            command: "MEAS:VOLT:DC?".into(),
            ms: 100
        }
    );
    assert!(e.to_string().contains("within 100 ms"));
}

#[test]
fn a_closed_connection_is_reported_not_a_panic() {
    let _g = serial();
    let meter = tcp_responder(|line| match line {
        "*IDN?" => reply(IDN),
        _ => Act::Close,
    });
    let cfg = config(&instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &meter.address,
        "",
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.read_role(Role::OutputVoltmeter).await
    });
    let e = r.unwrap_err();
    assert!(matches!(e, BenchError::Closed { .. }), "{e:?}");
    assert!(e.to_string().contains("connection closed"), "{e}");
}

#[test]
fn a_refused_connection_says_what_to_check() {
    let _g = serial();
    let port = {
        let l = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
        l.local_addr().unwrap().port()
    };
    let cfg = config(&instrument(
        "eload",
        "\"load\"",
        "scpi_load",
        &port.to_string(),
        "",
    ));
    let e = runtime()
        .block_on(async { Bench::open(&cfg).await.map(|_| ()) })
        .unwrap_err();
    assert_eq!(
        e,
        BenchError::ConnectionRefused {
            instrument: "eload".into(),
            addr: format!("127.0.0.1:{port}")
        }
    );
    assert!(e.to_string().contains("listening"));
}

/// The load dies mid-run; the safe state still reaches the source (and the dead load is
/// reported, so the user checks it by hand).
#[test]
fn safe_state_reaches_every_instrument_when_one_fails() {
    let _g = serial();
    // Both answer *OPC?, their error queue and readbacks as SCPI instruments do (the presets
    // confirm settings with them).
    let load = scpi_peer("Regulus Simulated Bench,LOAD-2,SN0002,1.0", |line| {
        (line == "MEAS:CURR?").then_some(Act::Close)
    });
    let source = scpi_peer("Regulus Simulated Bench,PSU-3,SN0003,1.0", |line| {
        (line == "MEAS:VOLT?").then(|| reply("+1.80000E+01"))
    });
    let text = format!(
        "{}{}",
        instrument(
            "eload",
            "\"load\", \"output_ammeter\"",
            "scpi_load",
            &load.address,
            "retries = 0"
        ),
        instrument(
            "psu",
            "\"input_source\", \"input_voltmeter\"",
            "scpi_source",
            &source.address,
            ""
        )
    );
    let cfg = config(&text);
    let (measured, errors) = runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        bench.set_source_voltage(18.0).await.unwrap();
        bench.set_source_output(true).await.unwrap();
        bench
            .set_load(LoadMode::ConstantCurrent, 0.25)
            .await
            .unwrap();
        bench.set_load_input(true).await.unwrap();
        let m = bench.measure().await;
        (m, bench.safe_state().await)
    });
    let e = measured.unwrap_err();
    assert_eq!(e.instrument, "eload");
    assert!(errors.iter().any(|e| e.instrument == "eload"), "{errors:?}");
    assert!(errors.iter().all(|e| e.instrument != "psu"), "{errors:?}");
    // Give the responder thread a moment to log the last line it received.
    let mut got = source.received();
    for _ in 0..100 {
        if got.last().map(String::as_str) == Some("OUTP OFF") {
            break;
        }
        std::thread::sleep(Duration::from_millis(10));
        got = source.received();
    }
    // Each setting is confirmed with *OPC?, the error queue read and the setting read back
    // before the next; the safe state is sent as is.
    assert_eq!(
        got,
        vec![
            "*IDN?",
            "VOLT 18.0000",
            "*OPC?",
            "SYST:ERR?",
            "VOLT?",
            "OUTP ON",
            "*OPC?",
            "SYST:ERR?",
            "OUTP?",
            "MEAS:VOLT?",
            "OUTP OFF"
        ]
    );
    assert_eq!(
        &load.received()[..12],
        &[
            "*IDN?",
            "FUNC CURR",
            "CURR 0.2500",
            "*OPC?",
            "SYST:ERR?",
            "FUNC?",
            "CURR?",
            "INP ON",
            "*OPC?",
            "SYST:ERR?",
            "INP?",
            "MEAS:CURR?"
        ]
    );
}

/// CC / CV / CR (the trade's electronic load modes) each send their mode command and the
/// setpoint in the template's format; a mode the bench file gives no command for is refused
/// with the key to add.
#[test]
fn load_modes_render_their_commands() {
    let _g = serial();
    let load = scpi_peer("Regulus Simulated Bench,LOAD-2,SN0002,1.0", |_| None);
    let custom = tcp_responder(|_| Act::Silent);
    let text = format!(
        "{}[[instrument]]\nname = \"cc-only\"\nroles = [\"load\"]\ntcp = {{ host = \"127.0.0.1\", port = {} }}\n[instrument.commands]\nload_set_current = \"ISET {{value*1000:d}}\"\nload_input_on = \"ON\"\nload_input_off = \"OFF\"\n",
        instrument("eload", "\"load\"", "scpi_load", &load.address, ""),
        custom.address
    );
    // Two loads on one bench is refused (one instrument per role): check each on its own.
    assert!(BenchConfig::parse(&text, "x").is_err());
    let first = config(&instrument(
        "eload",
        "\"load\"",
        "scpi_load",
        &load.address,
        "",
    ));
    let second = config(&text[text.find("[[instrument]]\nname = \"cc-only\"").unwrap()..]);
    let rt = runtime();
    rt.block_on(async {
        let mut b = Bench::open(&first).await.unwrap();
        b.set_load(LoadMode::ConstantVoltage, 11.5).await.unwrap();
        b.set_load(LoadMode::ConstantResistance, 24.0)
            .await
            .unwrap();
        b.set_load(LoadMode::ConstantCurrent, 0.125).await.unwrap();
        b.set_load_input(false).await.unwrap();
        let mut c = Bench::open(&second).await.unwrap();
        c.set_load(LoadMode::ConstantCurrent, 0.25).await.unwrap();
        let e = c
            .set_load(LoadMode::ConstantResistance, 10.0)
            .await
            .unwrap_err();
        assert_eq!(e.instrument, "cc-only");
        assert!(e.detail().contains("load_set_resistance"), "{e}");
        assert!(c.safe_state().await.is_empty());
    });
    std::thread::sleep(Duration::from_millis(50));
    // The settings in the template's format (the confirmations and readbacks between them are
    // queries).
    assert_eq!(
        settings(&load.received()),
        vec![
            "FUNC VOLT",
            "VOLT 11.5000",
            "FUNC RES",
            "RES 24.0000",
            "FUNC CURR",
            "CURR 0.1250",
            "INP OFF"
        ]
    );
    // Default safe state of a load without one: its input-off command.
    assert_eq!(custom.received(), vec!["ISET 250", "OFF"]);
}

/// command_gap_ms is a least time between commands: three commands take at least two gaps.
/// (A lower bound only, so a slow machine cannot make this fail.)
#[test]
fn command_gap_spaces_commands() {
    let _g = serial();
    let load = scpi_peer("Regulus Simulated Bench,LOAD-2,SN0002,1.0", |_| None);
    let cfg = config(&instrument(
        "eload",
        "\"load\"",
        "scpi_load",
        &load.address,
        "command_gap_ms = 40",
    ));
    let elapsed = runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        let t0 = std::time::Instant::now();
        b.set_load(LoadMode::ConstantCurrent, 0.1).await.unwrap(); // two commands
        b.set_load_input(true).await.unwrap(); // a third
        t0.elapsed()
    });
    assert!(elapsed >= Duration::from_millis(80), "{elapsed:?}");
}
