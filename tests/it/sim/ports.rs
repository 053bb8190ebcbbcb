//! The simulated bench over real pseudo-terminals and loopback TCP: identity, measurements, a
//! load setting that changes the measured output, streaming lines, and each port fault.
//! Benches are started one at a time (pseudo-terminal creation is serialized, and the tests
//! share two cores with other work).

use crate::support::lock::serial;
use regulus::design::Design;
use regulus::sim::instruments::{InstrumentKind, MAKER};
use regulus::sim::{Fault, Link, SimBench, SimOptions, TransportMix};
use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::time::{Duration, Instant};

fn design(name: &str) -> Design {
    let path = format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"));
    Design::load(std::path::Path::new(&path)).unwrap()
}

fn lab() -> Design {
    design("teaching-lab-0-20v.toml")
}

/// A line-oriented client on either kind of port.
struct Client {
    reader: BufReader<Box<dyn Read + Send>>,
    writer: Box<dyn Write + Send>,
}

impl Client {
    fn open(link: &Link) -> Client {
        match link {
            Link::Tcp(addr) => {
                let s = TcpStream::connect(addr).unwrap();
                s.set_read_timeout(Some(Duration::from_millis(2000)))
                    .unwrap();
                let w = s.try_clone().unwrap();
                Client {
                    reader: BufReader::new(Box::new(s)),
                    writer: Box::new(w),
                }
            }
            Link::Pty(path) => {
                let port = serialport::new(path.as_str(), 115_200)
                    .timeout(Duration::from_millis(2000))
                    .open_native()
                    .unwrap();
                let w = port.try_clone_native().unwrap();
                Client {
                    reader: BufReader::new(Box::new(port)),
                    writer: Box::new(w),
                }
            }
        }
    }
    /// Send one command; false when the port refused it (closed).
    fn send(&mut self, cmd: &str) -> bool {
        self.writer.write_all(format!("{cmd}\n").as_bytes()).is_ok() && self.writer.flush().is_ok()
    }
    /// Next line, or None on timeout / closed port.
    fn line(&mut self) -> Option<String> {
        let mut s = String::new();
        match self.reader.read_line(&mut s) {
            Ok(0) | Err(_) => None,
            Ok(_) => Some(s.trim_end().to_string()),
        }
    }
    fn ask(&mut self, cmd: &str) -> String {
        self.send(cmd);
        self.line().unwrap_or_else(|| panic!("no reply to {cmd}"))
    }
    fn number(&mut self, cmd: &str) -> f64 {
        let r = self.ask(cmd);
        r.parse().unwrap_or_else(|_| panic!("{cmd}: '{r}'"))
    }
}

fn start(opts: SimOptions) -> SimBench {
    crate::support::sim::start(&lab(), opts).unwrap()
}

#[test]
fn identity_and_measurement_on_pty_and_tcp() {
    let _g = serial();
    for mix in [TransportMix::AllPty, TransportMix::AllTcp] {
        let sim = start(SimOptions::default().seed(3).transport(mix));
        for p in sim.ports() {
            match (&p.link, mix) {
                (Link::Pty(path), TransportMix::AllPty) => assert!(path.starts_with("/dev/")),
                (Link::Tcp(a), TransportMix::AllTcp) => assert!(a.ip().is_loopback()),
                other => panic!("{other:?}"),
            }
        }
        let mut dmm = Client::open(sim.port(InstrumentKind::QueryMeter).unwrap());
        // IEEE 488.2 *IDN?: maker, model, serial, firmware.
        let idn = dmm.ask("*IDN?");
        assert_eq!(idn.split(',').count(), 4, "{idn}");
        assert!(idn.starts_with(MAKER));
        let v = dmm.number("MEAS:VOLT:DC?");
        // No probe on the meter's temperature input: SCPI's overrange value 9.9E37.
        assert_eq!(dmm.ask("MEAS:TEMP?"), "9.9E37");
        let t = sim.truth();
        assert!((v - t.no_load_v).abs() < 1e-3, "{v} vs {}", t.no_load_v);
        let mut th = Client::open(sim.port(InstrumentKind::Thermometer).unwrap());
        let c = th.number("MEAS:TEMP?");
        assert!((c - t.ambient_c).abs() < 0.5, "{c}");
        sim.shutdown();
    }
}

#[test]
fn default_mix_puts_meters_on_ptys_and_load_and_source_on_tcp() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(2));
    for p in sim.ports() {
        let tcp = matches!(p.link, Link::Tcp(_));
        let expect_tcp = matches!(p.kind, InstrumentKind::Load | InstrumentKind::Source);
        assert_eq!(tcp, expect_tcp, "{p:?}");
    }
}

