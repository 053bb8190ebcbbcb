//! The byte-link abstraction every transport yields ([`Transport`], boxed as [`BoxTransport`])
//! and why a link could not be opened ([`OpenError`]). No I/O here.

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
