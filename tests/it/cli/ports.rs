//! `regulus ports` on a fake sysfs tree (the layout of Linux's /sys/class/tty and
//! /sys/class/usbmisc, with the USB device's idVendor / idProduct / serial attribute files two
//! levels up, and udev's /dev/serial/by-id links), on a tree without sysfs, on this machine's
//! real /sys, and `--identify` against a simulated instrument on a pseudo-terminal.

use crate::support::lock::serial;
use regulus::sim::instruments::InstrumentKind;
use regulus::sim::{Link, SimBench, SimOptions, TransportMix};
use std::os::unix::fs::symlink;
use std::path::Path;
use std::process::{Command, Output};

fn ports(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
        .arg("ports")
        .args(args)
        .output()
        .unwrap()
}

fn write(p: &Path, text: &str) {
    std::fs::create_dir_all(p.parent().unwrap()).unwrap();
    std::fs::write(p, text).unwrap();
}

/// A machine with one USB serial adapter, one built-in UART slot with nothing fitted, a
/// pseudo-terminal-like entry without a device, and one USB-TMC instrument.
fn fake_machine(root: &Path) {
    let sys = root.join("sys");
    let usb = sys.join("devices/pci0000:00/usb1/1-2");
    write(&usb.join("idVendor"), "0403\n");
    write(&usb.join("idProduct"), "6001\n");
    write(&usb.join("serial"), "RGX01234\n");
    write(&usb.join("manufacturer"), "Example Devices\n");
    write(&usb.join("product"), "USB serial adapter\n");
    let iface = usb.join("1-2:1.0/ttyUSB0");
    std::fs::create_dir_all(&iface).unwrap();
    let tty = sys.join("class/tty");
    std::fs::create_dir_all(tty.join("ttyUSB0")).unwrap();
    symlink(&iface, tty.join("ttyUSB0/device")).unwrap();
    let uart = sys.join("devices/platform/serial8250/tty/ttyS3");
    std::fs::create_dir_all(&uart).unwrap();
    write(&tty.join("ttyS3/type"), "0\n");
    symlink(&uart, tty.join("ttyS3/device")).unwrap();
    std::fs::create_dir_all(tty.join("tty7")).unwrap();
    let tmc = sys.join("devices/pci0000:00/usb1/1-3");
    write(&tmc.join("idVendor"), "1ab1\n");
    write(&tmc.join("idProduct"), "0e11\n");
    let tmc_iface = tmc.join("1-3:1.0");
    std::fs::create_dir_all(&tmc_iface).unwrap();
    std::fs::create_dir_all(sys.join("class/usbmisc/usbtmc0")).unwrap();
    symlink(&tmc_iface, sys.join("class/usbmisc/usbtmc0/device")).unwrap();
    let byid = root.join("dev/serial/by-id");
    std::fs::create_dir_all(&byid).unwrap();
    symlink(
        "../../ttyUSB0",
        byid.join("usb-Example_Devices_USB_serial_adapter_RGX01234-if00-port0"),
    )
    .unwrap();
}

