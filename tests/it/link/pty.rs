//! The bench over real pseudo-terminals (the serial transport end to end): query meters,
//! a streaming meter with partial lines and garbage, stale lines, missing and busy ports.

use crate::support::link::{pty_pair, pty_responder, pty_streamer, reply, runtime, Act};
use crate::support::lock::serial;
use regulus::bench::{Bench, BenchConfig, BenchError};
use regulus::control::BenchControl;
use regulus::measure::{Quantity, Reading, Role};
use std::time::Duration;

fn config(text: &str) -> BenchConfig {
    BenchConfig::parse(text, "pty-bench.toml").unwrap_or_else(|e| panic!("{e}\n{text}"))
}

fn serial_instrument(name: &str, roles: &str, preset: &str, path: &str, extra: &str) -> String {
    format!(
        "[[instrument]]\nname = \"{name}\"\nroles = [{roles}]\npreset = \"{preset}\"\nserial = {{ port = \"{path}\", baud = 115200 }}\n{extra}\n"
    )
}

// NR3 replies as IEEE 488.2 section 8.7.4 (from memory) describes them; CR LF terminators are common
// practice on serial instruments.
#[test]
fn query_meter_over_a_pseudo_terminal() {
    let _g = serial();
    let meter = pty_responder(|line| match line {
        "*IDN?" => reply("Regulus Simulated Bench,DMM-1,SN0001,0.9\r"),
        "MEAS:VOLT:DC?" => reply("+1.20034E+01\r"),
        "MEAS:CURR:DC?" => reply("-2.50000E-03\r"),
        _ => Act::Silent,
    });
    let cfg = config(&serial_instrument(
        "dmm",
        "\"output_voltmeter\", \"output_ammeter\"",
        "scpi_meter",
        &meter.address,
        "write_terminator = \"\\r\\n\"\nread_terminator = \"\\r\\n\"\ninit = [\"*CLS\"]",
    ));
    let (m, ids) = runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        let m = bench.measure().await.unwrap();
        (m, bench.identities())
    });
    assert_eq!(m.get(Quantity::OutputVoltage), Some(12.0034));
    assert_eq!(m.get(Quantity::OutputCurrent), Some(-0.0025));
    assert_eq!(
        ids[0].identity.as_deref(),
        Some("Regulus Simulated Bench,DMM-1,SN0001,0.9")
    );
    assert!(ids[0].link.starts_with("serial /dev/"), "{}", ids[0].link);
    assert_eq!(
        meter.received(),
        vec!["*CLS", "*IDN?", "MEAS:VOLT:DC?", "MEAS:CURR:DC?"]
    );
}

const STREAM_BENCH_EXTRA: &str = "identity_query = \"\"\nreply_timeout_ms = 2000\n[instrument.reading]\npick = \"average\"\nwindow_ms = 2000\nmax_age_ms = 2000\ntags = { output_voltmeter = \"DCV\" }";

/// A streaming meter sending fixed-format lines, with a line split in two writes, garbage,
/// and lines of another quantity that the tag filter must ignore.
#[test]
fn streaming_meter_lines_are_averaged_and_filtered() {
    let _g = serial();
    let lines = vec![
        "DCV +12.0340 V OK\n".to_string(),
        "DCV +12.03".to_string(), // partial line: the rest follows in the next write
        "42 V OK\n".to_string(),
        "\u{7}%%garbage%%\n".to_string(),
        "DCI +583.20 mA OK\n".to_string(),
    ];
    let meter = pty_streamer(lines, Duration::from_millis(5), true, None);
    let cfg = config(&serial_instrument(
        "strm",
        "\"output_voltmeter\"",
        "tagged_stream_meter",
        &meter.address,
        STREAM_BENCH_EXTRA,
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        // Let a few lines arrive, then read.
        tokio::time::sleep(Duration::from_millis(100)).await;
        bench.read_role(Role::OutputVoltmeter).await
    });
    match r.unwrap().0 {
        // Mean of 12.0340 and 12.0342 in some proportion: between the two.
        Reading::Value(v) => assert!((12.0340..=12.0342).contains(&v), "{v}"),
        other => panic!("{other:?}"),
    }
}

