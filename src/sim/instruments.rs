//! Simulated instruments, server side of the wire protocol in docs/ARCHITECTURE.md: a query
//! meter, a streaming meter, an electronic load, a programmable source and a thermometer. Each
//! answers one command line with zero or more reply lines, given the unit's true values and the
//! bench settings; noise, resolution and range are applied here. Also the injected port faults
//! (garbage, dropped and slow replies, closing) as a pure schedule. Pure: no ports, no clocks;
//! the serving code in `serve` feeds lines in and writes replies out.

use super::unit::{Controls, OperatingPoint};
use crate::measure::LoadMode;
use crate::rng::Rng;
use serde::Serialize;

/// Maker in every `*IDN?` reply (an invented name for the simulated bench).
pub const MAKER: &str = "Regulus Simulated Bench";

/// SCPI overrange value (9.9E37).
pub const OVERRANGE: f64 = 9.9e37;

/// The kinds of simulated instrument.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum InstrumentKind {
    /// Query meter on the output voltage (`MEAS:VOLT:DC?`).
    QueryMeter,
    /// Meter on the output current that streams `DCI +1.2034 A OK` lines unasked.
    StreamMeter,
    /// Electronic load on the output (CC / CV / CR).
    Load,
    /// Programmable source feeding the unit's input.
    Source,
    /// Thermometer on the pass device's case.
    Thermometer,
}

impl InstrumentKind {
    pub const ALL: [InstrumentKind; 5] = [
        InstrumentKind::QueryMeter,
        InstrumentKind::StreamMeter,
        InstrumentKind::Load,
        InstrumentKind::Source,
        InstrumentKind::Thermometer,
    ];

    /// Name of the instrument in messages, fault specs and the bench file.
    pub fn name(self) -> &'static str {
        match self {
            InstrumentKind::QueryMeter => "dmm",
            InstrumentKind::StreamMeter => "ammeter",
            InstrumentKind::Load => "eload",
            InstrumentKind::Source => "psu",
            InstrumentKind::Thermometer => "thermo",
        }
    }

    pub fn parse(name: &str) -> Option<InstrumentKind> {
        InstrumentKind::ALL.into_iter().find(|k| k.name() == name)
    }

    /// Model field of the identity reply (invented model names).
    pub fn model(self) -> &'static str {
        match self {
            InstrumentKind::QueryMeter => "SV-61 query meter",
            InstrumentKind::StreamMeter => "SA-42 streaming ammeter",
            InstrumentKind::Load => "SL-300 electronic load",
            InstrumentKind::Source => "SP-60 programmable source",
            InstrumentKind::Thermometer => "ST-4 thermometer",
        }
    }
}

/// The unit's true values an instrument can see (before the instrument's own noise).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct Snapshot {
    pub vout: f64,
    pub iout: f64,
    pub vin: f64,
    pub iin: f64,
    pub case_c: f64,
}

impl From<OperatingPoint> for Snapshot {
    fn from(op: OperatingPoint) -> Snapshot {
        Snapshot {
            vout: op.vout,
            iout: op.iout,
            vin: op.vin,
            iin: op.iin,
            case_c: op.case_c,
        }
    }
}

/// Measurement noise: Gaussian with the instrument's sigma times `scale` (0 = noiseless).
#[derive(Debug, Clone)]
pub struct Noise {
    rng: Rng,
    pub scale: f64,
}

impl Noise {
    pub fn new(seed: u64, scale: f64) -> Noise {
        Noise {
            rng: Rng::new(seed),
            scale,
        }
    }
    fn add(&mut self, v: f64, sigma: f64) -> f64 {
        if self.scale <= 0.0 || sigma <= 0.0 {
            return v;
        }
        v + self.rng.normal() * sigma * self.scale
    }
}

/// How one quantity is measured: range (beyond it: overrange), noise and resolution.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Channel {
    lo: f64,
    hi: f64,
    sigma_abs: f64,
    sigma_rel: f64,
    resolution: f64,
}

impl Channel {
    /// The reading of a true value: noise, then resolution; `None` for overrange.
    fn read(&self, truth: f64, noise: &mut Noise) -> Option<f64> {
        let v = noise.add(truth, self.sigma_abs + self.sigma_rel * truth.abs());
        if !(self.lo..=self.hi).contains(&v) || !v.is_finite() {
            return None;
        }
        let q = (v / self.resolution).round() * self.resolution;
        Some(if q == 0.0 { 0.0 } else { q })
    }
}

