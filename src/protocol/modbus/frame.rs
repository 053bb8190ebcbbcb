//! Modbus frames, after the Modbus Application Protocol Specification V1.1b3 (function codes,
//! request and response PDUs in section 6, exception responses in section 7, the MBAP header
//! of Modbus TCP) and the Modbus over Serial Line Specification V1.02 (RTU framing and its
//! CRC-16, section 2.5.1). Used by the simulator's server side, and by the bench for the
//! guardian's safe-state frames ([`Request::encode`]: the guardian writes requests without a
//! client); the bench's client side runs on tokio-modbus, and the exception meanings here
//! name what it reports.

/// Function codes (V1.1b3 section 5.1, public function codes).
pub const FC_READ_COILS: u8 = 0x01;
pub const FC_READ_DISCRETE_INPUTS: u8 = 0x02;
pub const FC_READ_HOLDING_REGISTERS: u8 = 0x03;
pub const FC_READ_INPUT_REGISTERS: u8 = 0x04;
pub const FC_WRITE_SINGLE_COIL: u8 = 0x05;
pub const FC_WRITE_SINGLE_REGISTER: u8 = 0x06;
pub const FC_WRITE_MULTIPLE_COILS: u8 = 0x0F;
pub const FC_WRITE_MULTIPLE_REGISTERS: u8 = 0x10;
/// Function code 43, Encapsulated Interface Transport (V1.1b3 section 6.19; see `device_id`).
pub const FC_ENCAPSULATED_INTERFACE: u8 = 0x2B;

/// The name of a function code, for messages.
pub fn function_name(code: u8) -> &'static str {
    match code & 0x7F {
        FC_READ_COILS => "read coils",
        FC_READ_DISCRETE_INPUTS => "read discrete inputs",
        FC_READ_HOLDING_REGISTERS => "read holding registers",
        FC_READ_INPUT_REGISTERS => "read input registers",
        FC_WRITE_SINGLE_COIL => "write single coil",
        FC_WRITE_SINGLE_REGISTER => "write single register",
        FC_WRITE_MULTIPLE_COILS => "write multiple coils",
        FC_WRITE_MULTIPLE_REGISTERS => "write multiple registers",
        _ => "unknown function",
    }
}

/// Exception codes (V1.1b3 section 7).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exception {
    IllegalFunction = 0x01,
    IllegalDataAddress = 0x02,
    IllegalDataValue = 0x03,
    ServerDeviceFailure = 0x04,
    Acknowledge = 0x05,
    ServerDeviceBusy = 0x06,
    MemoryParityError = 0x08,
    GatewayPathUnavailable = 0x0A,
    GatewayTargetFailedToRespond = 0x0B,
}

impl Exception {
    pub fn code(self) -> u8 {
        self as u8
    }
}

/// What an exception code means (V1.1b3 section 7), phrased for the user.
pub fn exception_meaning(code: u8) -> &'static str {
    match code {
        0x01 => "illegal function: the device does not support this function code",
        0x02 => "illegal data address: the device has no such register or coil; check the address in the register map",
        0x03 => "illegal data value: the device refused the value (out of its range or malformed)",
        0x04 => "server device failure: the device failed while performing the action",
        0x05 => "acknowledge: the device accepted a long-running request and is still processing it",
        0x06 => "server device busy: the device is processing a long-running command; retry later",
        0x08 => "memory parity error: the device found a parity error in its memory",
        0x0A => "gateway path unavailable: the gateway cannot route to the device",
        0x0B => "gateway target device failed to respond: no reply from behind the gateway; check the unit id",
        _ => "an exception code the specification does not define",
    }
}

/// A request PDU a server understands.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Request {
    /// Read coils (01) or discrete inputs (02).
    ReadBits {
        function: u8,
        address: u16,
        count: u16,
    },
    /// Read holding (03) or input (04) registers.
    ReadRegisters {
        function: u8,
        address: u16,
        count: u16,
    },
    WriteCoil {
        address: u16,
        on: bool,
    },
    WriteRegister {
        address: u16,
        value: u16,
    },
    WriteCoils {
        address: u16,
        values: Vec<bool>,
    },
    WriteRegisters {
        address: u16,
        values: Vec<u16>,
    },
}

