//! The simulated Modbus load and source: their register maps (our own layout, written into
//! the bench file `regulus sim` makes) and the server side of one request: a request PDU in,
//! a response or exception PDU out, over a bank of coils and holding registers that drives
//! the unit's controls. Measurements are read from input registers with the instrument's
//! noise and resolution. Pure: the serving code in `modbus` moves the frames.

use super::instruments::{InstrumentKind, Snapshot, MAKER};
use super::ports::{Link, PortInfo};
use super::unit::Controls;
use crate::measure::LoadMode;
use crate::protocol::modbus::{
    parse_request, DataType, Encoding, Exception, Request, Response, WordOrder,
};
use crate::rng::Rng;
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Where the identity text starts (input registers, 48 registers of ASCII).
pub const IDENTITY_ADDRESS: u16 = 0x0F00;
pub const IDENTITY_WORDS: u16 = 48;

/// Unit ids of the simulated devices.
pub fn unit_id(kind: InstrumentKind) -> u8 {
    match kind {
        InstrumentKind::Source => 2,
        _ => 1,
    }
}

/// One number in a simulated device.
#[derive(Debug, Clone, Copy)]
struct Number {
    address: u16,
    encoding: Encoding,
    /// Unit as written in the bench file (the encoding's scale is in SI units).
    unit: &'static str,
    /// Scale as written in the bench file (per count, in `unit`).
    scale: f64,
}

const fn number(
    address: u16,
    data_type: DataType,
    word_order: WordOrder,
    scale: f64,
    si_per_unit: f64,
    unit: &'static str,
) -> Number {
    Number {
        address,
        encoding: Encoding {
            data_type,
            word_order,
            scale: scale * si_per_unit,
        },
        unit,
        scale,
    }
}

// The load: mode register (0 CC, 1 CV, 2 CR), setpoints, input coil, readings.
const LOAD_MODE: u16 = 0x0000;
const LOAD_CURRENT: Number = number(0x0010, DataType::U32, WordOrder::HighFirst, 0.1, 1e-3, "mA");
const LOAD_VOLTAGE: Number = number(0x0012, DataType::U32, WordOrder::HighFirst, 1.0, 1e-3, "mV");
const LOAD_RESISTANCE: Number = number(0x0014, DataType::F32, WordOrder::LowFirst, 1.0, 1.0, "ohm");
const LOAD_INPUT_COIL: u16 = 0x0000;
const LOAD_READ_VOLTS: Number =
    number(0x0100, DataType::I32, WordOrder::HighFirst, 1.0, 1e-3, "mV");
const LOAD_READ_AMPS: Number = number(0x0102, DataType::I32, WordOrder::HighFirst, 0.1, 1e-3, "mA");
// The source: voltage setpoint, output coil, readings.
const SOURCE_VOLTAGE: Number = number(0x0000, DataType::F32, WordOrder::HighFirst, 1.0, 1.0, "V");
const SOURCE_OUTPUT_COIL: u16 = 0x0000;
const SOURCE_READ_VOLTS: Number =
    number(0x0100, DataType::U16, WordOrder::HighFirst, 0.01, 1.0, "V");
const SOURCE_READ_AMPS: Number =
    number(0x0101, DataType::I16, WordOrder::HighFirst, 1.0, 1e-3, "mA");

/// Highest settings (as the text instruments accept).
const LOAD_MAX_CURRENT: f64 = 30.0;
const LOAD_MAX_VOLTAGE: f64 = 150.0;
const LOAD_RESISTANCE_RANGE: (f64, f64) = (1e-3, 1e6);
const SOURCE_MAX_VOLTAGE: f64 = 60.0;

