//! The checked register map of a Modbus instrument: for each command key the instrument
//! serves, the data object, address and payload (a fixed coil or register value, or a number
//! with its encoding and unit), plus the unit id, the framing, the gap between frames, how
//! settings are confirmed and where an identity text is kept. Built by `modbus_checks`; no I/O.

use super::keys::CommandKey;
use crate::protocol::modbus::{Encoding, ObjectKind};
use std::collections::BTreeMap;
use std::fmt;
use std::time::Duration;

/// How Modbus frames travel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Framing {
    /// RTU on a serial line (unit address and CRC-16 around each PDU).
    Rtu,
    /// Modbus TCP (MBAP header).
    Tcp,
}

/// How the bench knows a setting was applied.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Confirm {
    /// Read every written coil and register back and compare (the default).
    Readback,
    /// Trust the write's normal response (the device echoes the request when it accepts it).
    WriteResponse,
}

/// A fixed value written by a command without a setpoint.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fixed {
    Coil(bool),
    Word(u16),
}

/// What a command writes, or what a measurement reads.
#[derive(Debug, Clone, PartialEq)]
pub enum Payload {
    Fixed(Fixed),
    /// A number: its encoding (scale in SI units per count) and the unit as written.
    Number {
        encoding: Encoding,
        unit: String,
        /// Raw values that mean "over range" (measurements only): the register's 16 bits, or
        /// a 32-bit type's 32 bits in the number's own order (the word order undone), before
        /// any scaling.
        overrange: Vec<u32>,
        /// A flag read after the number: while it is set, the reading is over range.
        overrange_flag: Option<OverrangeFlag>,
    },
}

/// Where a device flags "over range": a coil or discrete input, or one bit (0 the least
/// significant) of a holding or input register.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OverrangeFlag {
    pub object: ObjectKind,
    pub address: u16,
    /// The bit of a register; `None` for a coil or discrete input.
    pub bit: Option<u8>,
}

/// One command key's place in the device.
#[derive(Debug, Clone, PartialEq)]
pub struct RegisterAction {
    pub key: CommandKey,
    pub object: ObjectKind,
    pub address: u16,
    pub payload: Payload,
}

impl RegisterAction {
    /// Registers (or coils) the action covers.
    pub fn count(&self) -> u16 {
        match &self.payload {
            Payload::Fixed(_) => 1,
            Payload::Number { encoding, .. } => encoding.data_type.words(),
        }
    }
}

impl fmt::Display for RegisterAction {
    /// e.g. `load_set_current (holding register 16 = 0x0010, f32 x 0.001, A)`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} ({} {} = 0x{:04X}",
            self.key.name(),
            self.object.name(),
            self.address,
            self.address
        )?;
        match &self.payload {
            Payload::Fixed(Fixed::Coil(b)) => write!(f, ", {}", if *b { "on" } else { "off" })?,
            Payload::Fixed(Fixed::Word(w)) => write!(f, ", value {w}")?,
            Payload::Number { encoding, unit, .. } => write!(f, ", {encoding}, {unit}")?,
        }
        f.write_str(")")
    }
}

/// Registers holding an identity text (two ASCII characters per register, high byte first).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct IdentityBlock {
    pub object: ObjectKind,
    pub address: u16,
    pub words: u16,
}

/// The checked `[instrument.modbus]` table.
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusMap {
    pub framing: Framing,
    /// Unit id (RTU slave address, or the MBAP unit identifier).
    pub unit: u8,
    /// Silence kept between the end of one exchange and the next request.
    pub frame_gap: Duration,
    pub confirm: Confirm,
    pub identity: Option<IdentityBlock>,
    pub actions: BTreeMap<CommandKey, RegisterAction>,
}

impl ModbusMap {
    /// The command text the bench's generic code carries for a key: the key's name, with a
    /// `{value}` placeholder when it takes a setpoint. [`ModbusMap::action_for`] maps it back.
    pub fn command_text(key: CommandKey) -> String {
        match key.arity() {
            crate::protocol::Arity::NoValue => key.name().to_string(),
            crate::protocol::Arity::OneValue => format!("{} {{value}}", key.name()),
        }
    }

    /// The action a command text (as made by [`ModbusMap::command_text`], rendered or not)
    /// stands for.
    pub fn action_for(&self, text: &str) -> Option<&RegisterAction> {
        let name = text.split_whitespace().next()?;
        self.actions.get(&CommandKey::from_name(name)?)
    }

    /// Text the identity query carries for a Modbus instrument with an identity block.
    pub const IDENTITY_QUERY: &'static str = "identity";
}
