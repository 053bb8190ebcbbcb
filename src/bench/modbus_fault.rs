//! What can go wrong talking to a Modbus instrument, phrased as what to check: an exception
//! response (its code and meaning, Modbus Application Protocol V1.1b3 section 7), no reply,
//! a closed link, a reply that does not belong to the request, a value the register cannot
//! carry, and a read-back that differs from what was written. Plain data.

use crate::protocol::modbus::{exception_meaning, function_name, ValueError};
use crate::transport::IoCause;
use std::fmt;

/// One failed Modbus exchange.
#[derive(Debug, Clone, PartialEq)]
pub enum ModbusFault {
    /// The device answered with an exception response.
    Exception { function: u8, code: u8, unit: u8 },
    /// No (valid) reply within the deadline; garbled frames are dropped by their CRC.
    NoReply { ms: u128, unit: u8 },
    /// The link closed.
    Closed,
    /// The link failed.
    Io(IoCause),
    /// A reply that does not answer the request (other unit, transaction or function).
    Mismatch(String),
    /// The value cannot be written in the register's encoding.
    Value(ValueError),
    /// The device keeps something other than what was written.
    ReadBack { wrote: String, read: String },
}

impl fmt::Display for ModbusFault {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ModbusFault::Exception { function, code, unit } => write!(
                f,
                "exception 0x{code:02X} from unit {unit} to {} (function 0x{:02X}): {}",
                function_name(*function),
                function & 0x7F,
                exception_meaning(*code)
            ),
            ModbusFault::NoReply { ms, unit } => write!(
                f,
                "no valid reply from unit {unit} within {ms} ms; check the unit id, the wiring (A/B), baud rate and parity, or the address and port"
            ),
            ModbusFault::Closed => write!(
                f,
                "connection closed; check the cable or network and that the instrument is still on"
            ),
            ModbusFault::Io(e) => write!(f, "input/output error: {e}"),
            ModbusFault::Mismatch(m) => write!(
                f,
                "a reply that does not answer the request ({m}); another master on the line, or a late reply"
            ),
            ModbusFault::Value(e) => write!(f, "{e}; check type, scale and unit in the register map"),
            ModbusFault::ReadBack { wrote, read } => write!(
                f,
                "read back {read} after writing {wrote}: the setting was not applied; check the address and that the device is in remote mode"
            ),
        }
    }
}