/// The `[instrument.modbus]` table of a simulated device, for the bench file.
pub fn registers_toml(kind: InstrumentKind) -> String {
    let mut s = String::new();
    let num = |s: &mut String, key: &str, object: &str, n: Number| {
        let order = match n.encoding.word_order {
            WordOrder::HighFirst => "high_first",
            WordOrder::LowFirst => "low_first",
        };
        let _ = write!(
            s,
            "{key} = {{ object = \"{object}\", address = 0x{:04X}, type = \"{}\"",
            n.address,
            n.encoding.data_type.name()
        );
        if n.encoding.data_type.words() == 2 {
            let _ = write!(s, ", word_order = \"{order}\"");
        }
        let _ = writeln!(s, ", scale = {:?}, unit = \"{}\" }}", n.scale, n.unit);
    };
    let fixed = |s: &mut String, key: &str, object: &str, address: u16, value: &str| {
        let _ = writeln!(
            s,
            "{key} = {{ object = \"{object}\", address = 0x{address:04X}, value = {value} }}"
        );
    };
    match kind {
        InstrumentKind::Load => {
            fixed(&mut s, "load_mode_cc", "holding", LOAD_MODE, "0");
            fixed(&mut s, "load_mode_cv", "holding", LOAD_MODE, "1");
            fixed(&mut s, "load_mode_cr", "holding", LOAD_MODE, "2");
            num(&mut s, "load_set_current", "holding", LOAD_CURRENT);
            num(&mut s, "load_set_voltage", "holding", LOAD_VOLTAGE);
            num(&mut s, "load_set_resistance", "holding", LOAD_RESISTANCE);
            fixed(&mut s, "load_input_on", "coil", LOAD_INPUT_COIL, "true");
            fixed(&mut s, "load_input_off", "coil", LOAD_INPUT_COIL, "false");
            num(&mut s, "measure_voltage", "input", LOAD_READ_VOLTS);
            num(&mut s, "measure_current", "input", LOAD_READ_AMPS);
        }
        InstrumentKind::Source => {
            num(&mut s, "source_set_voltage", "holding", SOURCE_VOLTAGE);
            fixed(
                &mut s,
                "source_output_on",
                "coil",
                SOURCE_OUTPUT_COIL,
                "true",
            );
            fixed(
                &mut s,
                "source_output_off",
                "coil",
                SOURCE_OUTPUT_COIL,
                "false",
            );
            num(&mut s, "measure_voltage", "input", SOURCE_READ_VOLTS);
            num(&mut s, "measure_current", "input", SOURCE_READ_AMPS);
        }
        _ => {}
    }
    s
}

/// A TOML basic string (JSON's escapes are TOML's too).
fn toml_str(s: &str) -> String {
    serde_json::to_string(s).unwrap_or_else(|_| "\"\"".to_string())
}

/// The bench file entry of a simulated Modbus device on its port.
pub fn bench_entry(p: &PortInfo, timeout_ms: u64) -> String {
    let mut s = String::new();
    let roles = match p.kind {
        InstrumentKind::Load => "\"load\"",
        _ => "\"input_source\", \"input_voltmeter\", \"input_ammeter\"",
    };
    let _ = writeln!(s, "[[instrument]]");
    let _ = writeln!(s, "name = {}", toml_str(p.name));
    let _ = writeln!(s, "roles = [{roles}]");
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
    let _ = writeln!(s, "\n[instrument.modbus]");
    let _ = writeln!(s, "unit = {}", unit_id(p.kind));
    let _ = writeln!(
        s,
        "identity = {{ object = \"input\", address = 0x{IDENTITY_ADDRESS:04X}, words = {IDENTITY_WORDS} }}"
    );
    let _ = writeln!(s, "\n[instrument.modbus.registers]");
    s.push_str(&registers_toml(p.kind));
    s.push('\n');
    s
}

/// One simulated Modbus device: its coils and holding registers, noise and identity.
#[derive(Debug, Clone)]
pub struct ModbusDeviceState {
    pub kind: InstrumentKind,
    pub unit: u8,
    holding: BTreeMap<u16, u16>,
    coils: BTreeMap<u16, bool>,
    identity: String,
    rng: Rng,
    noise: f64,
}