/// A server's normal response.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Response {
    Bits {
        function: u8,
        values: Vec<bool>,
    },
    Registers {
        function: u8,
        values: Vec<u16>,
    },
    /// Writes answer with the echo of the request's first fields.
    WriteCoil {
        address: u16,
        on: bool,
    },
    WriteRegister {
        address: u16,
        value: u16,
    },
    WroteMany {
        function: u8,
        address: u16,
        count: u16,
    },
}

fn be16(b: &[u8], at: usize) -> Option<u16> {
    Some(u16::from_be_bytes([*b.get(at)?, *b.get(at + 1)?]))
}

/// Decode a request PDU (function code first). Quantity limits are those of V1.1b3 section 6
/// (2000 bits or 125 registers to read, 1968 coils or 123 registers to write); a request
/// outside them or with a bad byte count is an illegal data value, an unknown code an illegal
/// function.
pub fn parse_request(pdu: &[u8]) -> Result<Request, Exception> {
    let Some(&function) = pdu.first() else {
        return Err(Exception::IllegalFunction);
    };
    let bad = Exception::IllegalDataValue;
    let address = be16(pdu, 1);
    let second = be16(pdu, 3);
    match function {
        FC_READ_COILS
        | FC_READ_DISCRETE_INPUTS
        | FC_READ_HOLDING_REGISTERS
        | FC_READ_INPUT_REGISTERS => {
            let (Some(address), Some(count)) = (address, second) else {
                return Err(bad);
            };
            let bits = function <= FC_READ_DISCRETE_INPUTS;
            let max = if bits { 2000 } else { 125 };
            if pdu.len() != 5 || count == 0 || count > max {
                return Err(bad);
            }
            Ok(if bits {
                Request::ReadBits {
                    function,
                    address,
                    count,
                }
            } else {
                Request::ReadRegisters {
                    function,
                    address,
                    count,
                }
            })
        }
        FC_WRITE_SINGLE_COIL => {
            let (Some(address), Some(v)) = (address, second) else {
                return Err(bad);
            };
            // 0xFF00 requests ON, 0x0000 OFF; any other value is illegal (section 6.5).
            let on = match v {
                0xFF00 => true,
                0x0000 => false,
                _ => return Err(bad),
            };
            if pdu.len() != 5 {
                return Err(bad);
            }
            Ok(Request::WriteCoil { address, on })
        }
        FC_WRITE_SINGLE_REGISTER => {
            let (Some(address), Some(value)) = (address, second) else {
                return Err(bad);
            };
            if pdu.len() != 5 {
                return Err(bad);
            }
            Ok(Request::WriteRegister { address, value })
        }
        FC_WRITE_MULTIPLE_COILS | FC_WRITE_MULTIPLE_REGISTERS => {
            let (Some(address), Some(count), Some(&bytes)) = (address, second, pdu.get(5)) else {
                return Err(bad);
            };
            let coils = function == FC_WRITE_MULTIPLE_COILS;
            let (max, need) = if coils {
                (1968, count.div_ceil(8) as u32)
            } else {
                (123, count as u32 * 2)
            };
            if count == 0 || count > max || bytes as u32 != need || pdu.len() != 6 + bytes as usize
            {
                return Err(bad);
            }
            let data = &pdu[6..];
            if coils {
                let values = (0..count as usize)
                    .map(|i| data[i / 8] & (1 << (i % 8)) != 0)
                    .collect();
                Ok(Request::WriteCoils { address, values })
            } else {
                let values = data
                    .chunks(2)
                    .map(|c| u16::from_be_bytes([c[0], c[1]]))
                    .collect();
                Ok(Request::WriteRegisters { address, values })
            }
        }
        _ => Err(Exception::IllegalFunction),
    }
}