#[test]
fn streamed_overrange_status_is_overrange() {
    let _g = serial();
    let meter = pty_streamer(
        vec!["DCV +99.9999 V OL\n".to_string()],
        Duration::from_millis(5),
        true,
        None,
    );
    let cfg = config(&serial_instrument(
        "strm",
        "\"output_voltmeter\"",
        "tagged_stream_meter",
        &meter.address,
        STREAM_BENCH_EXTRA,
    ));
    let r = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        bench.read_role(Role::OutputVoltmeter).await
    });
    assert_eq!(r.unwrap().0, Reading::Overrange);
}

/// Lines older than max_age are stale: a meter that went quiet gives no reading.
#[test]
fn stale_stream_lines_are_not_used() {
    let _g = serial();
    let meter = pty_streamer(
        vec!["DCV +5.0000 V OK\n".to_string(); 3],
        Duration::from_millis(1),
        false,
        Some("Regulus Simulated Bench,SDMM-1,SN0009,1.0".to_string()),
    );
    let cfg = config(&serial_instrument(
        "strm",
        "\"output_voltmeter\"",
        "tagged_stream_meter",
        &meter.address,
        "reply_timeout_ms = 300\n[instrument.reading]\nmax_age_ms = 50",
    ));
    let (later, id) = runtime().block_on(async {
        let bench = Bench::open(&cfg).await.unwrap();
        let id = bench.identities()[0].identity.clone();
        // The three lines were sent within a few milliseconds; wait well past max_age.
        tokio::time::sleep(Duration::from_millis(400)).await;
        (bench.read_role(Role::OutputVoltmeter).await, id)
    });
    // The identity reply is told apart from stream lines: it does not match the pattern.
    assert_eq!(
        id.as_deref(),
        Some("Regulus Simulated Bench,SDMM-1,SN0009,1.0")
    );
    let e = later.unwrap_err();
    assert!(matches!(e, BenchError::NoReply { .. }), "{e:?}");
    assert!(e.to_string().contains("stream (output_voltmeter)"), "{e}");
}

/// Regression: a streamed line that arrived before the bench changed the load describes the
/// old operating point; the first reading after the change (a short circuit read "at once")
/// must not average it in.
#[test]
fn stream_lines_from_before_a_setting_change_are_not_used() {
    let _g = serial();
    let meter = pty_streamer(
        vec!["DCV +5.0000 V OK\n".to_string(); 3],
        Duration::from_millis(1),
        false,
        Some("Regulus Simulated Bench,SDMM-1,SN0010,1.0".to_string()),
    );
    // IEEE 488.2 *OPC? answers 1 once pending operations are complete.
    let load = super::peer::scpi_peer("Regulus Simulated Bench,SL-1,SN0011,1.0", |_| None);
    let meter_text = serial_instrument(
        "strm",
        "\"output_voltmeter\"",
        "tagged_stream_meter",
        &meter.address,
        "reply_timeout_ms = 300\n[instrument.reading]\nmax_age_ms = 5000",
    );
    let text = format!(
        "{meter_text}[[instrument]]\nname = \"eload\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = {{ host = \"127.0.0.1\", port = {} }}\n",
        load.address
    );
    let cfg = config(&text);
    let (before, after) = runtime().block_on(async {
        let mut bench = Bench::open(&cfg).await.unwrap();
        tokio::time::sleep(Duration::from_millis(100)).await;
        let before = bench.read_role(Role::OutputVoltmeter).await;
        bench
            .set_load(regulus::measure::LoadMode::ConstantResistance, 0.05)
            .await
            .unwrap();
        let after = bench.read_role(Role::OutputVoltmeter).await;
        (before, after)
    });
    // Fresh (within max_age) before the change: read.
    assert_eq!(before.unwrap().0, Reading::Value(5.0));
    // After the change nothing new arrived: no reading rather than the old value.
    let e = after.unwrap_err();
    assert!(matches!(e, BenchError::NoReply { .. }), "{e:?}");
    let got = load.received();
    assert!(got.iter().any(|l| l.starts_with("RES ")), "{got:?}");
    // The setting was confirmed before the stream was read again.
    assert!(got.iter().any(|l| l == "*OPC?"), "{got:?}");
}

