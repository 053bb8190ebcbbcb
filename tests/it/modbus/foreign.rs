//! A Modbus TCP server that is not ours: tokio-modbus's server side with a register map
//! written here (a load of an imaginary maker, laid out unlike the simulator's: the input
//! switch is a holding register, the current setpoint a u16 in 10 mA, readings an f32 and a
//! word-swapped u32 in microamperes). The bench drives it from a bench file alone.

use crate::support::link::runtime;
use regulus::bench::{Bench, BenchConfig, BenchError, ModbusFault};
use regulus::control::BenchControl;
use regulus::measure::{LoadMode, Quantity};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};
use tokio_modbus::server::tcp::{accept_tcp_connection, Server};
use tokio_modbus::{ExceptionCode, Request, Response};

/// The imaginary load's memory. Holding registers that exist: 0x2000 mode (1 CC, 2 CV),
/// 0x2001 input (0/1), 0x2010 current setpoint (u16, 10 mA per count, at most 500 = 5 A: the
/// device keeps 500 for anything above, as some loads clamp instead of refusing).
#[derive(Clone, Default)]
struct Station {
    holding: Arc<Mutex<HashMap<u16, u16>>>,
    input: Arc<Mutex<HashMap<u16, u16>>>,
}

impl Station {
    fn new() -> Station {
        let s = Station::default();
        {
            let mut h = s.holding.lock().unwrap();
            h.insert(0x2000, 1);
            h.insert(0x2001, 0);
            h.insert(0x2010, 0);
        }
        {
            // 11.75 V as f32 high word first at 0x3000; 1.234567 A as 1234567 uA, u32 low
            // word first at 0x3002 (IEEE 754: 11.75 = 0x413C0000).
            let mut i = s.input.lock().unwrap();
            i.insert(0x3000, 0x413C);
            i.insert(0x3001, 0x0000);
            let ua: u32 = 1_234_567;
            i.insert(0x3002, ua as u16);
            i.insert(0x3003, (ua >> 16) as u16);
        }
        s
    }

    fn read(map: &Mutex<HashMap<u16, u16>>, a: u16, n: u16) -> Result<Vec<u16>, ExceptionCode> {
        let m = map.lock().unwrap();
        (a..a + n)
            .map(|x| m.get(&x).copied().ok_or(ExceptionCode::IllegalDataAddress))
            .collect()
    }

    fn write(&self, a: u16, w: u16) -> Result<(), ExceptionCode> {
        let mut m = self.holding.lock().unwrap();
        let slot = m.get_mut(&a).ok_or(ExceptionCode::IllegalDataAddress)?;
        *slot = if a == 0x2010 { w.min(500) } else { w };
        Ok(())
    }
}

impl tokio_modbus::server::Service for Station {
    type Request = Request<'static>;
    type Response = Response;
    type Exception = ExceptionCode;
    type Future = std::future::Ready<Result<Response, ExceptionCode>>;

    fn call(&self, req: Request<'static>) -> Self::Future {
        let r = match req {
            Request::ReadHoldingRegisters(a, n) => {
                Station::read(&self.holding, a, n).map(Response::ReadHoldingRegisters)
            }
            Request::ReadInputRegisters(a, n) => {
                Station::read(&self.input, a, n).map(Response::ReadInputRegisters)
            }
            Request::WriteSingleRegister(a, w) => self
                .write(a, w)
                .map(|_| Response::WriteSingleRegister(a, w)),
            Request::WriteMultipleRegisters(a, words) => words
                .iter()
                .enumerate()
                .try_for_each(|(i, w)| self.write(a + i as u16, *w))
                .map(|_| Response::WriteMultipleRegisters(a, words.len() as u16)),
            _ => Err(ExceptionCode::IllegalFunction),
        };
        std::future::ready(r)
    }
}

async fn serve(station: Station) -> u16 {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let port = listener.local_addr().unwrap().port();
    let server = Server::new(listener);
    tokio::spawn(async move {
        let on_connected = move |stream, addr| {
            let s = station.clone();
            async move { accept_tcp_connection(stream, addr, move |_| Ok(Some(s.clone()))) }
        };
        let _ = server.serve(&on_connected, |_| {}).await;
    });
    port
}

