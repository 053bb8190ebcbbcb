//! The simulated instruments' command language (SCPI style): header normalisation, argument
//! parsing, the error queue, and the answer to one command line. Pure: settings change in the
//! `Controls` passed in.

use super::channels::*;
use super::kinds::{InstrumentKind, Snapshot, MAKER};
use crate::measure::LoadMode;
use crate::sim::unit::Controls;

/// Protocol state of one instrument (its error queue).
#[derive(Debug, Clone, PartialEq)]
pub struct InstrumentState {
    pub kind: InstrumentKind,
    pub serial: String,
    errors: Vec<(i32, &'static str)>,
}

impl InstrumentState {
    pub fn new(kind: InstrumentKind, serial: impl Into<String>) -> InstrumentState {
        InstrumentState {
            kind,
            serial: serial.into(),
            errors: Vec::new(),
        }
    }
    /// Queue an error (at most 16 are kept, as the error queue of a real instrument is short).
    pub fn error(&mut self, code: i32, text: &'static str) {
        if self.errors.len() < 16 {
            self.errors.push((code, text));
        }
    }
    /// Take back the newest error (an acknowledging instrument reports it in its reply
    /// instead of queueing it).
    pub fn take_last_error(&mut self) -> Option<(i32, &'static str)> {
        self.errors.pop()
    }
    /// Pending errors (oldest first).
    pub fn errors(&self) -> &[(i32, &'static str)] {
        &self.errors
    }
}

/// Short form of one SCPI header node (long forms accepted as the standard allows).
pub(super) fn short_node(node: &str) -> &str {
    const FORMS: [(&str, &str); 14] = [
        ("MEASURE", "MEAS"),
        ("VOLTAGE", "VOLT"),
        ("CURRENT", "CURR"),
        ("RESISTANCE", "RES"),
        ("FUNCTION", "FUNC"),
        ("INPUT", "INP"),
        ("OUTPUT", "OUTP"),
        ("TEMPERATURE", "TEMP"),
        ("SYSTEM", "SYST"),
        ("ERROR", "ERR"),
        ("STATE", "STAT"),
        ("SOURCE", "SOUR"),
        ("LEVEL", "LEV"),
        ("IMMEDIATE", "IMM"),
    ];
    for (long, short) in FORMS {
        if node == long {
            return short;
        }
    }
    node
}

/// Normalise a header: upper case, long forms shortened, a leading colon and optional
/// default nodes (`SOUR:`, `:LEV:IMM`, `:STAT`) removed. `MEAS:VOLT:DC?` stays as written.
pub(super) fn normalise(header: &str) -> String {
    let up = header.trim().trim_start_matches(':').to_ascii_uppercase();
    let query = up.ends_with('?');
    let body = up.trim_end_matches('?');
    let nodes: Vec<&str> = body
        .split(':')
        .map(short_node)
        .filter(|n| !matches!(*n, "SOUR" | "LEV" | "IMM" | "STAT"))
        .collect();
    let mut h = nodes.join(":");
    if query {
        h.push('?');
    }
    h
}

/// Parse a numeric argument: plain, NR1/NR2/NR3, with an optional SI prefix and unit suffix
/// (`1.5`, `1.5E+00`, `500mA`, `2.2 OHM`).
///
/// This parser is deliberately separate from `crate::quantity`: the simulated instruments
/// stand for foreign firmware, with its own (narrower, case-blind) idea of suffixes, so the
/// bench side is tested against a number reader it does not share.
pub fn parse_number(arg: &str) -> Option<f64> {
    let a = arg.trim();
    let end = a
        .char_indices()
        .find(|(_, c)| !(c.is_ascii_digit() || matches!(c, '+' | '-' | '.' | 'e' | 'E')))
        .map_or(a.len(), |(i, _)| i);
    // An exponent marker with no digits after it belongs to a suffix: back off.
    let (mut num, mut rest) = a.split_at(end);
    while num.ends_with(['e', 'E', '+', '-']) && !num.is_empty() {
        let cut = num.len() - 1;
        rest = &a[cut..];
        num = &a[..cut];
    }
    let v: f64 = num.parse().ok()?;
    let suffix = rest.trim().to_ascii_uppercase();
    let mult = match suffix.as_str() {
        "" | "V" | "A" | "OHM" | "CEL" => 1.0,
        "MV" | "MA" | "MOHM" => 1e-3,
        "UV" | "UA" => 1e-6,
        "KV" | "KOHM" => 1e3,
        _ => return None,
    };
    let v = v * mult;
    v.is_finite().then_some(v)
}

pub(super) fn parse_bool(arg: &str) -> Option<bool> {
    match arg.trim().to_ascii_uppercase().as_str() {
        "ON" | "1" => Some(true),
        "OFF" | "0" => Some(false),
        _ => None,
    }
}

pub(super) fn on_off(b: bool) -> String {
    if b { "1" } else { "0" }.to_string()
}

/// Answer one command line. Setting commands change `controls` and return no line; queries
/// return one line; an unknown command returns nothing and queues `-113,"Undefined header"`.
/// Several commands may share a line, separated by `;`.
pub fn respond(
    st: &mut InstrumentState,
    line: &str,
    controls: &mut Controls,
    snap: &Snapshot,
    noise: &mut Noise,
) -> Vec<String> {
    let mut out = Vec::new();
    for cmd in line.split(';') {
        let cmd = cmd.trim();
        if cmd.is_empty() {
            continue;
        }
        if let Some(reply) = respond_one(st, cmd, controls, snap, noise) {
            out.push(reply);
        }
    }
    out
}

pub(super) fn respond_one(
    st: &mut InstrumentState,
    cmd: &str,
    c: &mut Controls,
    snap: &Snapshot,
    noise: &mut Noise,
) -> Option<String> {
    let (head, arg) = match cmd.split_once(char::is_whitespace) {
        Some((h, a)) => (h, a.trim()),
        None => (cmd, ""),
    };
    let h = normalise(head);
    let kind = st.kind;
    // Common commands (IEEE 488.2) and the error queue (SCPI).
    match h.as_str() {
        "*IDN?" => {
            return Some(format!(
                "{MAKER},{},{},1.0",
                kind.model(),
                st.serial.replace(',', " ")
            ))
        }
        "*CLS" => {
            st.errors.clear();
            return None;
        }
        "*RST" => {
            match kind {
                InstrumentKind::Load => c.load = Default::default(),
                InstrumentKind::Source => {
                    c.source.output_on = false;
                    c.source.volts = 0.0;
                }
                _ => {}
            }
            return None;
        }
        "*OPC?" => return Some("1".to_string()),
        "SYST:ERR?" => {
            return Some(if st.errors.is_empty() {
                "+0,\"No error\"".to_string()
            } else {
                let (code, text) = st.errors.remove(0);
                format!("{code},\"{text}\"")
            })
        }
        _ => {}
    }
    let number = |st: &mut InstrumentState, lo: f64, hi: f64| -> Option<f64> {
        match parse_number(arg) {
            Some(v) if (lo..=hi).contains(&v) => Some(v),
            Some(_) => {
                st.error(-222, "Data out of range");
                None
            }
            None => {
                st.error(-224, "Illegal parameter value");
                None
            }
        }
    };
    let reply = match (kind, h.as_str()) {
        (InstrumentKind::QueryMeter, "MEAS:VOLT:DC?" | "MEAS:VOLT?" | "READ?") => {
            reading(DMM_VOLTS.read(snap.vout, noise))
        }
        (InstrumentKind::QueryMeter, "MEAS:CURR:DC?" | "MEAS:CURR?") => {
            reading(DMM_AMPS.read(snap.iout, noise))
        }
        // No temperature probe is fitted to the meter: an open input reads as overrange.
        (InstrumentKind::QueryMeter, "MEAS:TEMP?") => reading(None),
        (InstrumentKind::Thermometer, "MEAS:TEMP?" | "READ?") => {
            reading(THERMO.read(snap.case_c, noise))
        }
        (InstrumentKind::Load, "FUNC") => {
            let mode = match arg.to_ascii_uppercase().as_str() {
                "CURR" | "CURRENT" => Some(LoadMode::ConstantCurrent),
                "VOLT" | "VOLTAGE" => Some(LoadMode::ConstantVoltage),
                "RES" | "RESISTANCE" => Some(LoadMode::ConstantResistance),
                _ => None,
            };
            match mode {
                Some(m) => c.load.mode = m,
                None => st.error(-224, "Illegal parameter value"),
            }
            return None;
        }
        (InstrumentKind::Load, "FUNC?") => match c.load.mode {
            LoadMode::ConstantCurrent => "CURR",
            LoadMode::ConstantVoltage => "VOLT",
            LoadMode::ConstantResistance => "RES",
        }
        .to_string(),
        (InstrumentKind::Load, "CURR") => {
            if let Some(v) = number(st, 0.0, LOAD_MAX_CURRENT) {
                c.load.current = v;
            }
            return None;
        }
        (InstrumentKind::Load, "VOLT") => {
            if let Some(v) = number(st, 0.0, LOAD_MAX_VOLTAGE) {
                c.load.voltage = v;
            }
            return None;
        }
        (InstrumentKind::Load, "RES") => {
            if let Some(v) = number(st, LOAD_MIN_RESISTANCE, LOAD_MAX_RESISTANCE) {
                c.load.resistance = v;
            }
            return None;
        }
        (InstrumentKind::Load, "CURR?") => nr3(c.load.current),
        (InstrumentKind::Load, "VOLT?") => nr3(c.load.voltage),
        (InstrumentKind::Load, "RES?") => nr3(c.load.resistance),
        (InstrumentKind::Load, "INP") => {
            match parse_bool(arg) {
                Some(b) => c.load.input_on = b,
                None => st.error(-224, "Illegal parameter value"),
            }
            return None;
        }
        (InstrumentKind::Load, "INP?") => on_off(c.load.input_on),
        (InstrumentKind::Load, "MEAS:VOLT?" | "MEAS:VOLT:DC?") => {
            reading(LOAD_VOLTS.read(snap.vout, noise))
        }
        (InstrumentKind::Load, "MEAS:CURR?" | "MEAS:CURR:DC?") => {
            reading(LOAD_AMPS.read(snap.iout, noise))
        }
        (InstrumentKind::Source, "VOLT") => {
            if let Some(v) = number(st, 0.0, SOURCE_MAX_VOLTAGE) {
                c.source.volts = v;
                if !c.source.in_use {
                    c.source.in_use = true;
                }
            }
            return None;
        }
        (InstrumentKind::Source, "VOLT?") => nr3(c.source.volts),
        (InstrumentKind::Source, "OUTP") => {
            match parse_bool(arg) {
                Some(b) => {
                    c.source.output_on = b;
                    c.source.in_use = true;
                }
                None => st.error(-224, "Illegal parameter value"),
            }
            return None;
        }
        (InstrumentKind::Source, "OUTP?") => on_off(!c.source.in_use || c.source.output_on),
        (InstrumentKind::Source, "MEAS:VOLT?" | "MEAS:VOLT:DC?") => {
            reading(SOURCE_VOLTS.read(snap.vin, noise))
        }
        (InstrumentKind::Source, "MEAS:CURR?" | "MEAS:CURR:DC?") => {
            reading(SOURCE_AMPS.read(snap.iin, noise))
        }
        _ => {
            st.error(-113, "Undefined header");
            return None;
        }
    };
    Some(reply)
}