// Ranges, noise and resolution of the simulated instruments (invented, typical of bench gear).
const DMM_VOLTS: Channel = Channel {
    lo: -100.0,
    hi: 100.0,
    sigma_abs: 20e-6,
    sigma_rel: 5e-6,
    resolution: 10e-6,
};
const DMM_AMPS: Channel = Channel {
    lo: -10.0,
    hi: 10.0,
    sigma_abs: 50e-6,
    sigma_rel: 50e-6,
    resolution: 1e-6,
};
const STREAM_AMPS: Channel = Channel {
    lo: -10.0,
    hi: 10.0,
    sigma_abs: 0.3e-3,
    sigma_rel: 100e-6,
    resolution: 0.1e-3,
};
const LOAD_VOLTS: Channel = Channel {
    lo: -1.0,
    hi: 150.0,
    sigma_abs: 1e-3,
    sigma_rel: 50e-6,
    resolution: 1e-3,
};
const LOAD_AMPS: Channel = Channel {
    lo: -0.5,
    hi: 30.0,
    sigma_abs: 1e-3,
    sigma_rel: 100e-6,
    resolution: 1e-3,
};
const SOURCE_VOLTS: Channel = Channel {
    lo: -1.0,
    hi: 65.0,
    sigma_abs: 3e-3,
    sigma_rel: 100e-6,
    resolution: 1e-3,
};
const SOURCE_AMPS: Channel = Channel {
    lo: -0.5,
    hi: 12.0,
    sigma_abs: 2e-3,
    sigma_rel: 200e-6,
    resolution: 1e-3,
};
const THERMO: Channel = Channel {
    lo: -40.0,
    hi: 400.0,
    sigma_abs: 0.05,
    sigma_rel: 0.0,
    resolution: 0.1,
};

/// Highest settings each instrument accepts.
const LOAD_MAX_CURRENT: f64 = 30.0;
const LOAD_MAX_VOLTAGE: f64 = 150.0;
const LOAD_MIN_RESISTANCE: f64 = 1e-3;
const LOAD_MAX_RESISTANCE: f64 = 1e6;
const SOURCE_MAX_VOLTAGE: f64 = 60.0;

/// Format a number as SCPI NR3 with six significant digits: `+1.20034E+01`.
pub fn nr3(v: f64) -> String {
    if !v.is_finite() || v.abs() >= OVERRANGE {
        return "9.9E37".to_string();
    }
    let s = format!("{:+.5E}", v);
    // Rust writes "+1.20034E1"; SCPI instruments write a signed two-digit exponent.
    match s.split_once('E') {
        Some((mant, exp)) => {
            let e: i32 = exp.parse().unwrap_or(0);
            format!("{mant}E{}{:02}", if e < 0 { '-' } else { '+' }, e.abs())
        }
        None => s,
    }
}

fn reading(r: Option<f64>) -> String {
    match r {
        Some(v) => nr3(v),
        None => "9.9E37".to_string(),
    }
}

/// One streaming line for an output current: `DCI +1.2034 A OK` (`OL` status on overrange).
pub fn stream_line(snap: &Snapshot, noise: &mut Noise) -> String {
    match STREAM_AMPS.read(snap.iout, noise) {
        Some(v) => format!("DCI {v:+.4} A OK"),
        None => "DCI +9.9999 A OL".to_string(),
    }
}

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
    fn error(&mut self, code: i32, text: &'static str) {
        if self.errors.len() < 16 {
            self.errors.push((code, text));
        }
    }
    /// Pending errors (oldest first).
    pub fn errors(&self) -> &[(i32, &'static str)] {
        &self.errors
    }
}

/// Short form of one SCPI header node (long forms accepted as the standard allows).
fn short_node(node: &str) -> &str {
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
fn normalise(header: &str) -> String {
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

fn parse_bool(arg: &str) -> Option<bool> {
    match arg.trim().to_ascii_uppercase().as_str() {
        "ON" | "1" => Some(true),
        "OFF" | "0" => Some(false),
        _ => None,
    }
}

fn on_off(b: bool) -> String {
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

fn respond_one(
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

/// Faults injected on one instrument's port.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct PortFaults {
    /// Every Nth reply (or streamed line) is preceded by a garbage line.
    pub garbage_every: Option<u32>,
    /// Every Nth reply (or streamed line) is not sent.
    pub drop_every: Option<u32>,
    /// Every reply is delayed by this many extra milliseconds.
    pub slow_ms: u64,
    /// The port closes after this many commands (streaming meter: lines).
    pub close_after: Option<u32>,
    /// The port closes this many seconds after the bench starts.
    pub close_at_s: Option<f64>,
}

/// What happens to one reply under the injected faults.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fate {
    Send,
    Drop,
    GarbageThenSend,
}

/// A garbage line (no instrument would mean it).
pub const GARBAGE: &str = "~#%&*!@^ ?E+";

/// Counters that turn [`PortFaults`] into a schedule.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FaultSchedule {
    pub faults: PortFaults,
    replies: u32,
    commands: u32,
}

impl FaultSchedule {
    pub fn new(faults: PortFaults) -> FaultSchedule {
        FaultSchedule {
            faults,
            replies: 0,
            commands: 0,
        }
    }

    /// Count one command (or streamed line); true when the port must close after handling it.
    pub fn count_command(&mut self) -> bool {
        self.commands = self.commands.saturating_add(1);
        matches!(self.faults.close_after, Some(n) if self.commands >= n)
    }

    /// Decide the fate of the next reply.
    pub fn next_reply(&mut self) -> Fate {
        self.replies = self.replies.saturating_add(1);
        let hit = |every: Option<u32>, n: u32| matches!(every, Some(e) if e > 0 && n % e == 0);
        if hit(self.faults.drop_every, self.replies) {
            Fate::Drop
        } else if hit(self.faults.garbage_every, self.replies) {
            Fate::GarbageThenSend
        } else {
            Fate::Send
        }
    }

    /// True when the port must close at `elapsed_s` seconds after start.
    pub fn closed_by_time(&self, elapsed_s: f64) -> bool {
        matches!(self.faults.close_at_s, Some(t) if elapsed_s >= t)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
}