#[test]
fn load_setting_changes_the_measured_output() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(4));
    let t = sim.truth().clone();
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    let mut dmm = Client::open(sim.port(InstrumentKind::QueryMeter).unwrap());
    let v0 = dmm.number("MEAS:VOLT:DC?");
    // CV load at half the output: the unit sits on its limit line (common practice).
    load.send("FUNC VOLT");
    load.send(&format!("VOLT {:.3}", t.no_load_v / 2.0));
    load.send("INP ON");
    let i = load.number("MEAS:CURR?");
    let v = dmm.number("MEAS:VOLT:DC?");
    assert!((v - t.no_load_v / 2.0).abs() < 0.01, "{v0} -> {v}");
    assert!(
        (i - t.short_circuit_current).abs() < 0.05 * t.short_circuit_current,
        "{i}"
    );
    load.send("INP OFF");
    // Wait until the load has taken the command (the meter is on another port).
    assert_eq!(load.ask("*OPC?"), "1");
    let v = dmm.number("MEAS:VOLT:DC?");
    assert!((v - v0).abs() < 1e-3);
    // An unknown command gets no reply; SYST:ERR? reports it.
    load.send("BOGUS 1");
    assert_eq!(load.ask("SYST:ERR?"), "-113,\"Undefined header\"");
}

#[test]
fn streaming_meter_sends_about_twenty_lines_a_second() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(5));
    let mut amm = Client::open(sim.port(InstrumentKind::StreamMeter).unwrap());
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    load.send("FUNC CURR");
    load.send("CURR 0.75");
    load.send("INP ON");
    let _ = load.ask("*OPC?");
    let t0 = Instant::now();
    let mut lines = Vec::new();
    while t0.elapsed() < Duration::from_millis(1000) {
        if let Some(l) = amm.line() {
            lines.push(l);
        }
    }
    assert!(
        lines.len() >= 12 && lines.len() <= 30,
        "{} lines",
        lines.len()
    );
    let last = lines.last().unwrap();
    let f: Vec<&str> = last.split_whitespace().collect();
    assert_eq!((f[0], f[2], f[3]), ("DCI", "A", "OK"), "{last}");
    let i: f64 = f[1].parse().unwrap();
    assert!((i - 0.75).abs() < 0.003, "{last}");
}

#[test]
fn garbage_and_dropped_replies() {
    let _g = serial();
    let sim = start(
        SimOptions::default()
            .seed(6)
            .fault(Fault::parse("dmm:garbage=2").unwrap())
            .fault(Fault::parse("eload:drop=2").unwrap()),
    );
    let mut dmm = Client::open(sim.port(InstrumentKind::QueryMeter).unwrap());
    let first = dmm.ask("MEAS:VOLT:DC?");
    assert!(first.parse::<f64>().is_ok(), "{first}");
    let second = dmm.ask("MEAS:VOLT:DC?");
    assert!(second.parse::<f64>().is_err(), "garbage expected: {second}");
    let after = dmm.line().unwrap();
    assert!(after.parse::<f64>().is_ok(), "{after}");
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    assert!(load.ask("MEAS:VOLT?").parse::<f64>().is_ok());
    load.send("MEAS:VOLT?");
    // The second reply is lost: the next line is the third reply.
    load.send("INP?");
    assert_eq!(load.line().unwrap(), "0");
}

#[test]
fn slow_replies_arrive_late() {
    let _g = serial();
    let sim = start(
        SimOptions::default()
            .seed(7)
            .latency(Duration::ZERO)
            .fault(Fault::parse("thermo:slow=300").unwrap()),
    );
    let mut th = Client::open(sim.port(InstrumentKind::Thermometer).unwrap());
    let mut dmm = Client::open(sim.port(InstrumentKind::QueryMeter).unwrap());
    let t0 = Instant::now();
    th.number("MEAS:TEMP?");
    assert!(t0.elapsed() >= Duration::from_millis(300));
    let t0 = Instant::now();
    dmm.number("MEAS:VOLT:DC?");
    assert!(t0.elapsed() < Duration::from_millis(300));
}

#[test]
fn ports_close_after_commands_and_after_time() {
    let _g = serial();
    let sim = start(
        SimOptions::default()
            .seed(8)
            .fault(Fault::parse("psu:close-after=3").unwrap())
            .fault(Fault::parse("dmm:close-after=2").unwrap())
            .fault(Fault::parse("thermo:close-at=0.5").unwrap()),
    );
    // TCP: the third command is answered, then the connection ends and the port refuses.
    let psu_link = sim.port(InstrumentKind::Source).unwrap().clone();
    let mut psu = Client::open(&psu_link);
    psu.ask("*IDN?");
    psu.ask("MEAS:VOLT?");
    psu.ask("MEAS:CURR?");
    assert_eq!(psu.line(), None);
    let Link::Tcp(addr) = psu_link else { panic!() };
    std::thread::sleep(Duration::from_millis(100));
    assert!(TcpStream::connect(addr).is_err(), "listener closed");
    assert!(sim.is_closed(InstrumentKind::Source));
    // Pseudo-terminal: after the second command the master is gone.
    let mut dmm = Client::open(sim.port(InstrumentKind::QueryMeter).unwrap());
    dmm.ask("*IDN?");
    dmm.ask("MEAS:VOLT:DC?");
    let _ = dmm.send("MEAS:VOLT:DC?");
    assert_eq!(dmm.line(), None);
    // Closing by time.
    let mut th = Client::open(sim.port(InstrumentKind::Thermometer).unwrap());
    th.number("MEAS:TEMP?");
    std::thread::sleep(Duration::from_millis(700));
    assert!(sim.is_closed(InstrumentKind::Thermometer));
    let _ = th.send("MEAS:TEMP?");
    assert_eq!(th.line(), None);
}