fn bench_file(port: u16, extra_register: &str) -> String {
    format!(
        r#"[[instrument]]
name = "other-load"
roles = ["load", "output_voltmeter", "output_ammeter"]
tcp = {{ host = "127.0.0.1", port = {port} }}
reply_timeout_ms = 2000

[instrument.modbus]
unit = 1

[instrument.modbus.registers]
load_mode_cc = {{ object = "holding", address = 0x2000, value = 1 }}
load_mode_cv = {{ object = "holding", address = 0x2000, value = 2 }}
load_set_current = {{ object = "holding", address = 0x2010, type = "u16", scale = 10, unit = "mA" }}
load_input_on = {{ object = "holding", address = 0x2001, value = 1 }}
load_input_off = {{ object = "holding", address = 0x2001, value = 0 }}
measure_voltage = {{ object = "input", address = 0x3000, type = "f32", word_order = "high_first", unit = "V" }}
measure_current = {{ object = "input", address = 0x3002, type = "u32", word_order = "low_first", unit = "uA" }}
{extra_register}
"#
    )
}

// Data types per IEEE 754 (f32) and the Modbus Application Protocol V1.1b3 (16-bit registers;
// function codes 03, 04, 06, 16); the exception codes are section 7's.
#[test]
fn a_foreign_modbus_server_is_driven_by_configuration_alone() {
    let rt = runtime();
    rt.block_on(async {
        let station = Station::new();
        let port = serve(station.clone()).await;
        let tmp = tempfile::tempdir().unwrap();
        let log = tmp.path().join("other-load.log");
        let text = bench_file(port, "").replace(
            "reply_timeout_ms = 2000",
            &format!(
                "reply_timeout_ms = 2000\ntraffic_log = {:?}",
                log.display().to_string()
            ),
        );
        let cfg = BenchConfig::parse(&text, "other.toml").unwrap();
        let mut bench = Bench::open(&cfg).await.unwrap_or_else(|e| panic!("{e}"));
        bench
            .set_load(LoadMode::ConstantCurrent, 1.23)
            .await
            .unwrap_or_else(|e| panic!("{e}"));
        bench.set_load_input(true).await.unwrap();
        {
            let h = station.holding.lock().unwrap();
            assert_eq!(h[&0x2000], 1, "mode CC");
            assert_eq!(h[&0x2010], 123, "1.23 A in 10 mA counts");
            assert_eq!(h[&0x2001], 1, "input on");
        }
        let m = bench.measure().await.unwrap();
        assert_eq!(m.get(Quantity::OutputVoltage), Some(11.75));
        let i = m.get(Quantity::OutputCurrent).unwrap();
        assert!((i - 1.234567).abs() < 1e-9, "{i}");
        // A setpoint the device clamps is caught by the read-back: the step must not count.
        let e = bench
            .set_load(LoadMode::ConstantCurrent, 6.0)
            .await
            .expect_err("6 A is clamped to 5 A by the device");
        let text = e.to_string();
        assert!(text.contains("read back [0x01F4]"), "{text}");
        assert!(text.contains("after writing [0x0258]"), "{text}");
        let fault = e.fault().and_then(|f| f.downcast_ref::<BenchError>());
        assert!(matches!(
            fault,
            Some(BenchError::Modbus {
                fault: ModbusFault::ReadBack { .. },
                ..
            })
        ));
        assert!(bench.safe_state().await.is_empty());
        assert_eq!(station.holding.lock().unwrap()[&0x2001], 0, "input off");
        // Every request and reply is in the traffic log, the clamped read-back too.
        let log = std::fs::read_to_string(&log).unwrap();
        assert!(
            log.contains("> unit 1 write holding register(s) 8208 = [0x007B]"),
            "{log}"
        );
        assert!(
            log.contains("> unit 1 read 1 holding register(s) at 8208"),
            "{log}"
        );
        assert!(log.contains("< [0x01F4]"), "{log}");
    });
}

#[test]
fn exception_responses_are_reported_with_their_code_and_meaning() {
    let rt = runtime();
    rt.block_on(async {
        let station = Station::new();
        let port = serve(station.clone()).await;
        // The map names a register the device does not have.
        let cfg = BenchConfig::parse(
            &bench_file(
                port,
                r#"load_set_voltage = { object = "holding", address = 0x2020, type = "u16", unit = "mV" }"#,
            ),
            "other.toml",
        )
        .unwrap();
        let mut bench = Bench::open(&cfg).await.unwrap();
        let e = bench
            .set_load(LoadMode::ConstantVoltage, 5.0)
            .await
            .expect_err("no register 0x2020");
        let text = e.to_string();
        assert!(text.starts_with("instrument 'other-load': modbus load_set_voltage (holding register 8224 = 0x2020"), "{text}");
        assert!(text.contains("exception 0x02 from unit 1 to write single register (function 0x06): illegal data address"), "{text}");
        assert!(bench.safe_state().await.is_empty());
    });
}

