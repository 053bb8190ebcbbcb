//! Raw TCP socket links (LAN instruments commonly listen on port 5025).

use super::{BoxTransport, IoCause, OpenError};
use std::time::Duration;
use tokio::net::TcpStream;

/// Connect to `host:port` within `timeout`.
pub async fn open_tcp(host: &str, port: u16, timeout: Duration) -> Result<BoxTransport, OpenError> {
    let connect = TcpStream::connect((host, port));
    let stream = match tokio::time::timeout(timeout, connect).await {
        Err(_) => return Err(OpenError::Timeout),
        Ok(Err(e)) => {
            return Err(match e.kind() {
                std::io::ErrorKind::ConnectionRefused => OpenError::Refused,
                std::io::ErrorKind::TimedOut => OpenError::Timeout,
                std::io::ErrorKind::PermissionDenied => OpenError::PermissionDenied,
                _ => OpenError::Io(IoCause::new(e)),
            })
        }
        Ok(Ok(s)) => s,
    };
    // Commands are short lines: send each at once.
    let _ = stream.set_nodelay(true);
    Ok(Box::new(stream))
}
