//! The identity reply of IEEE 488.2 `*IDN?`: maker, model, serial and firmware. Pure logic.

/// The four comma-separated fields of an IEEE 488.2 `*IDN?` reply.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Identity {
    pub maker: String,
    pub model: String,
    pub serial: String,
    pub firmware: String,
}

/// Split an `*IDN?` reply (IEEE 488.2: maker, model, serial, firmware, comma separated).
/// Returns `None` when the reply does not have exactly four fields.
pub fn parse_identity(reply: &str) -> Option<Identity> {
    let fields: Vec<&str> = reply.trim().split(',').map(str::trim).collect();
    match fields.as_slice() {
        [maker, model, serial, firmware] => Some(Identity {
            maker: maker.to_string(),
            model: model.to_string(),
            serial: serial.to_string(),
            firmware: firmware.to_string(),
        }),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // IEEE 488.2 section 10.14 (*IDN?): four fields, maker, model, serial number, firmware.
    #[test]
    fn identity_fields() {
        let id = parse_identity("Regulus Simulated Bench,DMM-1,SN0042,1.0.3\n").unwrap();
        assert_eq!(id.maker, "Regulus Simulated Bench");
        assert_eq!(id.model, "DMM-1");
        assert_eq!(id.serial, "SN0042");
        assert_eq!(id.firmware, "1.0.3");
        assert_eq!(parse_identity("only,three,fields"), None);
    }
}
