//! Serial links through tokio-serial (pseudo-terminals work the same way). Opening is exclusive,
//! so a second program on the same port is reported as busy.

use super::link::{DataBits, FlowControl, Parity, SerialSettings, StopBits};
use super::{BoxTransport, OpenError};
use std::time::Duration;
use tokio_serial::SerialPortBuilderExt;

/// Open a serial port with the given line settings. Needs a running tokio runtime.
pub fn open_serial(s: &SerialSettings) -> Result<BoxTransport, OpenError> {
    let data_bits = match s.data_bits {
        DataBits::Five => tokio_serial::DataBits::Five,
        DataBits::Six => tokio_serial::DataBits::Six,
        DataBits::Seven => tokio_serial::DataBits::Seven,
        DataBits::Eight => tokio_serial::DataBits::Eight,
    };
    let parity = match s.parity {
        Parity::None => tokio_serial::Parity::None,
        Parity::Odd => tokio_serial::Parity::Odd,
        Parity::Even => tokio_serial::Parity::Even,
    };
    let stop_bits = match s.stop_bits {
        StopBits::One => tokio_serial::StopBits::One,
        StopBits::Two => tokio_serial::StopBits::Two,
    };
    let flow = match s.flow_control {
        FlowControl::None => tokio_serial::FlowControl::None,
        FlowControl::Software => tokio_serial::FlowControl::Software,
        FlowControl::Hardware => tokio_serial::FlowControl::Hardware,
    };
    if !std::path::Path::new(&s.port).exists() && s.port.starts_with('/') {
        return Err(OpenError::Missing);
    }
    let stream = tokio_serial::new(&s.port, s.baud.get())
        .data_bits(data_bits)
        .parity(parity)
        .stop_bits(stop_bits)
        .flow_control(flow)
        // Per-read timeout of the underlying port; our line reader enforces the real deadline.
        .timeout(Duration::from_millis(100))
        .open_native_async()
        .map_err(classify)?;
    Ok(Box::new(stream))
}

fn classify(e: tokio_serial::Error) -> OpenError {
    use std::io::ErrorKind as K;
    match e.kind {
        // serialport reports EBUSY (port locked by another opener) as NoDevice.
        tokio_serial::ErrorKind::NoDevice => OpenError::Busy,
        tokio_serial::ErrorKind::Io(K::NotFound) => OpenError::Missing,
        tokio_serial::ErrorKind::Io(K::PermissionDenied) => OpenError::PermissionDenied,
        _ => OpenError::Other(e.description),
    }
}