impl ModbusDeviceState {
    pub fn new(kind: InstrumentKind, serial: &str, seed: u64, noise: f64) -> ModbusDeviceState {
        let mut holding = BTreeMap::new();
        let mut coils = BTreeMap::new();
        let put = |n: Number, v: f64, h: &mut BTreeMap<u16, u16>| {
            for (i, w) in n
                .encoding
                .encode(v)
                .unwrap_or_default()
                .into_iter()
                .enumerate()
            {
                h.insert(n.address + i as u16, w);
            }
        };
        match kind {
            InstrumentKind::Load => {
                holding.insert(LOAD_MODE, 0);
                put(LOAD_CURRENT, 0.0, &mut holding);
                put(LOAD_VOLTAGE, 0.0, &mut holding);
                put(LOAD_RESISTANCE, LOAD_RESISTANCE_RANGE.1, &mut holding);
                coils.insert(LOAD_INPUT_COIL, false);
            }
            InstrumentKind::Source => {
                put(SOURCE_VOLTAGE, 0.0, &mut holding);
                coils.insert(SOURCE_OUTPUT_COIL, false);
            }
            _ => {}
        }
        ModbusDeviceState {
            kind,
            unit: unit_id(kind),
            holding,
            coils,
            identity: format!("{MAKER},{} (Modbus),{serial},1.0", kind.model()),
            rng: Rng::new(seed),
            noise,
        }
    }

    fn value(&self, n: Number) -> f64 {
        let words: Vec<u16> = (0..n.encoding.data_type.words())
            .map(|i| self.holding.get(&(n.address + i)).copied().unwrap_or(0))
            .collect();
        n.encoding.decode(&words).unwrap_or(f64::NAN)
    }

    /// The controls the bank stands for, or `None` when a setting is out of range.
    fn apply(&self, c: &mut Controls) -> Option<()> {
        match self.kind {
            InstrumentKind::Load => {
                let mode = match self.holding.get(&LOAD_MODE).copied() {
                    Some(0) => LoadMode::ConstantCurrent,
                    Some(1) => LoadMode::ConstantVoltage,
                    Some(2) => LoadMode::ConstantResistance,
                    _ => return None,
                };
                let i = self.value(LOAD_CURRENT);
                let v = self.value(LOAD_VOLTAGE);
                let r = self.value(LOAD_RESISTANCE);
                let ok = (0.0..=LOAD_MAX_CURRENT).contains(&i)
                    && (0.0..=LOAD_MAX_VOLTAGE).contains(&v)
                    && (LOAD_RESISTANCE_RANGE.0..=LOAD_RESISTANCE_RANGE.1).contains(&r);
                if !ok {
                    return None;
                }
                c.load.mode = mode;
                c.load.current = i;
                c.load.voltage = v;
                c.load.resistance = r;
                c.load.input_on = self.coils.get(&LOAD_INPUT_COIL).copied().unwrap_or(false);
            }
            InstrumentKind::Source => {
                let v = self.value(SOURCE_VOLTAGE);
                if !(0.0..=SOURCE_MAX_VOLTAGE).contains(&v) {
                    return None;
                }
                c.source.volts = v;
                c.source.output_on = self
                    .coils
                    .get(&SOURCE_OUTPUT_COIL)
                    .copied()
                    .unwrap_or(false);
                c.source.in_use = true;
            }
            _ => {}
        }
        Some(())
    }

    /// A measurement register's words: the true value with noise (sigma `abs` plus `rel` of
    /// the value), at the register's resolution.
    fn measure(&mut self, n: Number, truth: f64, abs: f64, rel: f64) -> Vec<u16> {
        let v = truth + self.rng.normal() * (abs + rel * truth.abs()) * self.noise;
        let (lo, hi) = match n.encoding.data_type {
            DataType::U16 => (0.0, u16::MAX as f64),
            DataType::I16 => (i16::MIN as f64, i16::MAX as f64),
            _ => (i32::MIN as f64, i32::MAX as f64),
        };
        let v = (v / n.encoding.scale).round().clamp(lo, hi) * n.encoding.scale;
        n.encoding
            .encode(v)
            .unwrap_or_else(|_| vec![0; n.encoding.data_type.words() as usize])
    }

