//! Transports: the link settings (serial framing, TCP address), byte links to instruments
//! (serial via tokio-serial, raw TCP sockets, and an in-memory link for benchmarks and
//! examples), the line reader that enforces a whole-reply deadline, and the optional raw
//! traffic log. Transports move bytes and lines; they must not
//! know about roles, commands or reply patterns.

mod discover;
mod identify;
mod lines;
mod link;
mod memory;
mod serial;
mod stream;
mod tcp;
mod usbtmc;

pub use discover::{list_ports, FoundPort, PortList, UsbInfo};
pub use identify::{identify, IdentifyError};
pub use lines::{LineReader, LineWriter, LinkError, TrafficLog, MAX_LINE};
pub use link::{
    DataBits, FlowControl, LinkConfig, Parity, SerialSettings, StopBits, TcpSettings,
    UsbTmcSettings,
};
pub use memory::MemoryTransport;
pub use serial::open_serial;
pub use stream::{BoxTransport, IoCause, OpenError, Transport};
pub use tcp::open_tcp;
pub use usbtmc::{open_usbtmc, permission_help, UsbTmcCounters, UsbTmcLink, UDEV_RULE};
