//! Lockstep at the link, against test-side instruments over loopback TCP: a reply later than
//! its deadline never answers a later query, a confirmation cannot come from an earlier line,
//! readbacks and the error queue catch a setting that was not applied, acknowledgements catch
//! a refusal. Each error names the instrument, the command and the raw reply.

use super::peer::scpi_peer;
use crate::support::link::{reply, runtime, tcp_responder, Act};
use crate::support::lock::serial;
use regulus::bench::{Bench, BenchConfig, BenchError};
use regulus::control::BenchControl;
use regulus::measure::{LoadMode, Reading, Role};
use std::time::Duration;

const IDN: &str = "Regulus Simulated Bench,LS-1,SN0101,1.0";

fn load_bench(port: &str, extra: &str) -> BenchConfig {
    let text = format!(
        "[[instrument]]\nname = \"eload\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = {{ host = \"127.0.0.1\", port = {port} }}\nreply_timeout_ms = 200\n{extra}\n"
    );
    BenchConfig::parse(&text, "bench.toml").unwrap_or_else(|e| panic!("{e}"))
}

fn fault(e: &regulus::control::ControlError) -> BenchError {
    e.fault()
        .and_then(|f| f.downcast_ref::<BenchError>())
        .cloned()
        .unwrap_or_else(|| panic!("{e}"))
}

// Regression: a meter reply that came after its deadline was taken as the answer to the next
// query (a knee point recorded at the previous point's voltage).
#[test]
fn a_late_reply_is_never_the_answer_to_a_later_query() {
    let _g = serial();
    let mut n = 0;
    let meter = tcp_responder(move |line| match line {
        "*IDN?" => reply(IDN),
        "MEAS:VOLT:DC?" => {
            n += 1;
            if n == 1 {
                // Answered 400 ms late: twice the deadline.
                std::thread::sleep(Duration::from_millis(400));
                reply("+1.00000E+00")
            } else {
                reply("+2.00000E+00")
            }
        }
        _ => Act::Silent,
    });
    let text = format!(
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\ntcp = {{ host = \"127.0.0.1\", port = {} }}\nreply_timeout_ms = 200\n",
        meter.address
    );
    let cfg = BenchConfig::parse(&text, "bench.toml").unwrap();
    let (first, second, retries) = runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        let first = b.read_role(Role::OutputVoltmeter).await.unwrap().0;
        let second = b.read_role(Role::OutputVoltmeter).await.unwrap().0;
        (first, second, BenchControl::take_retries(&mut b))
    });
    // The late "1.0" belongs to the first query; it is discarded, and both readings are of
    // queries sent after it.
    assert_eq!(first, Reading::Value(2.0));
    assert_eq!(second, Reading::Value(2.0));
    assert!(retries > 0);
    // The link was resynchronised with the identity query before the retry.
    let got = meter.received();
    assert_eq!(
        got,
        vec![
            "*IDN?",
            "MEAS:VOLT:DC?",
            "*IDN?",
            "MEAS:VOLT:DC?",
            "MEAS:VOLT:DC?"
        ]
    );
}

// IEEE 488.2 section 10.19: *OPC? answers once the settings are applied; a late "1" confirms
// the settings before it and nothing after it.
#[test]
fn a_late_confirmation_confirms_only_its_own_setting() {
    let _g = serial();
    let mut opc = 0;
    let load = scpi_peer(IDN, move |line| {
        if line == "*OPC?" {
            opc += 1;
            if opc == 1 {
                std::thread::sleep(Duration::from_millis(400));
            }
        }
        None
    });
    let cfg = load_bench(&load.address, "");
    runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        b.set_load(LoadMode::ConstantCurrent, 0.25).await.unwrap();
        b.set_load_input(true).await.unwrap();
    });
    let got = load.received();
    // After the late confirmation: resynchronised, confirmed again, then the error queue and
    // the readbacks of the first setting, before the second setting is sent.
    let i = got.iter().position(|l| l == "INP ON").unwrap();
    assert_eq!(
        &got[1..i],
        &[
            "FUNC CURR",
            "CURR 0.2500",
            "*OPC?",
            "*IDN?",
            "*OPC?",
            "SYST:ERR?",
            "FUNC?",
            "CURR?"
        ]
    );
}