#[test]
fn short_circuit_dwell_heats_the_pass_device_and_moves_the_limit() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(9).noise(0.0));
    let t = sim.truth().clone();
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    let mut th = Client::open(sim.port(InstrumentKind::Thermometer).unwrap());
    load.send("FUNC VOLT");
    load.send("VOLT 0");
    load.send("INP ON");
    let i0 = load.number("MEAS:CURR?");
    let c0 = th.number("MEAS:TEMP?");
    std::thread::sleep(Duration::from_millis(2500));
    let i1 = load.number("MEAS:CURR?");
    let c1 = th.number("MEAS:TEMP?");
    load.send("INP OFF");
    // Diode string: V_sense = n V_F - m V_BE rises as the pass junctions heat (common practice).
    assert!((i0 - t.short_circuit_current).abs() < 0.01, "{i0}");
    assert!(i1 > i0 + 0.02, "{i0} -> {i1}");
    assert!(c1 > c0 + 3.0, "{c0} -> {c1}");
}

#[test]
fn bench_file_names_every_port() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(10));
    let text = sim.bench_toml();
    let doc: toml::Value = toml::from_str(&text).unwrap();
    let insts = doc["instrument"].as_array().unwrap();
    assert_eq!(insts.len(), 5);
    for p in sim.ports() {
        let i = insts
            .iter()
            .find(|i| i["name"].as_str() == Some(p.name))
            .unwrap();
        match &p.link {
            Link::Pty(path) => assert_eq!(i["serial"]["port"].as_str(), Some(path.as_str())),
            Link::Tcp(a) => assert_eq!(i["tcp"]["port"].as_integer(), Some(a.port() as i64)),
        }
    }
}

#[test]
fn pty_instrument_survives_the_bench_closing_and_reopening_it() {
    let _g = serial();
    let sim = start(
        SimOptions::default()
            .seed(11)
            .transport(TransportMix::AllPty),
    );
    let link = sim.port(InstrumentKind::QueryMeter).unwrap().clone();
    for _ in 0..3 {
        let mut dmm = Client::open(&link);
        assert!(dmm.number("MEAS:VOLT:DC?") > 0.0);
        drop(dmm);
        // Nobody has the port open for a while: the master sees EIO and must keep waiting.
        std::thread::sleep(Duration::from_millis(60));
    }
    // The streaming meter resumes too, with lines in the fixed format.
    let link = sim.port(InstrumentKind::StreamMeter).unwrap().clone();
    for _ in 0..2 {
        let mut amm = Client::open(&link);
        let l = amm.line().unwrap();
        assert!(l.starts_with("DCI ") && l.ends_with(" A OK"), "{l}");
    }
}

#[test]
fn reopened_streaming_meter_sends_no_stale_lines() {
    let _g = serial();
    let sim = start(SimOptions::default().seed(12).noise(0.0));
    let amm_link = sim.port(InstrumentKind::StreamMeter).unwrap().clone();
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    load.send("CURR 0.5");
    load.send("INP ON");
    let _ = load.ask("*OPC?");
    let mut amm = Client::open(&amm_link);
    for _ in 0..5 {
        assert_eq!(amm.line().unwrap(), "DCI +0.5000 A OK");
    }
    // Stop reading for a while (lines pile up unread), then close.
    std::thread::sleep(Duration::from_millis(300));
    drop(amm);
    load.send("CURR 1.0");
    let _ = load.ask("*OPC?");
    std::thread::sleep(Duration::from_millis(100));
    let mut amm = Client::open(&amm_link);
    assert_eq!(amm.line().unwrap(), "DCI +1.0000 A OK");
}

#[test]
fn shutdown_is_not_held_up_by_a_slow_reply() {
    let _g = serial();
    let sim = start(
        SimOptions::default()
            .seed(13)
            .fault(Fault::parse("eload:slow=60000").unwrap()),
    );
    let mut load = Client::open(sim.port(InstrumentKind::Load).unwrap());
    assert!(load.send("MEAS:VOLT?"));
    std::thread::sleep(Duration::from_millis(100));
    let t0 = Instant::now();
    sim.shutdown();
    // The reply was due in 60 s; stopping must not wait for it.
    assert!(t0.elapsed() < Duration::from_secs(10), "{:?}", t0.elapsed());
    assert_eq!(load.line(), None);
}
