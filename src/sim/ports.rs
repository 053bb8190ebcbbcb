//! Where the simulated instruments listen: a pseudo-terminal path or a loopback TCP address,
//! per instrument. Plain data shared by the bench and the bench file it writes.

use super::instruments::InstrumentKind;
use serde::Serialize;
use std::net::SocketAddr;

/// Where an instrument listens.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Link {
    /// A pseudo-terminal: the bench opens this path (e.g. `/dev/pts/4`).
    Pty(String),
    /// A TCP listener on 127.0.0.1.
    Tcp(SocketAddr),
}

impl std::fmt::Display for Link {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Link::Pty(p) => write!(f, "serial {p}"),
            Link::Tcp(a) => write!(f, "tcp {a}"),
        }
    }
}

/// What an instrument speaks on its port.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum PortProtocol {
    /// The text line protocol (docs/ARCHITECTURE.md).
    Text,
    /// Modbus: RTU on a pseudo-terminal, Modbus TCP on a TCP port.
    Modbus,
}

/// One simulated instrument's port.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PortInfo {
    pub kind: InstrumentKind,
    pub name: &'static str,
    pub link: Link,
    pub protocol: PortProtocol,
}