    fn input_registers(&mut self, snap: &Snapshot) -> BTreeMap<u16, u16> {
        let mut out = BTreeMap::new();
        let mut put = |n: Number, words: Vec<u16>| {
            for (i, w) in words.into_iter().enumerate() {
                out.insert(n.address + i as u16, w);
            }
        };
        match self.kind {
            InstrumentKind::Load => {
                put(
                    LOAD_READ_VOLTS,
                    self.measure(LOAD_READ_VOLTS, snap.vout, 1e-3, 50e-6),
                );
                put(
                    LOAD_READ_AMPS,
                    self.measure(LOAD_READ_AMPS, snap.iout, 1e-3, 100e-6),
                );
            }
            InstrumentKind::Source => {
                put(
                    SOURCE_READ_VOLTS,
                    self.measure(SOURCE_READ_VOLTS, snap.vin, 3e-3, 100e-6),
                );
                put(
                    SOURCE_READ_AMPS,
                    self.measure(SOURCE_READ_AMPS, snap.iin, 2e-3, 200e-6),
                );
            }
            _ => {}
        }
        let mut bytes = self.identity.clone().into_bytes();
        bytes.resize(IDENTITY_WORDS as usize * 2, 0);
        for (i, c) in bytes.chunks(2).enumerate() {
            out.insert(
                IDENTITY_ADDRESS + i as u16,
                u16::from_be_bytes([c[0], c[1]]),
            );
        }
        out
    }

    /// Answer one request PDU: the response PDU, or an exception PDU (an unknown function,
    /// an address the device does not have, a value it refuses).
    pub fn respond(&mut self, pdu: &[u8], c: &mut Controls, snap: &Snapshot) -> Vec<u8> {
        let function = pdu.first().copied().unwrap_or(0);
        // Read Device Identification: our own fictional vendor and product names.
        let product = format!("{} (Modbus)", self.kind.model());
        let objects: [(u8, &[u8]); 4] = [
            (0x00, MAKER.as_bytes()),
            (0x01, self.kind.model().as_bytes()),
            (0x02, b"1.0"),
            (0x04, product.as_bytes()),
        ];
        // Conformity level 0x82: regular objects, stream and individual access.
        if let Some(r) = crate::protocol::modbus::answer_device_id(pdu, 0x82, &objects) {
            return r.unwrap_or_else(|e| e.pdu(function));
        }
        match self.respond_inner(pdu, c, snap) {
            Ok(r) => r.encode(),
            Err(e) => e.pdu(function),
        }
    }