impl Request {
    /// The request PDU's bytes (function code first), as a client sends it (V1.1b3 section
    /// 6): address and quantity high byte first, a coil written ON as 0xFF00 and OFF as
    /// 0x0000, coils of a multiple write packed first coil in the low-order bit of the first
    /// byte. The inverse of [`parse_request`] for every request it accepts.
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        match self {
            Request::ReadBits {
                function,
                address,
                count,
            }
            | Request::ReadRegisters {
                function,
                address,
                count,
            } => {
                out.push(*function);
                out.extend(address.to_be_bytes());
                out.extend(count.to_be_bytes());
            }
            Request::WriteCoil { address, on } => {
                out.push(FC_WRITE_SINGLE_COIL);
                out.extend(address.to_be_bytes());
                out.extend(if *on { [0xFF, 0x00] } else { [0x00, 0x00] });
            }
            Request::WriteRegister { address, value } => {
                out.push(FC_WRITE_SINGLE_REGISTER);
                out.extend(address.to_be_bytes());
                out.extend(value.to_be_bytes());
            }
            Request::WriteCoils { address, values } => {
                out.push(FC_WRITE_MULTIPLE_COILS);
                out.extend(address.to_be_bytes());
                out.extend((values.len() as u16).to_be_bytes());
                let n = values.len().div_ceil(8);
                out.push(n as u8);
                let mut bytes = vec![0u8; n];
                for (i, b) in values.iter().enumerate() {
                    if *b {
                        bytes[i / 8] |= 1 << (i % 8);
                    }
                }
                out.extend(bytes);
            }
            Request::WriteRegisters { address, values } => {
                out.push(FC_WRITE_MULTIPLE_REGISTERS);
                out.extend(address.to_be_bytes());
                out.extend((values.len() as u16).to_be_bytes());
                out.push((values.len() * 2) as u8);
                for v in values {
                    out.extend(v.to_be_bytes());
                }
            }
        }
        out
    }

    /// The whole RTU ADU for unit `unit`: address, PDU, CRC (see [`rtu_frame`]).
    pub fn rtu_adu(&self, unit: u8) -> Vec<u8> {
        rtu_frame(unit, &self.encode())
    }

    /// The whole Modbus TCP ADU: MBAP header and PDU (see [`mbap_frame`]).
    pub fn tcp_adu(&self, transaction: u16, unit: u8) -> Vec<u8> {
        mbap_frame(transaction, unit, &self.encode())
    }
}

impl Response {
    /// The response PDU's bytes. Bits are packed first bit in the low-order bit of the first
    /// byte (section 6.1).
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        match self {
            Response::Bits { function, values } => {
                out.push(*function);
                let n = values.len().div_ceil(8);
                out.push(n as u8);
                let mut bytes = vec![0u8; n];
                for (i, b) in values.iter().enumerate() {
                    if *b {
                        bytes[i / 8] |= 1 << (i % 8);
                    }
                }
                out.extend(bytes);
            }
            Response::Registers { function, values } => {
                out.push(*function);
                out.push((values.len() * 2) as u8);
                for v in values {
                    out.extend(v.to_be_bytes());
                }
            }
            Response::WriteCoil { address, on } => {
                out.push(FC_WRITE_SINGLE_COIL);
                out.extend(address.to_be_bytes());
                out.extend(if *on { [0xFF, 0x00] } else { [0x00, 0x00] });
            }
            Response::WriteRegister { address, value } => {
                out.push(FC_WRITE_SINGLE_REGISTER);
                out.extend(address.to_be_bytes());
                out.extend(value.to_be_bytes());
            }
            Response::WroteMany {
                function,
                address,
                count,
            } => {
                out.push(*function);
                out.extend(address.to_be_bytes());
                out.extend(count.to_be_bytes());
            }
        }
        out
    }
}

impl Exception {
    /// The exception response PDU: the function code with its high bit set, then the code.
    pub fn pdu(self, function: u8) -> Vec<u8> {
        vec![function | 0x80, self.code()]
    }
}