/// A meter register's over-range code: the map declares the raw values 0x7FFF and 0x8000 of
/// an i16 register (a common practice of meters with 16-bit readings: the extremes of the
/// range stand for "over range" and "under range") and they read as over range, never as
/// 32.767 V; any other value reads as its number.
#[test]
fn an_overrange_raw_value_reads_as_overrange() {
    use regulus::measure::{Reading, Role};
    let rt = runtime();
    rt.block_on(async {
        let station = Station::new();
        station.input.lock().unwrap().insert(0x3100, 0x7FFF);
        let port = serve(station.clone()).await;
        let text = bench_file(port, "")
            .replace("roles = [\"load\", \"output_voltmeter\", \"output_ammeter\"]", "roles = [\"load\", \"output_voltmeter\"]")
            .replace(
                "measure_voltage = { object = \"input\", address = 0x3000, type = \"f32\", word_order = \"high_first\", unit = \"V\" }",
                "measure_voltage = { object = \"input\", address = 0x3100, type = \"i16\", scale = 0.001, unit = \"V\", overrange = [0x7FFF, 0x8000] }",
            )
            .replace("measure_current = { object = \"input\", address = 0x3002, type = \"u32\", word_order = \"low_first\", unit = \"uA\" }\n", "");
        let cfg = BenchConfig::parse(&text, "other.toml").unwrap_or_else(|e| panic!("{e}"));
        let bench = Bench::open(&cfg).await.unwrap_or_else(|e| panic!("{e}"));
        let (r, _) = bench
            .read_role(Role::OutputVoltmeter)
            .await
            .unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(r, Reading::Overrange);
        // 0x8000 is -32768 as i16: declared too.
        station.input.lock().unwrap().insert(0x3100, 0x8000);
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
        assert_eq!(r, Reading::Overrange);
        // 12.345 V in 1 mV counts.
        station.input.lock().unwrap().insert(0x3100, 12345);
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
        assert_eq!(r, Reading::Value(12.345));
        // The same code without the declaration is a number (32.767 V).
        drop(bench);
        station.input.lock().unwrap().insert(0x3100, 0x7FFF);
        let cfg = BenchConfig::parse(&text.replace(", overrange = [0x7FFF, 0x8000]", ""), "other.toml").unwrap();
        let bench = Bench::open(&cfg).await.unwrap_or_else(|e| panic!("{e}"));
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
        assert_eq!(r, Reading::Value(32.767));
    });
}

/// A meter that flags "over range" in a status register bit (bit 3 of holding register
/// 0x2002, an invented layout): while the bit is set the reading is over range whatever the
/// value register holds; when it is clear the value register's number counts.
#[test]
fn an_overrange_flag_bit_reads_as_overrange() {
    use regulus::measure::{Reading, Role};
    let rt = runtime();
    rt.block_on(async {
        let station = Station::new();
        station.input.lock().unwrap().insert(0x3100, 12345);
        station.holding.lock().unwrap().insert(0x2002, 0b0000_0001);
        let port = serve(station.clone()).await;
        let text = bench_file(port, "")
            .replace("roles = [\"load\", \"output_voltmeter\", \"output_ammeter\"]", "roles = [\"load\", \"output_voltmeter\"]")
            .replace(
                "measure_voltage = { object = \"input\", address = 0x3000, type = \"f32\", word_order = \"high_first\", unit = \"V\" }",
                "measure_voltage = { object = \"input\", address = 0x3100, type = \"u16\", scale = 0.001, unit = \"V\", overrange_flag = { object = \"holding\", address = 0x2002, bit = 3 } }",
            )
            .replace("measure_current = { object = \"input\", address = 0x3002, type = \"u32\", word_order = \"low_first\", unit = \"uA\" }\n", "");
        let cfg = BenchConfig::parse(&text, "other.toml").unwrap_or_else(|e| panic!("{e}"));
        let bench = Bench::open(&cfg).await.unwrap_or_else(|e| panic!("{e}"));
        // Another bit set (bit 0): not the flag.
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(r, Reading::Value(12.345));
        station.holding.lock().unwrap().insert(0x2002, 0b0000_1001);
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
        assert_eq!(r, Reading::Overrange);
        station.holding.lock().unwrap().insert(0x2002, 0);
        let (r, _) = bench.read_role(Role::OutputVoltmeter).await.unwrap();
        assert_eq!(r, Reading::Value(12.345));
    });
}