    fn respond_inner(
        &mut self,
        pdu: &[u8],
        c: &mut Controls,
        snap: &Snapshot,
    ) -> Result<Response, Exception> {
        let range = |a: u16, n: u16| (a as u32)..(a as u32 + n as u32);
        match parse_request(pdu)? {
            Request::ReadBits {
                function,
                address,
                count,
            } => {
                if function != crate::protocol::modbus::FC_READ_COILS {
                    return Err(Exception::IllegalDataAddress);
                }
                let values = range(address, count)
                    .map(|a| self.coils.get(&(a as u16)).copied().filter(|_| a <= 0xFFFF))
                    .collect::<Option<Vec<bool>>>()
                    .ok_or(Exception::IllegalDataAddress)?;
                Ok(Response::Bits { function, values })
            }
            Request::ReadRegisters {
                function,
                address,
                count,
            } => {
                let bank = if function == crate::protocol::modbus::FC_READ_HOLDING_REGISTERS {
                    self.holding.clone()
                } else {
                    self.input_registers(snap)
                };
                let values = range(address, count)
                    .map(|a| bank.get(&(a as u16)).copied().filter(|_| a <= 0xFFFF))
                    .collect::<Option<Vec<u16>>>()
                    .ok_or(Exception::IllegalDataAddress)?;
                Ok(Response::Registers { function, values })
            }
            Request::WriteCoil { address, on } => {
                self.write(c, |s| match s.coils.get_mut(&address) {
                    Some(b) => {
                        *b = on;
                        Ok(())
                    }
                    None => Err(Exception::IllegalDataAddress),
                })?;
                Ok(Response::WriteCoil { address, on })
            }
            Request::WriteRegister { address, value } => {
                self.write(c, |s| s.put_words(address, &[value]))?;
                Ok(Response::WriteRegister { address, value })
            }
            Request::WriteRegisters { address, values } => {
                self.write(c, |s| s.put_words(address, &values))?;
                Ok(Response::WroteMany {
                    function: crate::protocol::modbus::FC_WRITE_MULTIPLE_REGISTERS,
                    address,
                    count: values.len() as u16,
                })
            }
            Request::WriteCoils { address, values } => {
                self.write(c, |s| {
                    for (i, v) in values.iter().enumerate() {
                        match s.coils.get_mut(&(address.wrapping_add(i as u16))) {
                            Some(b) => *b = *v,
                            None => return Err(Exception::IllegalDataAddress),
                        }
                    }
                    Ok(())
                })?;
                Ok(Response::WroteMany {
                    function: crate::protocol::modbus::FC_WRITE_MULTIPLE_COILS,
                    address,
                    count: values.len() as u16,
                })
            }
        }
    }

    fn put_words(&mut self, address: u16, words: &[u16]) -> Result<(), Exception> {
        for (i, w) in words.iter().enumerate() {
            let a = address as u32 + i as u32;
            match self.holding.get_mut(&(a as u16)).filter(|_| a <= 0xFFFF) {
                Some(x) => *x = *w,
                None => return Err(Exception::IllegalDataAddress),
            }
        }
        Ok(())
    }

