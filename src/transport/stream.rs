//! The byte-link abstraction every transport yields ([`Transport`], boxed as [`BoxTransport`])
//! why a link could not be opened ([`OpenError`]), and [`IoCause`], an I/O error kept whole
//! inside the (cloneable) link errors. No I/O here.

use std::fmt;
use std::sync::Arc;
use tokio::io::{AsyncRead, AsyncWrite};

/// Anything we can read bytes from and write bytes to, as one owned value.
pub trait Transport: AsyncRead + AsyncWrite + Unpin + Send + 'static {
    /// The operating system's descriptor of the link (serial port, socket), when it has one:
    /// the guardian process is handed a duplicate of it.
    fn raw_fd(&self) -> Option<i32> {
        None
    }
}

#[cfg(unix)]
impl Transport for tokio::net::TcpStream {
    fn raw_fd(&self) -> Option<i32> {
        Some(std::os::fd::AsRawFd::as_raw_fd(self))
    }
}

#[cfg(not(unix))]
impl Transport for tokio::net::TcpStream {}

#[cfg(unix)]
impl Transport for tokio_serial::SerialStream {
    fn raw_fd(&self) -> Option<i32> {
        Some(std::os::fd::AsRawFd::as_raw_fd(self))
    }
}

#[cfg(not(unix))]
impl Transport for tokio_serial::SerialStream {}

impl Transport for tokio::io::DuplexStream {}

/// A transport behind a box, as the bench holds it.
pub type BoxTransport = Box<dyn Transport>;

/// An I/O error kept whole and shareable (link and bench errors are `Clone`); two are equal when they
/// are of the same kind and read the same.
#[derive(Debug, Clone)]
pub struct IoCause(pub Arc<std::io::Error>);

impl IoCause {
    pub fn new(e: std::io::Error) -> IoCause {
        IoCause(Arc::new(e))
    }

    /// The I/O error itself.
    pub fn get(&self) -> &std::io::Error {
        &self.0
    }
}

impl PartialEq for IoCause {
    fn eq(&self, other: &IoCause) -> bool {
        self.0.kind() == other.0.kind() && self.0.to_string() == other.0.to_string()
    }
}

impl fmt::Display for IoCause {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

/// Why a link could not be opened, sorted by what the user should check.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
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
    /// Another failure of the network connection.
    #[error("{0}")]
    Io(IoCause),
    /// Another failure of the serial port, as the serial library describes it.
    #[error("{0}")]
    Other(String),
}
