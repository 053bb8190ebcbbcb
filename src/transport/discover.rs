//! Finding the ports on this machine: serial ports from sysfs (`class/tty`, only those backed
//! by a device, with their USB vendor and product id, serial number, maker and product when
//! they sit on USB), their stable `/dev/serial/by-id` names, and USB-TMC nodes
//! (`class/usbmisc/usbtmc*`). Reads only the file system, from roots given by the caller (so
//! a fake tree can stand in for sysfs); a missing tree lists nothing and says so. Never opens
//! a port.

use serde::Serialize;
use std::path::{Path, PathBuf};

/// What sysfs says about the USB device a port belongs to.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize)]
pub struct UsbInfo {
    /// Vendor and product id, 4 hex digits each (e.g. `0403`).
    pub vendor_id: String,
    pub product_id: String,
    pub serial_number: Option<String>,
    pub manufacturer: Option<String>,
    pub product: Option<String>,
}

/// One port found.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct FoundPort {
    /// The device node, e.g. `/dev/ttyUSB0`.
    pub path: String,
    /// The stable name under `/dev/serial/by-id`, when udev made one.
    pub by_id: Option<String>,
    /// The USB device, when the port sits on USB.
    pub usb: Option<UsbInfo>,
}

/// Everything found, with notes on what could not be looked at.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize)]
pub struct PortList {
    pub serial: Vec<FoundPort>,
    pub usbtmc: Vec<FoundPort>,
    pub notes: Vec<String>,
}

fn read_trim(p: &Path) -> Option<String> {
    std::fs::read_to_string(p)
        .ok()
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
}

/// Walk up from a device's sysfs folder to the USB device holding `idVendor`.
fn usb_info(device: &Path) -> Option<UsbInfo> {
    let mut dir = std::fs::canonicalize(device).ok()?;
    for _ in 0..8 {
        if let (Some(v), Some(p)) = (
            read_trim(&dir.join("idVendor")),
            read_trim(&dir.join("idProduct")),
        ) {
            return Some(UsbInfo {
                vendor_id: v,
                product_id: p,
                serial_number: read_trim(&dir.join("serial")),
                manufacturer: read_trim(&dir.join("manufacturer")),
                product: read_trim(&dir.join("product")),
            });
        }
        if !dir.pop() {
            break;
        }
    }
    None
}

/// `/dev/serial/by-id` links by the node name they point at.
fn by_id_names(dev_root: &Path) -> Vec<(String, String)> {
    let dir = dev_root.join("serial/by-id");
    let Ok(rd) = std::fs::read_dir(&dir) else {
        return Vec::new();
    };
    let mut out = Vec::new();
    for e in rd.flatten() {
        let link = e.path();
        if let Ok(target) = std::fs::read_link(&link) {
            if let Some(name) = target.file_name().and_then(|n| n.to_str()) {
                out.push((name.to_string(), link.display().to_string()));
            }
        }
    }
    out.sort();
    out
}

fn sorted_entries(dir: &Path) -> Option<Vec<(String, PathBuf)>> {
    let rd = std::fs::read_dir(dir).ok()?;
    let mut v: Vec<(String, PathBuf)> = rd
        .flatten()
        .filter_map(|e| Some((e.file_name().to_str()?.to_string(), e.path())))
        .collect();
    v.sort();
    Some(v)
}

/// List the serial ports and USB-TMC nodes under `sys_root` (normally `/sys`) and `dev_root`
/// (normally `/dev`).
pub fn list_ports(sys_root: &Path, dev_root: &Path) -> PortList {
    let mut list = PortList::default();
    let by_id = by_id_names(dev_root);
    let node = |name: &str| dev_root.join(name).display().to_string();
    let by_id_of = |name: &str| {
        by_id
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, l)| l.clone())
    };
    let tty = sys_root.join("class/tty");
    match sorted_entries(&tty) {
        None => list.notes.push(format!(
            "{} is missing: serial ports cannot be listed here (no sysfs, or a container without it)",
            tty.display()
        )),
        Some(entries) => {
            for (name, path) in entries {
                let device = path.join("device");
                // Virtual terminals and pseudo-terminals have no device behind them.
                if !device.exists() {
                    continue;
                }
                // Built-in UART slots report type 0 when no UART is fitted.
                if name.starts_with("ttyS") && read_trim(&path.join("type")).as_deref() == Some("0") {
                    continue;
                }
                list.serial.push(FoundPort {
                    path: node(&name),
                    by_id: by_id_of(&name),
                    usb: usb_info(&device),
                });
            }
        }
    }
    let misc = sys_root.join("class/usbmisc");
    if let Some(entries) = sorted_entries(&misc) {
        for (name, path) in entries {
            if !name.starts_with("usbtmc") {
                continue;
            }
            list.usbtmc.push(FoundPort {
                path: node(&name),
                by_id: None,
                usb: usb_info(&path.join("device")),
            });
        }
    }
    list
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_missing_sysfs_lists_nothing_and_says_so() {
        let t = tempfile::tempdir().unwrap();
        let l = list_ports(&t.path().join("no-sys"), &t.path().join("no-dev"));
        assert!(l.serial.is_empty() && l.usbtmc.is_empty());
        assert_eq!(l.notes.len(), 1);
        assert!(l.notes[0].contains("class/tty is missing"), "{:?}", l.notes);
    }
}