    /// Change the bank on a copy; keep it only when every setting it stands for is in range.
    fn write(
        &mut self,
        c: &mut Controls,
        f: impl FnOnce(&mut ModbusDeviceState) -> Result<(), Exception>,
    ) -> Result<(), Exception> {
        let mut next = self.clone();
        f(&mut next)?;
        let mut controls = *c;
        next.apply(&mut controls)
            .ok_or(Exception::IllegalDataValue)?;
        *self = next;
        *c = controls;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::protocol::modbus::{FC_READ_INPUT_REGISTERS, FC_WRITE_SINGLE_COIL};

    fn load() -> ModbusDeviceState {
        ModbusDeviceState::new(InstrumentKind::Load, "SIM1-3", 7, 0.0)
    }

    // Request and response PDUs as in the Modbus Application Protocol V1.1b3 section 6.
    #[test]
    fn settings_drive_the_controls_and_read_back() {
        let mut s = load();
        let mut c = Controls::default();
        let snap = Snapshot::default();
        // Mode CV (holding 0 = 1), echoed.
        assert_eq!(
            s.respond(&[0x06, 0, 0, 0, 1], &mut c, &snap),
            vec![0x06, 0, 0, 0, 1]
        );
        assert_eq!(c.load.mode, LoadMode::ConstantVoltage);
        // 1.5 A = 15000 counts of 0.1 mA in a u32 at 0x0010, high word first.
        let w = LOAD_CURRENT.encoding.encode(1.5).unwrap();
        assert_eq!(w, vec![0x0000, 15000]);
        let mut pdu = vec![0x10, 0x00, 0x10, 0x00, 0x02, 0x04];
        for x in &w {
            pdu.extend(x.to_be_bytes());
        }
        assert_eq!(
            s.respond(&pdu, &mut c, &snap),
            vec![0x10, 0x00, 0x10, 0x00, 0x02]
        );
        assert!((c.load.current - 1.5).abs() < 1e-9);
        assert_eq!(
            s.respond(&[0x03, 0x00, 0x10, 0x00, 0x02], &mut c, &snap),
            vec![0x03, 0x04, 0x00, 0x00, 0x3A, 0x98]
        );
        // Input coil on: FF 00 (section 6.5).
        assert_eq!(
            s.respond(&[FC_WRITE_SINGLE_COIL, 0, 0, 0xFF, 0], &mut c, &snap),
            vec![0x05, 0, 0, 0xFF, 0]
        );
        assert!(c.load.input_on);
        assert_eq!(
            s.respond(&[0x01, 0, 0, 0, 1], &mut c, &snap),
            vec![0x01, 0x01, 0x01]
        );
    }

    // Exception responses (V1.1b3 section 7): 02 for an address the device lacks, 03 for a
    // value it refuses (the bank keeps its old value), 01 for an unknown function.
    #[test]
    fn refusals_are_exception_responses() {
        let mut s = load();
        let mut c = Controls::default();
        let snap = Snapshot::default();
        assert_eq!(
            s.respond(&[0x03, 0x00, 0x40, 0x00, 0x01], &mut c, &snap),
            vec![0x83, 0x02]
        );
        assert_eq!(
            s.respond(&[0x06, 0x00, 0x00, 0x00, 0x07], &mut c, &snap),
            vec![0x86, 0x03]
        );
        assert_eq!(c.load.mode, LoadMode::ConstantCurrent);
        // A function code the device does not implement (0x41, user-defined range of
        // V1.1b3 section 5.1): exception 01.
        assert_eq!(
            s.respond(&[0x41, 0x00, 0x00], &mut c, &snap),
            vec![0xC1, 0x01]
        );
        // Read Device Identification answers with our own names (V1.1b3 section 6.21).
        let id = crate::protocol::modbus::parse_device_id_response(&s.respond(
            &[0x2B, 0x0E, 0x01, 0x00],
            &mut c,
            &snap,
        ))
        .unwrap();
        assert_eq!(id.objects[0], (0x00, MAKER.as_bytes().to_vec()));
        assert_eq!(id.objects.len(), 3);
        // 40 A is above the load's range.
        let w = LOAD_CURRENT.encoding.encode(40.0).unwrap();
        let mut pdu = vec![0x10, 0x00, 0x10, 0x00, 0x02, 0x04];
        for x in &w {
            pdu.extend(x.to_be_bytes());
        }
        assert_eq!(s.respond(&pdu, &mut c, &snap), vec![0x90, 0x03]);
    }

    #[test]
    fn readings_and_identity_are_input_registers() {
        let mut s = load();
        let mut c = Controls::default();
        let snap = Snapshot {
            vout: 12.0034,
            iout: 1.23456,
            ..Snapshot::default()
        };
        let r = s.respond(
            &[FC_READ_INPUT_REGISTERS, 0x01, 0x00, 0x00, 0x04],
            &mut c,
            &snap,
        );
        assert_eq!(r[..2], [0x04, 0x08]);
        let words: Vec<u16> = r[2..]
            .chunks(2)
            .map(|b| u16::from_be_bytes([b[0], b[1]]))
            .collect();
        assert!((LOAD_READ_VOLTS.encoding.decode(&words[..2]).unwrap() - 12.003).abs() < 1e-9);
        assert!((LOAD_READ_AMPS.encoding.decode(&words[2..]).unwrap() - 1.2346).abs() < 1e-9);
        let id = s.respond(
            &[0x04, 0x0F, 0x00, 0x00, IDENTITY_WORDS as u8],
            &mut c,
            &snap,
        );
        assert!(String::from_utf8_lossy(&id[2..]).starts_with(MAKER));
    }
}