/// CRC-16/MODBUS (polynomial 0xA001 reflected, initial value 0xFFFF), as the Modbus over
/// Serial Line Specification V1.02 section 6.2.2 computes it.
pub fn crc16(data: &[u8]) -> u16 {
    let mut crc: u16 = 0xFFFF;
    for &b in data {
        crc ^= b as u16;
        for _ in 0..8 {
            crc = if crc & 1 != 0 {
                (crc >> 1) ^ 0xA001
            } else {
                crc >> 1
            };
        }
    }
    crc
}

/// An RTU frame: unit address, PDU, CRC low byte first (serial line spec section 2.5.1.2).
pub fn rtu_frame(unit: u8, pdu: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(pdu.len() + 3);
    out.push(unit);
    out.extend_from_slice(pdu);
    let crc = crc16(&out);
    out.extend(crc.to_le_bytes());
    out
}

/// The length of the RTU request frame that starts `buf`, from its function code: `None` when
/// more bytes are needed, `Some(0)` when the function code is unknown (the frame's end cannot
/// be told from its content).
pub fn rtu_request_len(buf: &[u8]) -> Option<usize> {
    let function = *buf.get(1)?;
    match function {
        FC_READ_COILS..=FC_WRITE_SINGLE_REGISTER => Some(8),
        FC_WRITE_MULTIPLE_COILS | FC_WRITE_MULTIPLE_REGISTERS => Some(9 + *buf.get(6)? as usize),
        // Read Device Identification: MEI type, code, object id (V1.1b3 section 6.21).
        FC_ENCAPSULATED_INTERFACE => Some(7),
        _ => Some(0),
    }
}

/// A Modbus TCP frame: the MBAP header (transaction id, protocol id 0, length of what follows,
/// unit id) and the PDU.
pub fn mbap_frame(transaction: u16, unit: u8, pdu: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(pdu.len() + 7);
    out.extend(transaction.to_be_bytes());
    out.extend(0u16.to_be_bytes());
    out.extend(((pdu.len() + 1) as u16).to_be_bytes());
    out.push(unit);
    out.extend_from_slice(pdu);
    out
}

/// One Modbus TCP frame found at the front of a buffer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MbapFrame<'a> {
    pub transaction: u16,
    pub unit: u8,
    pub pdu: &'a [u8],
    /// Bytes the frame takes, header included.
    pub len: usize,
}

/// A header no Modbus TCP peer would send (protocol id not 0, a length below 2 or above 254).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BadHeader;