#[test]
fn a_setting_that_does_not_read_back_stops_naming_the_instrument() {
    let _g = serial();
    // A load that takes CURR but keeps its old setpoint.
    let load = scpi_peer(IDN, |line| (line == "CURR?").then(|| reply("+0.00000E+00")));
    let cfg = load_bench(&load.address, "");
    let e = runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        b.set_load(LoadMode::ConstantCurrent, 0.25)
            .await
            .unwrap_err()
    });
    let text = e.to_string();
    assert!(matches!(fault(&e), BenchError::Readback { .. }), "{text}");
    for part in ["'eload'", "CURR 0.2500", "'CURR?'", "+0.00000E+00"] {
        assert!(text.contains(part), "{part} in {text}");
    }
    // Sent again once (retries = 1) before giving up.
    let sent = load.received();
    assert_eq!(
        sent.iter().filter(|l| *l == "CURR 0.2500").count(),
        2,
        "{sent:?}"
    );
}

#[test]
fn an_error_in_the_queue_is_a_refusal() {
    let _g = serial();
    let load = scpi_peer(IDN, |line| {
        (line == "SYST:ERR?").then(|| reply("-222,\"Data out of range\""))
    });
    let cfg = load_bench(&load.address, "");
    let e = runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        b.set_load(LoadMode::ConstantResistance, 0.0005)
            .await
            .unwrap_err()
    });
    let text = e.to_string();
    assert!(matches!(fault(&e), BenchError::Refused { .. }), "{text}");
    assert!(
        text.contains("'eload'") && text.contains("RES 0.0005"),
        "{text}"
    );
    assert!(text.contains("Data out of range"), "{text}");
}

// Regression: a load answering every command had its answers drained as stale lines, so a
// refused command passed unnoticed.
#[test]
fn an_acknowledging_instrument_refusing_a_command_is_stopped() {
    let _g = serial();
    let load = scpi_peer(IDN, |line| {
        if line.starts_with("CURR ") {
            Some(reply("NAK 3"))
        } else if line == "INP?" {
            Some(reply("0"))
        } else if !line.ends_with('?') {
            Some(reply("ACK"))
        } else {
            None
        }
    });
    let cfg = load_bench(
        &load.address,
        "acknowledge = { success = \"^ACK$\", error = \"^NAK\" }",
    );
    let (e, off) = runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        let e = b
            .set_load(LoadMode::ConstantCurrent, 0.25)
            .await
            .unwrap_err();
        (e, b.set_load_input(false).await)
    });
    let text = e.to_string();
    assert!(matches!(fault(&e), BenchError::Refused { .. }), "{text}");
    assert!(
        text.contains("CURR 0.2500") && text.contains("NAK 3"),
        "{text}"
    );
    // The link is still in step: switching the input off is acknowledged and confirmed.
    off.unwrap();
}

// Regression: when a later instrument failed to connect, the ones already connected were
// left as they were (a load left on by an earlier run stayed on).
#[test]
fn instruments_already_connected_get_their_safe_state_when_a_later_one_fails() {
    let _g = serial();
    let load = scpi_peer(IDN, |_| None);
    let nobody = {
        let l = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
        l.local_addr().unwrap().port()
    };
    let text = format!(
        "[[instrument]]\nname = \"eload\"\nroles = [\"load\"]\npreset = \"scpi_load\"\ntcp = {{ host = \"127.0.0.1\", port = {} }}\n\n[[instrument]]\nname = \"psu\"\nroles = [\"input_source\"]\npreset = \"scpi_source\"\ntcp = {{ host = \"127.0.0.1\", port = {nobody} }}\n",
        load.address
    );
    let cfg = BenchConfig::parse(&text, "bench.toml").unwrap();
    let e = runtime()
        .block_on(async { Bench::open(&cfg).await.map(|_| ()) })
        .unwrap_err();
    assert!(matches!(e, BenchError::ConnectionRefused { .. }), "{e}");
    let mut got = load.received();
    for _ in 0..100 {
        if got.iter().any(|l| l == "INP OFF") {
            break;
        }
        std::thread::sleep(Duration::from_millis(10));
        got = load.received();
    }
    assert!(got.iter().any(|l| l == "INP OFF"), "{got:?}");
}

#[test]
fn instrument_side_limits_are_sent_and_confirmed() {
    let _g = serial();
    let load = scpi_peer(IDN, |_| None);
    let cfg = load_bench(
        &load.address,
        "arm_limits = [\"POW:PROT 60\", \"POW:PROT:STAT ON\"]\ndisarm_limits = [\"POW:PROT:STAT OFF\"]",
    );
    runtime().block_on(async {
        let mut b = Bench::open(&cfg).await.unwrap();
        BenchControl::limits(&mut b, true).await.unwrap();
        BenchControl::limits(&mut b, false).await.unwrap();
    });
    assert_eq!(
        &load.received()[1..],
        &[
            "POW:PROT 60",
            "POW:PROT:STAT ON",
            "*OPC?",
            "SYST:ERR?",
            "POW:PROT:STAT OFF",
            "*OPC?",
            "SYST:ERR?"
        ]
    );
}
