//! The rules of a USB-TMC link (`usbtmc = { path = "/dev/usbtmc0" }`): a path, no other link
//! beside it, and no streaming reading style (a USB-TMC instrument sends only when asked: one
//! reply per query). Also the hint for a USB-TMC node given as a serial port, which fails at
//! open with "Not a typewriter". Pure.

use super::raw::{RawInstrument, ReadStyleName};
use crate::bench::BenchError;
use crate::transport::{LinkConfig, UsbTmcSettings};
use std::ops::Range;

/// Check the instrument's USB-TMC link, if it has one (`None`: the serial / tcp rules apply).
pub(super) fn check_usbtmc_link(
    (file, src): (&str, &str),
    name: &str,
    raw: &mut RawInstrument,
) -> Result<Option<LinkConfig>, BenchError> {
    let err = |span: Range<usize>, m: &str| {
        BenchError::Config(crate::config::at_span(
            file,
            src,
            Some(span),
            format!("instrument '{name}': {m}"),
        ))
    };
    if let Some(s) = &raw.serial {
        if s.get_ref().port.starts_with("/dev/usbtmc") {
            return Err(err(
                s.span(),
                "this is a USB-TMC node, not a serial port (it would fail with \"Not a typewriter\"); write usbtmc = { path = \"...\" } instead of serial",
            ));
        }
    }
    let Some(u) = raw.usbtmc.take() else {
        return Ok(None);
    };
    let sp = u.span();
    if raw.serial.is_some() || raw.tcp.is_some() {
        return Err(err(sp, "give one link: usbtmc, serial or tcp"));
    }
    if raw.modbus.is_some() {
        return Err(err(
            sp,
            "Modbus runs on a serial line (RTU) or TCP, not over USB-TMC",
        ));
    }
    // Streaming: asked for, or the preset's default that the file does not override.
    let style = raw.reading.as_ref().and_then(|r| r.get_ref().style);
    let preset_streams = raw
        .preset
        .as_ref()
        .and_then(|p| super::presets::preset(p.get_ref()))
        .is_some_and(|p| p.stream);
    if style == Some(ReadStyleName::Stream) || (style.is_none() && preset_streams) {
        {
            let place = raw
                .reading
                .as_ref()
                .map(|r| r.span())
                .or(raw.preset.as_ref().map(|p| p.span()))
                .unwrap_or(sp.clone());
            return Err(err(
                place,
                "a streaming instrument cannot work over USB-TMC: the device sends only when asked (one reply per query); use style = \"query\" with measuring commands",
            ));
        }
    }
    let path = u.into_inner().path;
    if path.trim().is_empty() {
        return Err(err(
            sp,
            "usbtmc path is empty; give the node, e.g. /dev/usbtmc0",
        ));
    }
    Ok(Some(LinkConfig::UsbTmc(UsbTmcSettings { path })))
}