#[test]
fn a_missing_serial_port_is_named() {
    let _g = serial();
    let cfg = config(&serial_instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        "/dev/regulus-no-such-port",
        "",
    ));
    let e = runtime()
        .block_on(async { Bench::open(&cfg).await.map(|_| ()) })
        .unwrap_err();
    assert_eq!(
        e,
        BenchError::PortMissing {
            instrument: "dmm".into(),
            port: "/dev/regulus-no-such-port".into()
        }
    );
    assert!(e.to_string().contains("does not exist"));
}

#[test]
fn a_port_held_by_another_program_is_busy() {
    let _g = serial();
    let (_master, _slave, path) = pty_pair();
    // Another program holds the port exclusively.
    let _holder = serialport::new(&path, 9600)
        .timeout(Duration::from_millis(10))
        .open_native()
        .unwrap();
    let cfg = config(&serial_instrument(
        "dmm",
        "\"output_voltmeter\"",
        "scpi_meter",
        &path,
        "",
    ));
    let e = runtime()
        .block_on(async { Bench::open(&cfg).await.map(|_| ()) })
        .unwrap_err();
    assert!(matches!(e, BenchError::PortBusy { .. }), "{e:?}");
    assert!(e.to_string().contains("busy"), "{e}");
}

#[test]
fn silence_on_a_serial_port_is_a_timeout() {
    let _g = serial();
    let meter = pty_responder(|line| match line {
        "*IDN?" => reply("Regulus Simulated Bench,TH-1,SN0004,1.0"),
        _ => Act::Silent,
    });
    let cfg = config(&serial_instrument(
        "thermo",
        "\"thermometer\"",
        "scpi_thermometer",
        &meter.address,
        "reply_timeout_ms = 80\nretries = 2",
    ));
    let e = runtime()
        .block_on(async {
            let bench = Bench::open(&cfg).await?;
            bench.read_role(Role::Thermometer).await
        })
        .unwrap_err();
    assert_eq!(
        e,
        BenchError::NoReply {
            instrument: "thermo".into(),
            command: "MEAS:TEMP?".into(),
            ms: 80
        }
    );
    // Two retries after the first attempt.
    let asked = meter
        .received()
        .iter()
        .filter(|l| *l == "MEAS:TEMP?")
        .count();
    assert_eq!(asked, 3);
}

/// One streaming meter holding two roles: lines are routed by their tag.
#[test]
fn stream_tags_route_lines_to_roles() {
    let _g = serial();
    let meter = pty_streamer(
        vec![
            "DCV +12.0000 V OK\n".to_string(),
            "DCI +583.20 mA OK\n".to_string(),
        ],
        Duration::from_millis(5),
        true,
        None,
    );
    let cfg = config(&serial_instrument(
        "strm",
        "\"output_voltmeter\", \"output_ammeter\"",
        "tagged_stream_meter",
        &meter.address,
        "identity_query = \"\"\nreply_timeout_ms = 2000\n[instrument.reading]\npick = \"newest\"\ntags = { output_voltmeter = \"DCV\", output_ammeter = \"DCI\" }",
    ));
    let m = runtime()
        .block_on(async {
            let mut bench = Bench::open(&cfg).await.unwrap();
            bench.measure().await
        })
        .unwrap();
    assert_eq!(m.get(Quantity::OutputVoltage), Some(12.0));
    let i = m.get(Quantity::OutputCurrent).unwrap();
    assert!((i - 0.5832).abs() < 1e-12, "{i}");
}
