//! The data objects of a Modbus device (coils, discrete inputs, input and holding
//! registers), and how a number is carried in 16-bit registers: data type, word order and
//! scale. The specification defines registers as 16-bit words sent high byte first; wider
//! values spread over two registers in an order each maker chooses, hence [`WordOrder`].

use serde::Deserialize;
use std::fmt;

/// One of the four primary data tables (Modbus Application Protocol V1.1b3, section 4.3).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ObjectKind {
    /// Single bit, read-write (function codes 01, 05, 15).
    Coil,
    /// Single bit, read-only (function code 02).
    DiscreteInput,
    /// 16-bit word, read-write (function codes 03, 06, 16).
    Holding,
    /// 16-bit word, read-only (function code 04).
    Input,
}

impl ObjectKind {
    /// True for the single-bit tables.
    pub fn is_bit(self) -> bool {
        matches!(self, ObjectKind::Coil | ObjectKind::DiscreteInput)
    }

    /// True for the tables a client may write.
    pub fn is_writable(self) -> bool {
        matches!(self, ObjectKind::Coil | ObjectKind::Holding)
    }

    pub fn name(self) -> &'static str {
        match self {
            ObjectKind::Coil => "coil",
            ObjectKind::DiscreteInput => "discrete input",
            ObjectKind::Holding => "holding register",
            ObjectKind::Input => "input register",
        }
    }
}

/// How a number is stored in one or two registers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DataType {
    U16,
    I16,
    U32,
    I32,
    /// IEEE 754 single precision in two registers.
    F32,
}

impl DataType {
    /// Registers the type takes.
    pub fn words(self) -> u16 {
        match self {
            DataType::U16 | DataType::I16 => 1,
            DataType::U32 | DataType::I32 | DataType::F32 => 2,
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            DataType::U16 => "u16",
            DataType::I16 => "i16",
            DataType::U32 => "u32",
            DataType::I32 => "i32",
            DataType::F32 => "f32",
        }
    }

    /// Smallest and largest raw value (before scaling).
    fn range(self) -> (f64, f64) {
        match self {
            DataType::U16 => (0.0, u16::MAX as f64),
            DataType::I16 => (i16::MIN as f64, i16::MAX as f64),
            DataType::U32 => (0.0, u32::MAX as f64),
            DataType::I32 => (i32::MIN as f64, i32::MAX as f64),
            DataType::F32 => (f32::MIN as f64, f32::MAX as f64),
        }
    }
}

/// Which register of a two-register value comes first.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum WordOrder {
    /// The high 16 bits in the lower address (big-endian throughout).
    #[default]
    HighFirst,
    /// The low 16 bits in the lower address ("word-swapped").
    LowFirst,
}

/// A number's encoding: type, word order and scale (engineering value, in SI units, of one
/// raw count: a register in millivolts has scale 0.001).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Encoding {
    pub data_type: DataType,
    pub word_order: WordOrder,
    pub scale: f64,
}

/// A value that cannot be carried by an encoding.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ValueError {
    #[error("{value} is {raw} counts at scale {scale}, outside {min}..{max} of {data_type}")]
    OutOfRange {
        value: f64,
        raw: f64,
        scale: f64,
        min: f64,
        max: f64,
        data_type: &'static str,
    },
    #[error("{0} is not a finite number")]
    NotFinite(f64),
    #[error("{data_type} takes {expected} register(s), got {got}")]
    WrongLength {
        data_type: &'static str,
        expected: u16,
        got: usize,
    },
}

impl fmt::Display for Encoding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.data_type.name())?;
        if self.data_type.words() == 2 && self.word_order == WordOrder::LowFirst {
            write!(f, " low word first")?;
        }
        if self.scale != 1.0 {
            write!(f, " x {}", self.scale)?;
        }
        Ok(())
    }
}

impl Encoding {
    pub fn new(data_type: DataType, word_order: WordOrder, scale: f64) -> Encoding {
        Encoding {
            data_type,
            word_order,
            scale,
        }
    }