/// Split one MBAP frame off the front of `buf`, or `None` when more bytes are needed.
pub fn mbap_split(buf: &[u8]) -> Result<Option<MbapFrame<'_>>, BadHeader> {
    if buf.len() < 7 {
        return Ok(None);
    }
    let tid = u16::from_be_bytes([buf[0], buf[1]]);
    let proto = u16::from_be_bytes([buf[2], buf[3]]);
    let len = u16::from_be_bytes([buf[4], buf[5]]) as usize;
    if proto != 0 || !(2..=254).contains(&len) {
        return Err(BadHeader);
    }
    let total = 6 + len;
    if buf.len() < total {
        return Ok(None);
    }
    Ok(Some(MbapFrame {
        transaction: tid,
        unit: buf[6],
        pdu: &buf[7..total],
        len: total,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    // CRC-16/MODBUS check value: 0x4B37 over the ASCII string "123456789" (the CRC
    // catalogue's check value for this algorithm).
    #[test]
    fn crc_matches_the_check_value() {
        assert_eq!(crc16(b"123456789"), 0x4B37);
        // A read of 10 holding registers from unit 1 ends C5 CD, CRC low byte first (from
        // memory: the example frame most Modbus RTU guides print).
        assert_eq!(
            rtu_frame(1, &[0x03, 0x00, 0x00, 0x00, 0x0A]),
            vec![0x01, 0x03, 0x00, 0x00, 0x00, 0x0A, 0xC5, 0xCD]
        );
    }

    // Modbus Application Protocol V1.1b3 section 6.3 example: read holding registers 108-110
    // (address 0x006B, 3 registers); response with 0x022B, 0x0000, 0x0064.
    #[test]
    fn read_holding_registers_example_of_the_specification() {
        assert_eq!(
            parse_request(&[0x03, 0x00, 0x6B, 0x00, 0x03]),
            Ok(Request::ReadRegisters {
                function: 0x03,
                address: 0x6B,
                count: 3
            })
        );
        let r = Response::Registers {
            function: 0x03,
            values: vec![0x022B, 0x0000, 0x0064],
        };
        assert_eq!(
            r.encode(),
            vec![0x03, 0x06, 0x02, 0x2B, 0x00, 0x00, 0x00, 0x64]
        );
    }

    // V1.1b3 section 6.1 example: read coils 20-38 (address 0x0013, 19 coils); the response
    // bytes CD 6B 05 hold coil 20 in the low bit of the first byte.
    #[test]
    fn read_coils_example_packs_bits_low_first() {
        assert_eq!(
            parse_request(&[0x01, 0x00, 0x13, 0x00, 0x13]),
            Ok(Request::ReadBits {
                function: 0x01,
                address: 0x13,
                count: 19
            })
        );
        let bits = |b: u8, n: usize| (0..n).map(move |i| b & (1 << i) != 0);
        let values: Vec<bool> = bits(0xCD, 8)
            .chain(bits(0x6B, 8))
            .chain(bits(0x05, 3))
            .collect();
        let r = Response::Bits {
            function: 0x01,
            values,
        };
        assert_eq!(r.encode(), vec![0x01, 0x03, 0xCD, 0x6B, 0x05]);
    }

    // V1.1b3 sections 6.5, 6.6 and 6.12 examples: write coil 173 ON (FF 00), register 2 = 3,
    // registers 2-3 = 0x000A, 0x0102; a coil value other than FF00 / 0000 is illegal.
    #[test]
    fn write_examples_of_the_specification() {
        assert_eq!(
            parse_request(&[0x05, 0x00, 0xAC, 0xFF, 0x00]),
            Ok(Request::WriteCoil {
                address: 0xAC,
                on: true
            })
        );
        assert_eq!(
            Response::WriteCoil {
                address: 0xAC,
                on: true
            }
            .encode(),
            vec![0x05, 0x00, 0xAC, 0xFF, 0x00]
        );
        assert_eq!(
            parse_request(&[0x05, 0x00, 0xAC, 0x12, 0x34]),
            Err(Exception::IllegalDataValue)
        );
        assert_eq!(
            parse_request(&[0x06, 0x00, 0x01, 0x00, 0x03]),
            Ok(Request::WriteRegister {
                address: 1,
                value: 3
            })
        );
        assert_eq!(
            parse_request(&[0x10, 0x00, 0x01, 0x00, 0x02, 0x04, 0x00, 0x0A, 0x01, 0x02]),
            Ok(Request::WriteRegisters {
                address: 1,
                values: vec![0x000A, 0x0102]
            })
        );
        assert_eq!(
            Response::WroteMany {
                function: 0x10,
                address: 1,
                count: 2
            }
            .encode(),
            vec![0x10, 0x00, 0x01, 0x00, 0x02]
        );
        // Byte count that does not match the quantity.
        assert_eq!(
            parse_request(&[0x10, 0x00, 0x01, 0x00, 0x02, 0x03, 0x00, 0x0A, 0x01]),
            Err(Exception::IllegalDataValue)
        );
        // Section 6.11 example: write 10 coils from 20: CD 01.
        assert_eq!(
            parse_request(&[0x0F, 0x00, 0x13, 0x00, 0x0A, 0x02, 0xCD, 0x01]),
            Ok(Request::WriteCoils {
                address: 0x13,
                values: vec![true, false, true, true, false, false, true, true, true, false]
            })
        );
    }

    // V1.1b3 section 7: an exception response is the function code plus 0x80 and the code;
    // the example reads coil 1185 (0x04A1) and gets 0x81 0x02. Limits from section 6.3: at
    // most 125 registers per read.
    #[test]
    fn exceptions_and_limits() {
        assert_eq!(Exception::IllegalDataAddress.pdu(0x01), vec![0x81, 0x02]);
        assert_eq!(
            parse_request(&[0x2B, 0x0E, 0x01, 0x00]),
            Err(Exception::IllegalFunction)
        );
        assert_eq!(
            parse_request(&[0x03, 0x00, 0x00, 0x00, 0x7E]),
            Err(Exception::IllegalDataValue)
        );
        assert!(parse_request(&[0x03, 0x00, 0x00, 0x00, 0x7D]).is_ok());
        // Regression: a huge quantity in a write is refused, not an arithmetic overflow.
        assert_eq!(
            parse_request(&[0x10, 0x00, 0x00, 0xFF, 0xFF, 0x00]),
            Err(Exception::IllegalDataValue)
        );
        assert!(exception_meaning(0x02).starts_with("illegal data address"));
        assert!(exception_meaning(0x0B).contains("failed to respond"));
        assert_eq!(function_name(0x83), "read holding registers");
    }

    // V1.1b3 section 6.5 (Write Single Coil) example: output 173 (address 0x00AC) ON is the
    // request 05 00 AC FF 00.
    #[test]
    fn encode_write_single_coil_as_in_section_6_5() {
        let r = Request::WriteCoil {
            address: 0x00AC,
            on: true,
        };
        assert_eq!(r.encode(), vec![0x05, 0x00, 0xAC, 0xFF, 0x00]);
        // OFF is 0x0000 (same section).
        let off = Request::WriteCoil {
            address: 0x00AC,
            on: false,
        };
        assert_eq!(off.encode(), vec![0x05, 0x00, 0xAC, 0x00, 0x00]);
    }

    // V1.1b3 section 6.6 (Write Single Register) example: register 2 (address 0x0001) set to
    // 0x0003 is the request 06 00 01 00 03.
    #[test]
    fn encode_write_single_register_as_in_section_6_6() {
        let r = Request::WriteRegister {
            address: 0x0001,
            value: 0x0003,
        };
        assert_eq!(r.encode(), vec![0x06, 0x00, 0x01, 0x00, 0x03]);
    }

    // V1.1b3 section 6.11 (Write Multiple Coils) example: 10 coils from coil 20 (address
    // 0x0013) with the values CD 01 (coils 27-20 = 1100 1101, 29-28 = 01) is the request
    // 0F 00 13 00 0A 02 CD 01.
    #[test]
    fn encode_write_multiple_coils_as_in_section_6_11() {
        let values = vec![
            true, false, true, true, false, false, true, true, true, false,
        ];
        let r = Request::WriteCoils {
            address: 0x0013,
            values,
        };
        assert_eq!(
            r.encode(),
            vec![0x0F, 0x00, 0x13, 0x00, 0x0A, 0x02, 0xCD, 0x01]
        );
    }

    // V1.1b3 section 6.12 (Write Multiple Registers) example: two registers from register 2
    // (address 0x0001) with 0x000A and 0x0102 is the request 10 00 01 00 02 04 00 0A 01 02.
    #[test]
    fn encode_write_multiple_registers_as_in_section_6_12() {
        let r = Request::WriteRegisters {
            address: 0x0001,
            values: vec![0x000A, 0x0102],
        };
        assert_eq!(
            r.encode(),
            vec![0x10, 0x00, 0x01, 0x00, 0x02, 0x04, 0x00, 0x0A, 0x01, 0x02]
        );
    }

    // The ADUs around an encoded request: the RTU frame of the section 6.6 request for unit
    // 0x11 (the unit of the serial line specification's examples) checks to zero with its CRC
    // (Modbus over Serial Line V1.02 section 6.2.2), and the TCP frame's MBAP length counts
    // the unit id and the PDU (Modbus Messaging on TCP/IP Implementation Guide V1.0b
    // section 3.1.3).
    #[test]
    fn adus_wrap_the_encoded_request() {
        let r = Request::WriteRegister {
            address: 0x0001,
            value: 0x0003,
        };
        let rtu = r.rtu_adu(0x11);
        assert_eq!(&rtu[..6], &[0x11, 0x06, 0x00, 0x01, 0x00, 0x03]);
        assert_eq!(crc16(&rtu), 0);
        assert_eq!(rtu_request_len(&rtu), Some(rtu.len()));
        let tcp = r.tcp_adu(0x0102, 0x11);
        assert_eq!(
            tcp,
            vec![0x01, 0x02, 0x00, 0x00, 0x00, 0x06, 0x11, 0x06, 0x00, 0x01, 0x00, 0x03]
        );
        let f = mbap_split(&tcp).unwrap().unwrap();
        assert_eq!(parse_request(f.pdu), Ok(r));
    }

    fn request_strategy() -> impl proptest::strategy::Strategy<Value = Request> {
        use proptest::prelude::*;
        prop_oneof![
            (any::<u16>(), any::<bool>())
                .prop_map(|(address, on)| Request::WriteCoil { address, on }),
            (any::<u16>(), any::<u16>())
                .prop_map(|(address, value)| Request::WriteRegister { address, value }),
            (
                any::<u16>(),
                proptest::collection::vec(any::<bool>(), 1..=1968)
            )
                .prop_map(|(address, values)| Request::WriteCoils { address, values }),
            (
                any::<u16>(),
                proptest::collection::vec(any::<u16>(), 1..=123)
            )
                .prop_map(|(address, values)| Request::WriteRegisters { address, values }),
            (any::<u16>(), 1u16..=125).prop_map(|(address, count)| Request::ReadRegisters {
                function: FC_READ_HOLDING_REGISTERS,
                address,
                count
            }),
            (any::<u16>(), 1u16..=2000).prop_map(|(address, count)| Request::ReadBits {
                function: FC_READ_COILS,
                address,
                count
            }),
        ]
    }

    proptest::proptest! {
        // Every request within the section 6 quantity limits decodes to itself.
        #[test]
        fn encoded_requests_parse_back(r in request_strategy()) {
            proptest::prop_assert_eq!(parse_request(&r.encode()), Ok(r));
        }
    }

    proptest::proptest! {
        // Any bytes at all: a request or an exception, never a panic.
        #[test]
        fn any_pdu_is_answered_without_panicking(pdu in proptest::collection::vec(proptest::num::u8::ANY, 0..300)) {
            let _ = parse_request(&pdu);
            let _ = rtu_request_len(&pdu);
            let _ = mbap_split(&pdu);
        }
    }

    #[test]
    fn rtu_and_tcp_framing() {
        let f = rtu_frame(7, &[0x06, 0x00, 0x01, 0x00, 0x03]);
        assert_eq!(rtu_request_len(&f), Some(8));
        assert_eq!(crc16(&f), 0, "a frame with its CRC appended checks to zero");
        assert_eq!(rtu_request_len(&[7]), None);
        let w = rtu_frame(7, &[0x10, 0x00, 0x01, 0x00, 0x02, 0x04, 0, 1, 0, 2]);
        assert_eq!(rtu_request_len(&w), Some(w.len()));
        let t = mbap_frame(0x1234, 9, &[0x03, 0x00, 0x6B, 0x00, 0x03]);
        assert_eq!(&t[..7], &[0x12, 0x34, 0x00, 0x00, 0x00, 0x06, 0x09]);
        let f = mbap_split(&t).unwrap().unwrap();
        assert_eq!(
            (f.transaction, f.unit, f.pdu, f.len),
            (0x1234, 9, &t[7..], t.len())
        );
        assert_eq!(mbap_split(&t[..9]), Ok(None));
        let mut bad = t.clone();
        bad[2] = 1;
        assert!(mbap_split(&bad).is_err());
    }
}
