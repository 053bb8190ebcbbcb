//! How an instrument's link reads in messages, probe tables and records: the link itself, and
//! for a Modbus instrument its framing and unit id. Pure.

use super::checked::InstrumentConfig;
use super::modbus_map::Framing;

impl InstrumentConfig {
    /// The link as messages and records show it: the link, and for a Modbus instrument its
    /// framing and unit id first (`modbus rtu unit 1 on serial /dev/ttyUSB0 @ 19200 8E1`).
    pub fn link_description(&self) -> String {
        match &self.modbus {
            None => self.link.describe(),
            Some(m) => format!(
                "modbus {} unit {} on {}",
                match m.framing {
                    Framing::Rtu => "rtu",
                    Framing::Tcp => "tcp",
                },
                m.unit,
                self.link.describe()
            ),
        }
    }
}
