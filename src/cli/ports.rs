//! `regulus ports`: list the serial ports (path, `/dev/serial/by-id` name, USB vendor and
//! product id, serial number) and USB-TMC nodes of this machine; with `--identify`, send each
//! (or the one given with `--port`) the identity query with the given link settings and show
//! the reply; `--tcp HOST:PORT` sends it over TCP too. `--modbus-rtu PATH` and `--modbus-tcp
//! HOST[:PORT]` ask a Modbus unit (`--unit`) for its identification objects (Read Device
//! Identification, function 0x2B / MEI 0x0E). Nothing else is ever written to a port. `--json`
//! for scripts.

use super::{CodedError, EXIT_ERROR, EXIT_OK, EXIT_USAGE};
use crate::transport::{
    identify, list_ports, DataBits, FlowControl, FoundPort, LinkConfig, Parity, PortList,
    SerialSettings, StopBits, TcpSettings, UsbTmcSettings,
};
use anyhow::Context;
use serde::Serialize;
use std::io::Write;
use std::num::{NonZeroU16, NonZeroU32};
use std::path::PathBuf;
use std::time::Duration;

/// Options of `regulus ports`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Send the identity query to each port listed (or to --port) and show the reply.
    #[arg(long)]
    pub identify: bool,
    /// Identify only this port (it need not be listed, e.g. a pseudo-terminal).
    #[arg(long, value_name = "PATH")]
    pub port: Option<String>,
    /// Also send the identity query over TCP to HOST:PORT (repeatable).
    #[arg(long, value_name = "HOST:PORT")]
    pub tcp: Vec<String>,
    /// Ask the Modbus unit on this serial port (RTU, with the serial settings below) for its
    /// identification objects (repeatable).
    #[arg(long, value_name = "PATH")]
    pub modbus_rtu: Vec<String>,
    /// Ask the Modbus TCP unit at HOST[:PORT] (port 502 unless given) for its identification
    /// objects (repeatable).
    #[arg(long, value_name = "HOST[:PORT]")]
    pub modbus_tcp: Vec<String>,
    /// Modbus unit id for --modbus-rtu and --modbus-tcp.
    #[arg(long, default_value_t = 1, value_name = "ID")]
    pub unit: u8,
    /// Identity query to send.
    #[arg(long, default_value = "*IDN?", value_name = "TEXT")]
    pub query: String,
    /// Serial line settings for --identify.
    #[arg(long, default_value_t = 9600)]
    pub baud: u32,
    #[arg(long, default_value_t = 8)]
    pub data_bits: u8,
    /// none, odd or even.
    #[arg(long, default_value = "none")]
    pub parity: String,
    #[arg(long, default_value_t = 1)]
    pub stop_bits: u8,
    /// How long to wait for the reply, in milliseconds.
    #[arg(long, default_value_t = 1000, value_name = "MS")]
    pub timeout_ms: u64,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Where sysfs is (for containers and tests).
    #[arg(long, default_value = "/sys", value_name = "DIR")]
    pub sys_root: PathBuf,
    /// Where the device nodes are (for containers and tests).
    #[arg(long, default_value = "/dev", value_name = "DIR")]
    pub dev_root: PathBuf,
}

/// One identification attempt.
#[derive(Debug, Clone, Serialize)]
pub struct Identified {
    pub path: String,
    /// How it was asked: `text` (the identity query) or `modbus` (Read Device Identification).
    pub via: &'static str,
    pub reply: Option<String>,
    /// The Modbus identification objects.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub objects: Option<Vec<crate::bench::DeviceObject>>,
    pub error: Option<String>,
}

/// `HOST:PORT` (or `HOST` with `default_port`) as TCP settings.
fn tcp_settings(
    text: &str,
    default_port: Option<u16>,
    timeout: Duration,
) -> Result<TcpSettings, CodedError> {
    let bad = || {
        CodedError::new(
            EXIT_USAGE,
            format!("'{text}': give HOST:PORT, e.g. 192.168.0.20:5025"),
        )
    };
    let (host, port) = match text.rsplit_once(':') {
        Some((h, p)) => (h, p.parse::<u16>().map_err(|_| bad())?),
        None => (text, default_port.ok_or_else(bad)?),
    };
    let host = host.trim_start_matches('[').trim_end_matches(']');
    if host.is_empty() {
        return Err(bad());
    }
    Ok(TcpSettings {
        host: host.to_string(),
        port: NonZeroU16::new(port).ok_or_else(bad)?,
        connect_timeout: timeout,
    })
}

