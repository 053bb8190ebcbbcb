//! Asking a port who is there: the identity query written once, one reply line read, and
//! nothing else sent (for `regulus ports --identify`). Serial ports and USB-TMC nodes; a
//! USB-TMC node gets one message and one read.

use super::{
    open_serial, open_tcp, open_usbtmc, permission_help, LineReader, LineWriter, LinkConfig,
    LinkError, OpenError,
};
use std::time::Duration;

/// Why a port gave no identity.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum IdentifyError {
    #[error("cannot open {link}: {error}")]
    Open { link: String, error: OpenError },
    #[error("{0}")]
    Permission(String),
    #[error("cannot send '{query}': {error}")]
    Send { query: String, error: LinkError },
    #[error("no reply to '{query}' within {ms} ms ({error}); check the line settings and that the instrument knows this query")]
    NoReply {
        query: String,
        ms: u128,
        error: LinkError,
    },
}

/// Send `query` once on `link` and return the first non-empty reply line.
pub async fn identify(
    link: &LinkConfig,
    query: &str,
    timeout: Duration,
) -> Result<String, IdentifyError> {
    let opened = match link {
        LinkConfig::Serial(s) => open_serial(s),
        LinkConfig::Tcp(t) => open_tcp(t).await,
        LinkConfig::UsbTmc(u) => open_usbtmc(&u.path, timeout),
    };
    let io = opened.map_err(|error| match (link, error) {
        (LinkConfig::UsbTmc(u), OpenError::PermissionDenied) => {
            IdentifyError::Permission(permission_help(&u.path))
        }
        (_, error) => IdentifyError::Open {
            link: link.describe(),
            error,
        },
    })?;
    let (r, w) = tokio::io::split(io);
    let mut writer = LineWriter::new(w, "\n");
    let mut reader = LineReader::new(r, "\n");
    writer
        .write_line(query, timeout)
        .await
        .map_err(|error| IdentifyError::Send {
            query: query.to_string(),
            error,
        })?;
    let deadline = tokio::time::Instant::now() + timeout;
    loop {
        match reader.read_line(deadline).await {
            Ok(line) if line.trim().is_empty() => continue,
            Ok(line) => return Ok(line.trim().to_string()),
            Err(error) => {
                return Err(IdentifyError::NoReply {
                    query: query.to_string(),
                    ms: timeout.as_millis(),
                    error,
                })
            }
        }
    }
}
