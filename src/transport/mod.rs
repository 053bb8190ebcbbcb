//! Transports: byte links to instruments (serial via tokio-serial, raw TCP sockets, and an
//! in-memory link for benchmarks and examples), the line reader that enforces a whole-reply
//! deadline, and the optional raw traffic log. Transports move bytes and lines; they must not
//! know about roles, commands or reply patterns.

mod lines;
mod memory;
mod serial;
mod tcp;

pub use lines::{LineReader, LineWriter, LinkError, TrafficLog, MAX_LINE};
pub use memory::MemoryTransport;
pub use serial::open_serial;
pub use tcp::open_tcp;

use tokio::io::{AsyncRead, AsyncWrite};

/// Anything we can read bytes from and write bytes to, as one owned value.
pub trait Transport: AsyncRead + AsyncWrite + Unpin + Send + 'static {}

impl<T: AsyncRead + AsyncWrite + Unpin + Send + 'static> Transport for T {}

/// A transport behind a box, as the bench holds it.
pub type BoxTransport = Box<dyn Transport>;

/// Why a link could not be opened, sorted by what the user should check.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum OpenError {
    #[error("no such port")]
    Missing,
    #[error("permission denied")]
    PermissionDenied,
    #[error("port busy")]
    Busy,
    #[error("connection refused")]
    Refused,
    #[error("connection attempt timed out")]
    Timeout,
    #[error("{0}")]
    Other(String),
}