#[derive(Serialize)]
struct Json<'a> {
    #[serde(flatten)]
    ports: &'a PortList,
    identified: &'a [Identified],
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let usage = |m: String| CodedError::new(EXIT_USAGE, m);
    let parity = match args.parity.as_str() {
        "none" => Parity::None,
        "odd" => Parity::Odd,
        "even" => Parity::Even,
        p => return Err(usage(format!("--parity {p}: use none, odd or even")).into()),
    };
    let serial = |path: &str| -> Result<SerialSettings, CodedError> {
        Ok(SerialSettings {
            port: path.to_string(),
            baud: NonZeroU32::new(args.baud)
                .ok_or_else(|| usage("--baud must be positive".into()))?,
            data_bits: DataBits::from_bits(args.data_bits)
                .ok_or_else(|| usage("--data-bits must be 5, 6, 7 or 8".into()))?,
            parity,
            stop_bits: StopBits::from_bits(args.stop_bits)
                .ok_or_else(|| usage("--stop-bits must be 1 or 2".into()))?,
            flow_control: FlowControl::None,
        })
    };
    let list = list_ports(&args.sys_root, &args.dev_root);
    let mut identified = Vec::new();
    let timeout = Duration::from_millis(args.timeout_ms.max(1));
    // Every target is checked before anything is sent.
    let mut text_targets: Vec<(String, LinkConfig)> = Vec::new();
    if args.identify {
        let paths: Vec<String> = match &args.port {
            Some(p) => vec![p.clone()],
            None => list
                .serial
                .iter()
                .chain(list.usbtmc.iter())
                .map(|p| p.path.clone())
                .collect(),
        };
        for path in paths {
            let link = if path.starts_with("/dev/usbtmc") {
                LinkConfig::UsbTmc(UsbTmcSettings { path: path.clone() })
            } else {
                LinkConfig::Serial(serial(&path)?)
            };
            text_targets.push((path, link));
        }
    }
    for t in &args.tcp {
        text_targets.push((t.clone(), LinkConfig::Tcp(tcp_settings(t, None, timeout)?)));
    }
    let mut modbus_targets: Vec<(String, LinkConfig)> = Vec::new();
    for p in &args.modbus_rtu {
        modbus_targets.push((p.clone(), LinkConfig::Serial(serial(p)?)));
    }
    for t in &args.modbus_tcp {
        modbus_targets.push((
            t.clone(),
            LinkConfig::Tcp(tcp_settings(t, Some(502), timeout)?),
        ));
    }
    if !text_targets.is_empty() || !modbus_targets.is_empty() {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .context("cannot start the async runtime")?;
        for (path, link) in text_targets {
            let r = rt.block_on(identify(&link, &args.query, timeout));
            let (reply, error) = match r {
                Ok(reply) => (Some(reply), None),
                Err(e) => (None, Some(e.to_string())),
            };
            identified.push(Identified {
                path,
                via: "text",
                reply,
                objects: None,
                error,
            });
        }
        for (path, link) in modbus_targets {
            let r = rt.block_on(crate::bench::modbus_identify(&link, args.unit, timeout));
            identified.push(match r {
                Ok(objects) => Identified {
                    path,
                    via: "modbus",
                    reply: Some(
                        objects
                            .iter()
                            .map(|o| format!("{}={}", o.name, o.value))
                            .collect::<Vec<_>>()
                            .join("; "),
                    ),
                    objects: Some(objects),
                    error: None,
                },
                Err(e) => Identified {
                    path,
                    via: "modbus",
                    reply: None,
                    objects: None,
                    error: Some(e),
                },
            });
        }
    }
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    if args.json {
        let j = Json {
            ports: &list,
            identified: &identified,
        };
        serde_json::to_writer_pretty(&mut out, &j).context("cannot write JSON")?;
        writeln!(out)?;
    } else {
        write_table(&mut out, &list, &identified)?;
    }
    if identified.iter().any(|i| i.error.is_some()) {
        return Err(
            CodedError::new(EXIT_ERROR, "some ports did not answer the identity query").into(),
        );
    }
    Ok(EXIT_OK)
}

fn usb_text(p: &FoundPort) -> (String, String, String) {
    match &p.usb {
        None => ("-".into(), "-".into(), "-".into()),
        Some(u) => (
            format!("{}:{}", u.vendor_id, u.product_id),
            u.serial_number.clone().unwrap_or_else(|| "-".into()),
            [u.manufacturer.as_deref(), u.product.as_deref()]
                .into_iter()
                .flatten()
                .collect::<Vec<_>>()
                .join(" "),
        ),
    }
}

/// The listing as a table (and the identity replies below it).
pub fn write_table<W: Write>(
    w: &mut W,
    list: &PortList,
    identified: &[Identified],
) -> std::io::Result<()> {
    for (title, ports) in [
        ("serial ports", &list.serial),
        ("USB-TMC nodes", &list.usbtmc),
    ] {
        if ports.is_empty() {
            writeln!(w, "{title}: none found")?;
            continue;
        }
        writeln!(w, "{title}:")?;
        writeln!(
            w,
            "  {:<16} {:<10} {:<14} {:<28} by-id",
            "path", "usb id", "serial number", "device"
        )?;
        for p in ports.iter() {
            let (id, sn, dev) = usb_text(p);
            writeln!(
                w,
                "  {:<16} {:<10} {:<14} {:<28} {}",
                p.path,
                id,
                sn,
                if dev.is_empty() { "-" } else { &dev },
                p.by_id.as_deref().unwrap_or("-")
            )?;
        }
    }
    for n in &list.notes {
        writeln!(w, "note: {n}")?;
    }
    if !identified.is_empty() {
        writeln!(w, "identity:")?;
        for i in identified {
            match (&i.reply, &i.error) {
                (Some(r), _) => writeln!(w, "  {:<16} {r}", i.path)?,
                (_, Some(e)) => writeln!(w, "  {:<16} (no identity) {e}", i.path)?,
                _ => {}
            }
        }
    }
    Ok(())
}