    /// The registers that carry `value` (SI units): divided by the scale, rounded for the
    /// integer types, refused outside the type's range.
    pub fn encode(&self, value: f64) -> Result<Vec<u16>, ValueError> {
        if !value.is_finite() {
            return Err(ValueError::NotFinite(value));
        }
        let raw = value / self.scale;
        let raw = if self.data_type == DataType::F32 {
            raw
        } else {
            raw.round()
        };
        let (min, max) = self.data_type.range();
        if !raw.is_finite() || raw < min || raw > max {
            return Err(ValueError::OutOfRange {
                value,
                raw,
                scale: self.scale,
                min,
                max,
                data_type: self.data_type.name(),
            });
        }
        let bits: u32 = match self.data_type {
            DataType::U16 => return Ok(vec![raw as u16]),
            DataType::I16 => return Ok(vec![(raw as i16) as u16]),
            DataType::U32 => raw as u32,
            DataType::I32 => (raw as i32) as u32,
            DataType::F32 => (raw as f32).to_bits(),
        };
        let (hi, lo) = ((bits >> 16) as u16, bits as u16);
        Ok(match self.word_order {
            WordOrder::HighFirst => vec![hi, lo],
            WordOrder::LowFirst => vec![lo, hi],
        })
    }

    /// The value (SI units) that `words` carry.
    pub fn decode(&self, words: &[u16]) -> Result<f64, ValueError> {
        let n = self.data_type.words();
        if words.len() != n as usize {
            return Err(ValueError::WrongLength {
                data_type: self.data_type.name(),
                expected: n,
                got: words.len(),
            });
        }
        let bits = || -> u32 {
            let (hi, lo) = match self.word_order {
                WordOrder::HighFirst => (words[0], words[1]),
                WordOrder::LowFirst => (words[1], words[0]),
            };
            ((hi as u32) << 16) | lo as u32
        };
        let raw = match self.data_type {
            DataType::U16 => words[0] as f64,
            DataType::I16 => words[0] as i16 as f64,
            DataType::U32 => bits() as f64,
            DataType::I32 => bits() as i32 as f64,
            DataType::F32 => f32::from_bits(bits()) as f64,
        };
        Ok(raw * self.scale)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn enc(t: DataType, o: WordOrder, scale: f64) -> Encoding {
        Encoding::new(t, o, scale)
    }

    // IEEE 754-2008 binary32: 1.0 is 0x3F800000 and -2.5 is 0xC0200000 (the standard's
    // encoding: sign, biased exponent 127, fraction).
    #[test]
    fn f32_follows_ieee_754_and_the_word_order() {
        let hi = enc(DataType::F32, WordOrder::HighFirst, 1.0);
        assert_eq!(hi.encode(1.0).unwrap(), vec![0x3F80, 0x0000]);
        assert_eq!(hi.encode(-2.5).unwrap(), vec![0xC020, 0x0000]);
        let lo = enc(DataType::F32, WordOrder::LowFirst, 1.0);
        assert_eq!(lo.encode(1.0).unwrap(), vec![0x0000, 0x3F80]);
        assert_eq!(lo.decode(&[0x0000, 0xC020]).unwrap(), -2.5);
        assert!(hi.encode(f64::NAN).is_err());
    }

    // Registers are 16-bit words (Modbus Application Protocol V1.1b3 section 4.2); signed types
    // are two's complement: -1 is 0xFFFF.
    #[test]
    fn integers_round_scale_and_keep_their_range() {
        let mv = enc(DataType::U16, WordOrder::HighFirst, 0.001);
        assert_eq!(mv.encode(12.3456).unwrap(), vec![12346]);
        assert!((mv.decode(&[12346]).unwrap() - 12.346).abs() < 1e-12);
        assert!(matches!(
            mv.encode(65.536),
            Err(ValueError::OutOfRange { .. })
        ));
        assert!(mv.encode(-0.001).is_err());
        let s = enc(DataType::I16, WordOrder::HighFirst, 1.0);
        assert_eq!(s.encode(-1.0).unwrap(), vec![0xFFFF]);
        assert_eq!(s.decode(&[0x8000]).unwrap(), -32768.0);
        let u = enc(DataType::U32, WordOrder::HighFirst, 1.0);
        assert_eq!(u.encode(70000.0).unwrap(), vec![0x0001, 0x1170]);
        let ul = enc(DataType::U32, WordOrder::LowFirst, 1.0);
        assert_eq!(ul.encode(70000.0).unwrap(), vec![0x1170, 0x0001]);
        let i = enc(DataType::I32, WordOrder::HighFirst, 0.01);
        assert_eq!(i.encode(-1.0).unwrap(), vec![0xFFFF, 0xFF9C]);
        assert!((i.decode(&[0xFFFF, 0xFF9C]).unwrap() + 1.0).abs() < 1e-12);
        assert!(matches!(
            i.decode(&[1]),
            Err(ValueError::WrongLength { expected: 2, .. })
        ));
    }
}
