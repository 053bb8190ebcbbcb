//! Modbus identification for `regulus ports`: one Read Device Identification request
//! (function 0x2B, MEI type 0x0E, basic then regular objects; Modbus Application Protocol
//! V1.1b3 section 6.21) to a unit over RTU on a serial line or over Modbus TCP, through the
//! tokio-modbus client. Nothing else is sent.

use crate::protocol::modbus::{device_object_name, exception_meaning};
use crate::transport::{open_serial, open_tcp, LinkConfig};
use std::time::Duration;
use tokio_modbus::client::Reader as _;
use tokio_modbus::prelude::ReadCode;
use tokio_modbus::Slave;

/// One identification object: its id, its name in the specification and its text.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct DeviceObject {
    pub id: u8,
    pub name: &'static str,
    pub value: String,
}

/// Ask `unit` behind `link` (serial: RTU; TCP: Modbus TCP) for its regular identification
/// objects, within `timeout`. The error says what to check.
pub async fn modbus_identify(
    link: &LinkConfig,
    unit: u8,
    timeout: Duration,
) -> Result<Vec<DeviceObject>, String> {
    let io = match link {
        LinkConfig::Serial(s) => open_serial(s),
        LinkConfig::Tcp(t) => open_tcp(t).await,
        LinkConfig::UsbTmc(_) => return Err("Modbus does not run over USB-TMC".into()),
    }
    .map_err(|e| format!("cannot open {}: {e}", link.describe()))?;
    let io = super::modbus::SharedIo::new(io);
    let mut ctx = match link {
        LinkConfig::Tcp(_) => tokio_modbus::client::tcp::attach_slave(io, Slave(unit)),
        _ => tokio_modbus::client::rtu::attach_slave(io, Slave(unit)),
    };
    let what = format!("read device identification (0x2B/0x0E) to unit {unit}");
    // Stream access from object 0, regular category (basic objects included).
    let r = tokio::time::timeout(
        timeout,
        ctx.read_device_identification(ReadCode::Regular, 0x00),
    )
    .await
    .map_err(|_| {
        format!(
            "no reply to {what} within {} ms; check the unit id, the line settings and that the device supports this function",
            timeout.as_millis()
        )
    })?
    .map_err(|e| format!("{what} failed: {e}"))?
    .map_err(|e| {
        let code = u8::from(e);
        format!("{what}: exception 0x{code:02X}, {}", exception_meaning(code))
    })?;
    Ok(r.device_id_objects
        .iter()
        .map(|o| DeviceObject {
            id: o.id,
            name: device_object_name(o.id),
            value: String::from_utf8_lossy(&o.value).into_owned(),
        })
        .collect())
}
