//! Read Device Identification (function 0x2B, MEI type 0x0E; Modbus Application Protocol
//! Specification V1.1b3 section 6.21): the request PDU, a server's response PDU (all objects
//! in one response: the objects here are short), and decoding a response. Pure logic.

use super::frame::Exception;
pub use super::frame::FC_ENCAPSULATED_INTERFACE;
/// MEI type 14, Read Device Identification (V1.1b3 section 6.21).
pub const MEI_READ_DEVICE_ID: u8 = 0x0E;

/// Read Device ID codes (V1.1b3 section 6.21): stream access to the basic, regular and
/// extended objects, or one specific object.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReadDeviceIdCode {
    Basic = 0x01,
    Regular = 0x02,
    Extended = 0x03,
    Specific = 0x04,
}

impl ReadDeviceIdCode {
    pub fn from_code(c: u8) -> Option<ReadDeviceIdCode> {
        Some(match c {
            0x01 => ReadDeviceIdCode::Basic,
            0x02 => ReadDeviceIdCode::Regular,
            0x03 => ReadDeviceIdCode::Extended,
            0x04 => ReadDeviceIdCode::Specific,
            _ => return None,
        })
    }
}

/// The name of an identification object (V1.1b3 section 6.21: 0x00-0x02 basic and mandatory,
/// 0x03-0x06 regular and optional, 0x80 and up extended and private).
pub fn device_object_name(id: u8) -> &'static str {
    match id {
        0x00 => "VendorName",
        0x01 => "ProductCode",
        0x02 => "MajorMinorRevision",
        0x03 => "VendorUrl",
        0x04 => "ProductName",
        0x05 => "ModelName",
        0x06 => "UserApplicationName",
        0x07..=0x7F => "reserved",
        _ => "private",
    }
}

/// The request PDU: function, MEI type, Read Device ID code, Object Id.
pub fn device_id_request(code: ReadDeviceIdCode, object: u8) -> [u8; 4] {
    [
        FC_ENCAPSULATED_INTERFACE,
        MEI_READ_DEVICE_ID,
        code as u8,
        object,
    ]
}

/// A decoded response.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DeviceId {
    pub code: u8,
    pub conformity: u8,
    pub more_follows: bool,
    pub next_object: u8,
    /// (object id, value) in the order sent.
    pub objects: Vec<(u8, Vec<u8>)>,
}

impl DeviceId {
    /// One line for people: `VendorName=...; ProductCode=...; ...`.
    pub fn describe(&self) -> String {
        self.objects
            .iter()
            .map(|(id, v)| format!("{}={}", device_object_name(*id), String::from_utf8_lossy(v)))
            .collect::<Vec<_>>()
            .join("; ")
    }
}

/// The response PDU with every object in one part (More Follows 00, Next Object Id 00).
/// Objects longer than 255 bytes are cut to 255 (an object's length is one byte).
pub fn device_id_response(code: u8, conformity: u8, objects: &[(u8, &[u8])]) -> Vec<u8> {
    let mut out = vec![
        FC_ENCAPSULATED_INTERFACE,
        MEI_READ_DEVICE_ID,
        code,
        conformity,
        0x00,
        0x00,
        objects.len() as u8,
    ];
    for (id, v) in objects {
        let v = &v[..v.len().min(255)];
        out.push(*id);
        out.push(v.len() as u8);
        out.extend_from_slice(v);
    }
    out
}

/// Why a response cannot be read.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum DeviceIdError {
    #[error("exception 0x{code:02X}: {}", super::frame::exception_meaning(*.code))]
    Exception { code: u8 },
    #[error("not a Read Device Identification response (function 0x{function:02X}, MEI type 0x{mei:02X})")]
    NotDeviceId { function: u8, mei: u8 },
    #[error("response cut short at byte {at} of {len}")]
    Short { at: usize, len: usize },
}

/// Decode a response PDU (function code first), or the exception it carries.
pub fn parse_device_id_response(pdu: &[u8]) -> Result<DeviceId, DeviceIdError> {
    let short = |at: usize| DeviceIdError::Short { at, len: pdu.len() };
    let function = *pdu.first().ok_or_else(|| short(0))?;
    if function == FC_ENCAPSULATED_INTERFACE | 0x80 {
        // An exception response: function | 0x80, exception code (V1.1b3 section 7).
        return Err(DeviceIdError::Exception {
            code: *pdu.get(1).ok_or_else(|| short(1))?,
        });
    }
    let mei = pdu.get(1).copied().unwrap_or(0);
    if function != FC_ENCAPSULATED_INTERFACE || mei != MEI_READ_DEVICE_ID {
        return Err(DeviceIdError::NotDeviceId { function, mei });
    }
    let at = |i: usize| pdu.get(i).copied().ok_or_else(|| short(i));
    let code = at(2)?;
    let conformity = at(3)?;
    let more_follows = at(4)? == 0xFF;
    let next_object = at(5)?;
    let count = at(6)? as usize;
    let mut objects = Vec::with_capacity(count);
    let mut i = 7;
    for _ in 0..count {
        let id = at(i)?;
        let len = at(i + 1)? as usize;
        let v = pdu
            .get(i + 2..i + 2 + len)
            .ok_or_else(|| short(i + 2 + len))?;
        objects.push((id, v.to_vec()));
        i += 2 + len;
    }
    Ok(DeviceId {
        code,
        conformity,
        more_follows,
        next_object,
        objects,
    })
}

