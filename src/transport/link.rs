//! Link settings: how an instrument is reached (a serial line with its framing, or a TCP
//! socket). Every field is a type in which a bad value cannot be written (data bits 5-8, stop
//! bits 1 or 2, a non-zero baud rate and port). Pure data: opening lives in `serial` and `tcp`.

use serde::Deserialize;
use std::num::{NonZeroU16, NonZeroU32};
use std::time::Duration;

/// Serial parity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Parity {
    None,
    Odd,
    Even,
}

impl Parity {
    /// The letter of the usual `8N1` shorthand.
    pub fn letter(self) -> char {
        match self {
            Parity::None => 'N',
            Parity::Odd => 'O',
            Parity::Even => 'E',
        }
    }
}

/// Serial flow control.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FlowControl {
    None,
    Software,
    Hardware,
}

/// Data bits per character.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DataBits {
    Five,
    Six,
    Seven,
    Eight,
}

impl DataBits {
    /// The setting for a number of bits, `None` outside 5-8.
    pub fn from_bits(bits: u8) -> Option<DataBits> {
        Some(match bits {
            5 => DataBits::Five,
            6 => DataBits::Six,
            7 => DataBits::Seven,
            8 => DataBits::Eight,
            _ => return None,
        })
    }

    pub fn bits(self) -> u8 {
        match self {
            DataBits::Five => 5,
            DataBits::Six => 6,
            DataBits::Seven => 7,
            DataBits::Eight => 8,
        }
    }
}

/// Stop bits per character.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StopBits {
    One,
    Two,
}

impl StopBits {
    /// The setting for a number of stop bits, `None` for anything but 1 or 2.
    pub fn from_bits(bits: u8) -> Option<StopBits> {
        match bits {
            1 => Some(StopBits::One),
            2 => Some(StopBits::Two),
            _ => None,
        }
    }

    pub fn bits(self) -> u8 {
        match self {
            StopBits::One => 1,
            StopBits::Two => 2,
        }
    }
}

/// Serial line settings.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SerialSettings {
    pub port: String,
    pub baud: NonZeroU32,
    pub data_bits: DataBits,
    pub parity: Parity,
    pub stop_bits: StopBits,
    pub flow_control: FlowControl,
}

/// TCP socket settings.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TcpSettings {
    pub host: String,
    pub port: NonZeroU16,
    pub connect_timeout: Duration,
}

/// A USB-TMC node (message-based, see `usbtmc`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UsbTmcSettings {
    pub path: String,
}

/// How an instrument is reached.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LinkConfig {
    Serial(SerialSettings),
    Tcp(TcpSettings),
    UsbTmc(UsbTmcSettings),
}

impl LinkConfig {
    /// Short description, e.g. `serial /dev/ttyUSB0 @ 9600 8N1` or `tcp 10.0.0.5:5025`.
    pub fn describe(&self) -> String {
        match self {
            LinkConfig::Serial(s) => format!(
                "serial {} @ {} {}{}{}",
                s.port,
                s.baud,
                s.data_bits.bits(),
                s.parity.letter(),
                s.stop_bits.bits()
            ),
            LinkConfig::Tcp(t) => format!("tcp {}:{}", t.host, t.port),
            LinkConfig::UsbTmc(u) => format!("usbtmc {}", u.path),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // The `8N1` shorthand: data bits, parity letter, stop bits (common practice).
    #[test]
    fn describes_serial_framing_and_tcp_address() {
        let s = LinkConfig::Serial(SerialSettings {
            port: "/dev/ttyUSB1".into(),
            baud: NonZeroU32::new(115200).unwrap(),
            data_bits: DataBits::Seven,
            parity: Parity::Even,
            stop_bits: StopBits::Two,
            flow_control: FlowControl::None,
        });
        assert_eq!(s.describe(), "serial /dev/ttyUSB1 @ 115200 7E2");
        let t = LinkConfig::Tcp(TcpSettings {
            host: "10.0.0.5".into(),
            port: NonZeroU16::new(5025).unwrap(),
            connect_timeout: Duration::from_secs(3),
        });
        assert_eq!(t.describe(), "tcp 10.0.0.5:5025");
    }

    #[test]
    fn only_real_framings_can_be_written() {
        assert_eq!(DataBits::from_bits(4), None);
        assert_eq!(DataBits::from_bits(9), None);
        assert_eq!(DataBits::from_bits(8).map(DataBits::bits), Some(8));
        assert_eq!(StopBits::from_bits(0), None);
        assert_eq!(StopBits::from_bits(3), None);
        assert_eq!(StopBits::from_bits(2).map(StopBits::bits), Some(2));
    }
}
