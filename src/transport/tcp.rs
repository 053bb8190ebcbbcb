//! Raw TCP socket links (LAN instruments commonly listen on port 5025).

use super::{BoxTransport, IoCause, OpenError, TcpSettings};
use tokio::net::TcpStream;

/// Connect to the settings' `host:port` within their connect timeout.
pub async fn open_tcp(s: &TcpSettings) -> Result<BoxTransport, OpenError> {
    let connect = TcpStream::connect((s.host.as_str(), s.port.get()));
    let stream = match tokio::time::timeout(s.connect_timeout, connect).await {
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