#[test]
fn lists_serial_ports_with_usb_ids_and_usbtmc_nodes() {
    // A child process must not inherit another test's pseudo-terminal (support::lock).
    let _g = serial();
    let t = tempfile::tempdir().unwrap();
    fake_machine(t.path());
    let sys = t.path().join("sys");
    let dev = t.path().join("dev");
    let out = ports(&[
        "--json",
        "--sys-root",
        sys.to_str().unwrap(),
        "--dev-root",
        dev.to_str().unwrap(),
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let serial = j["serial"].as_array().unwrap();
    assert_eq!(serial.len(), 1, "only the adapter: {j}");
    let p = &serial[0];
    assert_eq!(p["path"], dev.join("ttyUSB0").display().to_string());
    assert_eq!(p["usb"]["vendor_id"], "0403");
    assert_eq!(p["usb"]["product_id"], "6001");
    assert_eq!(p["usb"]["serial_number"], "RGX01234");
    assert!(p["by_id"]
        .as_str()
        .unwrap()
        .ends_with("usb-Example_Devices_USB_serial_adapter_RGX01234-if00-port0"));
    let tmc = j["usbtmc"].as_array().unwrap();
    assert_eq!(tmc.len(), 1);
    assert_eq!(tmc[0]["path"], dev.join("usbtmc0").display().to_string());
    assert_eq!(tmc[0]["usb"]["vendor_id"], "1ab1");
    // The table says the same.
    let out = ports(&[
        "--sys-root",
        sys.to_str().unwrap(),
        "--dev-root",
        dev.to_str().unwrap(),
    ]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("0403:6001"), "{text}");
    assert!(text.contains("RGX01234"), "{text}");
    assert!(text.contains("usbtmc0"), "{text}");
}

#[test]
fn no_sysfs_lists_nothing_and_does_not_panic() {
    // A child process must not inherit another test's pseudo-terminal (support::lock).
    let _g = serial();
    let t = tempfile::tempdir().unwrap();
    let out = ports(&["--sys-root", t.path().join("none").to_str().unwrap()]);
    let text = String::from_utf8_lossy(&out.stdout);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{text}\n{err}");
    assert!(!err.contains("panicked"), "{err}");
    assert!(text.contains("serial ports: none found"), "{text}");
    assert!(text.contains("class/tty is missing"), "{text}");
}

#[test]
fn this_machine_is_listed() {
    // A child process must not inherit another test's pseudo-terminal (support::lock).
    let _g = serial();
    let out = ports(&["--json"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(j["serial"].is_array() && j["usbtmc"].is_array(), "{j}");
}

#[test]
fn identify_shows_the_identity_reply_or_why_there_is_none() {
    let _g = serial();
    let design = regulus::design::Design::load(Path::new(&format!(
        "{}/samples/teaching-lab-0-20v.toml",
        env!("CARGO_MANIFEST_DIR")
    )))
    .unwrap();
    let sim = SimBench::start(
        &design,
        SimOptions::default().transport(TransportMix::AllPty),
    )
    .unwrap();
    let Some(Link::Pty(path)) = sim.port(InstrumentKind::QueryMeter).cloned() else {
        panic!("the meter is on a pseudo-terminal")
    };
    let out = ports(&["--identify", "--port", &path, "--baud", "115200", "--json"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let reply = j["identified"][0]["reply"].as_str().unwrap();
    assert!(reply.starts_with("Regulus Simulated Bench,"), "{reply}");
    // A port that does not answer: exit 4 (a station error) and the reason.
    let Some(Link::Pty(thermo)) = sim.port(InstrumentKind::Thermometer).cloned() else {
        panic!()
    };
    let out = ports(&[
        "--identify",
        "--port",
        &thermo,
        "--query",
        "NOPE?",
        "--timeout-ms",
        "300",
    ]);
    assert_eq!(out.status.code(), Some(4));
    assert!(String::from_utf8_lossy(&out.stdout).contains("no reply to 'NOPE?' within 300 ms"));
}

fn lab_design() -> regulus::design::Design {
    regulus::design::Design::load(Path::new(&format!(
        "{}/samples/teaching-lab-0-20v.toml",
        env!("CARGO_MANIFEST_DIR")
    )))
    .unwrap()
}

/// `--tcp HOST:PORT` sends the identity query over a loopback TCP socket to the simulator's
/// meter (IEEE 488.2 `*IDN?` reply: four comma-separated fields); a port nobody listens on
/// gives exit 4 and the reason.
#[test]
fn identify_over_tcp() {
    let _g = serial();
    let sim = SimBench::start(
        &lab_design(),
        SimOptions::default().transport(TransportMix::AllTcp),
    )
    .unwrap();
    let Some(Link::Tcp(addr)) = sim.port(InstrumentKind::QueryMeter).cloned() else {
        panic!("the meter is on TCP")
    };
    let out = ports(&[
        "--tcp",
        &addr.to_string(),
        "--json",
        "--sys-root",
        "/nonexistent-sys",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let id = &j["identified"][0];
    assert_eq!(id["path"], addr.to_string());
    assert_eq!(id["via"], "text");
    let reply = id["reply"].as_str().unwrap();
    assert!(reply.starts_with("Regulus Simulated Bench,"), "{reply}");
    assert_eq!(reply.split(',').count(), 4, "{reply}");
    // Nobody listens on a port just freed.
    let free = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
    let gone = free.local_addr().unwrap().to_string();
    drop(free);
    let out = ports(&["--tcp", &gone, "--sys-root", "/nonexistent-sys"]);
    assert_eq!(out.status.code(), Some(4));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(&gone) && text.contains("(no identity)"),
        "{text}"
    );
    // A malformed address is a usage error.
    assert_eq!(ports(&["--tcp", "no-port-here"]).status.code(), Some(2));
}

/// Modbus identification (Read Device Identification, 0x2B / 0x0E, V1.1b3 section 6.21) of
/// the simulator's Modbus load over RTU on a pseudo-terminal and of its source over Modbus
/// TCP on loopback, decoded by tokio-modbus's client: the objects are the simulator's own
/// fictional vendor and product names; a unit id nobody answers to gives exit 4.
#[test]
fn identify_modbus_units_over_rtu_and_tcp() {
    let _g = serial();
    let rtu = SimBench::start(
        &lab_design(),
        SimOptions::default().transport(TransportMix::Modbus),
    )
    .unwrap();
    let Some(Link::Pty(load)) = rtu.port(InstrumentKind::Load).cloned() else {
        panic!("the load is on a pseudo-terminal")
    };
    let out = ports(&[
        "--modbus-rtu",
        &load,
        "--unit",
        "1",
        "--baud",
        "115200",
        "--json",
        "--sys-root",
        "/nonexistent-sys",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let id = &j["identified"][0];
    assert_eq!(id["via"], "modbus");
    let objects = id["objects"].as_array().unwrap();
    let get = |n: &str| {
        objects
            .iter()
            .find(|o| o["name"] == n)
            .and_then(|o| o["value"].as_str())
            .map(str::to_string)
    };
    assert_eq!(
        get("VendorName").as_deref(),
        Some("Regulus Simulated Bench")
    );
    assert_eq!(
        get("ProductCode").as_deref(),
        Some("Sinkhole electronic load")
    );
    assert_eq!(get("MajorMinorRevision").as_deref(), Some("1.0"));
    assert_eq!(objects[0]["id"], 0);
    // The load's state is untouched: identification writes nothing else.
    let (_, _, c) = rtu.state();
    assert!(!c.load.input_on);
    // No unit 9 on this line: no reply within the timeout.
    let out = ports(&[
        "--modbus-rtu",
        &load,
        "--unit",
        "9",
        "--timeout-ms",
        "300",
        "--sys-root",
        "/nonexistent-sys",
    ]);
    assert_eq!(out.status.code(), Some(4));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("no reply to read device identification"),
        "{text}"
    );
    drop(rtu);

    let tcp = SimBench::start(
        &lab_design(),
        SimOptions::default().transport(TransportMix::ModbusTcp),
    )
    .unwrap();
    let Some(Link::Tcp(addr)) = tcp.port(InstrumentKind::Source).cloned() else {
        panic!("the source is on TCP")
    };
    let out = ports(&[
        "--modbus-tcp",
        &addr.to_string(),
        "--unit",
        "2",
        "--sys-root",
        "/nonexistent-sys",
    ]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{text}");
    assert!(
        text.contains("VendorName=Regulus Simulated Bench; ProductCode=Wellspring bench source"),
        "{text}"
    );
}
