//! The bench file text for a simulated bench's ports, so `regulus run` can drive it like a
//! real bench. Pure text.

use super::instruments::InstrumentKind;
use super::options::{Fault, PortFault, SimOptions};
use super::ports::{Link, PortInfo, PortProtocol};
use std::fmt::Write as _;

pub(super) fn toml_str(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if (c as u32) < 0x20 => {
                let _ = write!(out, "\\u{:04X}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// Bench file text for a simulated bench's ports (instrument names as in [`InstrumentKind`]).
pub fn bench_toml(design_name: &str, opts: &SimOptions, ports: &[PortInfo]) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "# Bench file written by `regulus sim` for a simulated bench on this machine.\n\
         # The ports below exist only while that simulated bench runs.\n"
    );
    let _ = writeln!(s, "[bench]");
    let _ = writeln!(s, "name = {}", toml_str("simulated bench"));
    let _ = writeln!(
        s,
        "note = {}\n",
        toml_str(&format!(
            "simulated unit of '{design_name}', seed {}",
            opts.seed
        ))
    );
    // The deadline covers the instruments' normal latency only: a slow, lagging or late
    // instrument (an injected fault) must meet the bench's lockstep as a real one would, not
    // be hidden by a deadline longer than its fault.
    let timeout_ms = 1000 + opts.latency.as_millis() as u64;
    for p in ports {
        if p.protocol == PortProtocol::Modbus {
            s.push_str(&super::modbus_map::bench_entry(p, timeout_ms));
            continue;
        }
        let _ = writeln!(s, "[[instrument]]");
        let _ = writeln!(s, "name = {}", toml_str(p.name));
        let (roles, preset) = match p.kind {
            InstrumentKind::QueryMeter => ("\"output_voltmeter\"", "scpi_meter"),
            InstrumentKind::StreamMeter => ("\"output_ammeter\"", "tagged_stream_meter"),
            InstrumentKind::Load => ("\"load\"", "scpi_load"),
            InstrumentKind::Source => (
                "\"input_source\", \"input_voltmeter\", \"input_ammeter\"",
                "scpi_source",
            ),
            InstrumentKind::Thermometer => ("\"thermometer\"", "scpi_thermometer"),
        };
        let _ = writeln!(s, "roles = [{roles}]");
        let _ = writeln!(s, "preset = {}", toml_str(preset));
        match &p.link {
            Link::Pty(path) => {
                let _ = writeln!(s, "serial = {{ port = {}, baud = 115200 }}", toml_str(path));
            }
            Link::Tcp(addr) => {
                let _ = writeln!(
                    s,
                    "tcp = {{ host = {}, port = {} }}",
                    toml_str(&addr.ip().to_string()),
                    addr.port()
                );
            }
        }
        let _ = writeln!(s, "reply_timeout_ms = {timeout_ms}");
        let acknowledges = opts
            .faults
            .iter()
            .any(|f| matches!(f, Fault::Port(k, PortFault::Acknowledge) if *k == p.kind));
        if acknowledges {
            let _ = writeln!(
                s,
                "acknowledge = {{ success = \"^OK$\", error = \"^ERR\" }}"
            );
        }
        if p.kind == InstrumentKind::StreamMeter {
            let _ = writeln!(s, "\n[instrument.reading]");
            let _ = writeln!(s, "style = \"stream\"");
            let _ = writeln!(s, "pick = \"average\"");
            let _ = writeln!(s, "window_ms = 250");
            let _ = writeln!(s, "max_age_ms = 1000");
            let _ = writeln!(s, "tags = {{ output_ammeter = \"DCI\" }}");
        }
        s.push('\n');
    }
    s
}