/// What a server answers to a request PDU that is a Read Device Identification request, from
/// its objects (sorted by id): `None` for any other request. Stream access returns the
/// objects of the category asked for from the object asked for on; a specific object that
/// the server does not have, or a bad code, is an exception (V1.1b3 section 6.21: 02 illegal
/// data address, 03 illegal data value).
pub fn answer_device_id(
    pdu: &[u8],
    conformity: u8,
    objects: &[(u8, &[u8])],
) -> Option<Result<Vec<u8>, Exception>> {
    if pdu.first() != Some(&FC_ENCAPSULATED_INTERFACE) {
        return None;
    }
    if pdu.get(1) != Some(&MEI_READ_DEVICE_ID) || pdu.len() != 4 {
        return Some(Err(Exception::IllegalDataValue));
    }
    let Some(code) = ReadDeviceIdCode::from_code(pdu[2]) else {
        return Some(Err(Exception::IllegalDataValue));
    };
    let object = pdu[3];
    let top = match code {
        ReadDeviceIdCode::Basic => 0x02,
        ReadDeviceIdCode::Regular => 0x7F,
        ReadDeviceIdCode::Extended | ReadDeviceIdCode::Specific => 0xFF,
    };
    let picked: Vec<(u8, &[u8])> = match code {
        ReadDeviceIdCode::Specific => objects
            .iter()
            .filter(|(id, _)| *id == object)
            .copied()
            .collect(),
        _ => objects
            .iter()
            .filter(|(id, _)| *id >= object && *id <= top)
            .copied()
            .collect(),
    };
    if picked.is_empty() {
        return Some(Err(Exception::IllegalDataAddress));
    }
    Some(Ok(device_id_response(code as u8, conformity, &picked)))
}

#[cfg(test)]
mod tests {
    use super::*;

    // The example of V1.1b3 section 6.21 (from memory): a basic stream request from object 0,
    // and a response with conformity level 01, no more parts and the three basic objects
    // "Company identification", "Product code XX" and "V2.11", each with its length.
    const EXAMPLE: &[u8] = b"\x2B\x0E\x01\x01\x00\x00\x03\
\x00\x16Company identification\
\x01\x0FProduct code XX\
\x02\x05V2.11";

    #[test]
    fn the_specification_example_encodes_and_decodes() {
        assert_eq!(
            device_id_request(ReadDeviceIdCode::Basic, 0x00),
            [0x2B, 0x0E, 0x01, 0x00]
        );
        let objects: [(u8, &[u8]); 3] = [
            (0x00, b"Company identification"),
            (0x01, b"Product code XX"),
            (0x02, b"V2.11"),
        ];
        assert_eq!(device_id_response(0x01, 0x01, &objects), EXAMPLE);
        let d = parse_device_id_response(EXAMPLE).unwrap();
        assert_eq!(
            (d.code, d.conformity, d.more_follows, d.next_object),
            (1, 1, false, 0)
        );
        assert_eq!(d.objects.len(), 3);
        assert_eq!(d.objects[1], (0x01, b"Product code XX".to_vec()));
        assert_eq!(
            d.describe(),
            "VendorName=Company identification; ProductCode=Product code XX; MajorMinorRevision=V2.11"
        );
    }

    #[test]
    fn exceptions_and_short_responses_are_errors() {
        // An exception response: 0x2B | 0x80, code 02 (V1.1b3 section 7).
        assert_eq!(
            parse_device_id_response(&[0xAB, 0x02]),
            Err(DeviceIdError::Exception { code: 2 })
        );
        assert!(matches!(
            parse_device_id_response(&EXAMPLE[..20]),
            Err(DeviceIdError::Short { .. })
        ));
        assert!(matches!(
            parse_device_id_response(&[0x03, 0x02, 0, 0]),
            Err(DeviceIdError::NotDeviceId { .. })
        ));
    }

    #[test]
    fn a_server_answers_by_category_and_object() {
        let objects: [(u8, &[u8]); 4] =
            [(0x00, b"V"), (0x01, b"P"), (0x02, b"1.0"), (0x04, b"Name")];
        let basic = answer_device_id(&[0x2B, 0x0E, 0x01, 0x00], 0x82, &objects)
            .unwrap()
            .unwrap();
        let d = parse_device_id_response(&basic).unwrap();
        assert_eq!(d.objects.iter().map(|o| o.0).collect::<Vec<_>>(), [0, 1, 2]);
        let regular = answer_device_id(&[0x2B, 0x0E, 0x02, 0x00], 0x82, &objects)
            .unwrap()
            .unwrap();
        assert_eq!(parse_device_id_response(&regular).unwrap().objects.len(), 4);
        let one = answer_device_id(&[0x2B, 0x0E, 0x04, 0x04], 0x82, &objects)
            .unwrap()
            .unwrap();
        assert_eq!(
            parse_device_id_response(&one).unwrap().objects,
            [(0x04, b"Name".to_vec())]
        );
        assert_eq!(
            answer_device_id(&[0x2B, 0x0E, 0x04, 0x05], 0x82, &objects),
            Some(Err(Exception::IllegalDataAddress))
        );
        assert_eq!(
            answer_device_id(&[0x2B, 0x0E, 0x09, 0x00], 0x82, &objects),
            Some(Err(Exception::IllegalDataValue))
        );
        assert_eq!(answer_device_id(&[0x03, 0, 0, 0, 1], 0x82, &objects), None);
    }
}
