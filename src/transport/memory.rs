//! An in-memory instrument link with zero latency: every line written is handed to a
//! responder function at once, and its reply (if any) is readable right away. Used by the
//! per-step overhead benchmark and by examples; tests of real links use pseudo-terminals
//! and loopback TCP instead.

use std::collections::VecDeque;
use std::io;
use std::pin::Pin;
use std::task::{Context, Poll, Waker};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

type Responder = Box<dyn FnMut(&str) -> Option<String> + Send>;

/// A link whose other end is a function from a command line to an optional reply line.
pub struct MemoryTransport {
    responder: Responder,
    inbound: Vec<u8>,
    outbound: VecDeque<u8>,
    term: Vec<u8>,
    reader: Option<Waker>,
}

impl MemoryTransport {
    /// `responder` gets each command line (without terminator) and returns the reply line
    /// (without terminator), or `None` for commands that get no reply. Lines end with `\n`.
    pub fn new(responder: impl FnMut(&str) -> Option<String> + Send + 'static) -> MemoryTransport {
        MemoryTransport {
            responder: Box::new(responder),
            inbound: Vec::with_capacity(64),
            outbound: VecDeque::with_capacity(64),
            term: b"\n".to_vec(),
            reader: None,
        }
    }
}

impl super::Transport for MemoryTransport {}

impl AsyncWrite for MemoryTransport {
    fn poll_write(
        self: Pin<&mut Self>,
        _cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        let me = self.get_mut();
        me.inbound.extend_from_slice(buf);
        let mut replied = false;
        while let Some(pos) = me.inbound.iter().position(|&b| b == b'\n') {
            let line: Vec<u8> = me.inbound.drain(..=pos).collect();
            let text = String::from_utf8_lossy(&line[..pos]);
            let text = text.trim_end_matches('\r');
            if let Some(reply) = (me.responder)(text) {
                me.outbound.extend(reply.as_bytes());
                me.outbound.extend(me.term.iter());
                replied = true;
            }
        }
        if replied {
            if let Some(w) = me.reader.take() {
                w.wake();
            }
        }
        Poll::Ready(Ok(buf.len()))
    }

    fn poll_flush(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(Ok(()))
    }

    fn poll_shutdown(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(Ok(()))
    }
}

impl AsyncRead for MemoryTransport {
    fn poll_read(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        let me = self.get_mut();
        if me.outbound.is_empty() {
            me.reader = Some(cx.waker().clone());
            return Poll::Pending;
        }
        let n = buf.remaining().min(me.outbound.len());
        let (a, b) = me.outbound.as_slices();
        if n <= a.len() {
            buf.put_slice(&a[..n]);
        } else {
            buf.put_slice(a);
            buf.put_slice(&b[..n - a.len()]);
        }
        me.outbound.drain(..n);
        Poll::Ready(Ok(()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::transport::{LineReader, LineWriter};
    use std::time::Duration;
    use tokio::time::Instant;

    #[tokio::test]
    async fn replies_at_once() {
        let t = MemoryTransport::new(|cmd| (cmd == "MEAS:VOLT?").then(|| "+1.2E+01".to_string()));
        let (r, w) = tokio::io::split(t);
        let mut r = LineReader::new(r, "\n");
        let mut w = LineWriter::new(w, "\n");
        w.write_line("INP ON", Duration::from_secs(1))
            .await
            .unwrap();
        w.write_line("MEAS:VOLT?", Duration::from_secs(1))
            .await
            .unwrap();
        let line = r
            .read_line(Instant::now() + Duration::from_secs(1))
            .await
            .unwrap();
        assert_eq!(line, "+1.2E+01");
    }
}
