//! Line framing over a byte stream: a reader that enforces one deadline for a whole reply
//! (serial timeouts apply per read call, so we keep our own), keeps partial lines between
//! calls, and caps line length so garbage without a terminator cannot grow memory; a writer
//! that appends the terminator; and an optional timestamped traffic log.

use super::IoCause;
use std::io::Write as _;
use std::path::Path;
use std::pin::Pin;
use std::sync::Mutex;
use std::task::Poll;
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt, ReadBuf};
use tokio::time::Instant;

/// Longest line kept; longer runs without a terminator are cut into lines of this size.
pub const MAX_LINE: usize = 4096;

/// Why a line could not be read or written.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LinkError {
    #[error("no complete line before the deadline")]
    Timeout,
    #[error("the link was closed by the other end")]
    Closed,
    /// The link's own I/O error.
    #[error("{0}")]
    Io(IoCause),
    #[error("write did not complete within {ms} ms (flow control holding the line?)")]
    WriteTimeout { ms: u128 },
    /// A reader task of this link panicked while holding its state.
    #[error("stream state poisoned")]
    Poisoned,
}

fn io_err(e: std::io::Error) -> LinkError {
    match e.kind() {
        std::io::ErrorKind::UnexpectedEof
        | std::io::ErrorKind::BrokenPipe
        | std::io::ErrorKind::ConnectionReset
        | std::io::ErrorKind::ConnectionAborted
        | std::io::ErrorKind::NotConnected => LinkError::Closed,
        _ => LinkError::Io(IoCause::new(e)),
    }
}

/// Reads terminator-delimited lines with a whole-reply deadline.
pub struct LineReader<R> {
    src: R,
    buf: Vec<u8>,
    term: Vec<u8>,
    closed: bool,
}

impl<R: AsyncRead + Unpin> LineReader<R> {
    /// `terminator` must not be empty (the bench file check refuses an empty one; an empty one
    /// here falls back to a newline).
    pub fn new(src: R, terminator: &str) -> LineReader<R> {
        let term = if terminator.is_empty() {
            b"\n".to_vec()
        } else {
            terminator.as_bytes().to_vec()
        };
        LineReader {
            src,
            buf: Vec::with_capacity(256),
            term,
            closed: false,
        }
    }

    /// A complete line already in the buffer, if any (terminator and a trailing `\r` removed).
    pub fn buffered_line(&mut self) -> Option<String> {
        let pos = find(&self.buf, &self.term);
        let (cut, skip) = match pos {
            Some(p) => (p, self.term.len()),
            None if self.buf.len() >= MAX_LINE => (MAX_LINE, 0),
            None => return None,
        };
        let mut line = &self.buf[..cut];
        if line.last() == Some(&b'\r') {
            line = &line[..line.len() - 1];
        }
        let text = String::from_utf8_lossy(line).into_owned();
        self.buf.drain(..cut + skip);
        Some(text)
    }

    /// Read one line, waiting at most until `deadline` for all of it.
    pub async fn read_line(&mut self, deadline: Instant) -> Result<String, LinkError> {
        let mut chunk = [0u8; 512];
        loop {
            if let Some(line) = self.buffered_line() {
                return Ok(line);
            }
            if self.closed {
                return Err(LinkError::Closed);
            }
            match tokio::time::timeout_at(deadline, self.src.read(&mut chunk)).await {
                Err(_) => return Err(LinkError::Timeout),
                Ok(Ok(0)) => {
                    self.closed = true;
                    // A line cut off by the link closing (no terminator) may be a number
                    // truncated mid-way: it is never taken as a reply.
                    self.buf.clear();
                    return Err(LinkError::Closed);
                }
                Ok(Ok(n)) => self.buf.extend_from_slice(&chunk[..n]),
                Ok(Err(e)) => {
                    let err = io_err(e);
                    if err == LinkError::Closed {
                        self.closed = true;
                    }
                    return Err(err);
                }
            }
        }
    }

    /// Take everything that has already arrived (complete lines and a partial one) without
    /// waiting, returning the complete lines (stale replies, stray lines). Used before a query
    /// so an old reply is never taken for the new one.
    pub async fn drain(&mut self) -> Result<Vec<String>, LinkError> {
        let mut chunk = [0u8; 512];
        loop {
            if self.closed {
                break;
            }
            // Poll the link once, without a timer (a zero timeout would still wait for the
            // timer's next millisecond tick).
            let src = &mut self.src;
            let once = std::future::poll_fn(|cx| {
                let mut rb = ReadBuf::new(&mut chunk);
                match Pin::new(&mut *src).poll_read(cx, &mut rb) {
                    Poll::Ready(Ok(())) => Poll::Ready(Some(Ok(rb.filled().len()))),
                    Poll::Ready(Err(e)) => Poll::Ready(Some(Err(e))),
                    Poll::Pending => Poll::Ready(None),
                }
            })
            .await;
            match once {
                None => break,
                Some(Ok(0)) => {
                    self.closed = true;
                    break;
                }
                Some(Ok(n)) => self.buf.extend_from_slice(&chunk[..n]),
                Some(Err(e)) => {
                    let err = io_err(e);
                    if err == LinkError::Closed {
                        self.closed = true;
                        break;
                    }
                    return Err(err);
                }
            }
        }
        let mut lines = Vec::new();
        while let Some(l) = self.buffered_line() {
            lines.push(l);
        }
        if !self.buf.is_empty() {
            lines.push(String::from_utf8_lossy(&self.buf).into_owned());
            self.buf.clear();
        }
        Ok(lines)
    }

    /// True once the other end closed the link.
    pub fn is_closed(&self) -> bool {
        self.closed
    }
}

fn find(hay: &[u8], needle: &[u8]) -> Option<usize> {
    if needle.len() == 1 {
        return hay.iter().position(|&b| b == needle[0]);
    }
    hay.windows(needle.len()).position(|w| w == needle)
}

/// Writes lines with a terminator, each within a deadline.
pub struct LineWriter<W> {
    dst: W,
    term: String,
    out: Vec<u8>,
}

impl<W: AsyncWrite + Unpin> LineWriter<W> {
    pub fn new(dst: W, terminator: &str) -> LineWriter<W> {
        LineWriter {
            dst,
            term: terminator.to_string(),
            out: Vec::with_capacity(64),
        }
    }

    /// Write `line` plus the terminator and flush, giving up after `timeout`.
    pub async fn write_line(&mut self, line: &str, timeout: Duration) -> Result<(), LinkError> {
        self.out.clear();
        self.out.extend_from_slice(line.as_bytes());
        self.out.extend_from_slice(self.term.as_bytes());
        let fut = async {
            self.dst.write_all(&self.out).await?;
            self.dst.flush().await
        };
        match tokio::time::timeout(timeout, fut).await {
            Err(_) => Err(LinkError::WriteTimeout {
                ms: timeout.as_millis(),
            }),
            Ok(Err(e)) => Err(io_err(e)),
            Ok(Ok(())) => Ok(()),
        }
    }
}

/// Timestamped raw traffic of one instrument: `<UTC> > sent` and `<UTC> < received`.
pub struct TrafficLog {
    file: Mutex<std::fs::File>,
}

impl TrafficLog {
    /// Open (append to) a traffic log file, creating its folder.
    pub fn open(path: &Path) -> std::io::Result<TrafficLog> {
        if let Some(dir) = path.parent() {
            if !dir.as_os_str().is_empty() {
                std::fs::create_dir_all(dir)?;
            }
        }
        let file = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)?;
        Ok(TrafficLog {
            file: Mutex::new(file),
        })
    }

    /// Log one line sent (`>`) or received (`<`); control characters are escaped.
    /// Logging failures are ignored: the log must never stop a measurement.
    pub fn line(&self, sent: bool, text: &str) {
        let now = chrono::Utc::now().format("%Y-%m-%dT%H:%M:%S%.3fZ");
        let dir = if sent { '>' } else { '<' };
        let shown: String = text.escape_debug().collect();
        if let Ok(mut f) = self.file.lock() {
            let _ = writeln!(f, "{now} {dir} {shown}");
        }
    }

    /// Log a note (`#`), e.g. a timeout.
    pub fn note(&self, text: &str) {
        let now = chrono::Utc::now().format("%Y-%m-%dT%H:%M:%S%.3fZ");
        if let Ok(mut f) = self.file.lock() {
            let _ = writeln!(f, "{now} # {text}");
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tokio::io::AsyncWriteExt;

    #[tokio::test]
    async fn partial_lines_wait_for_their_terminator() {
        let (mut a, b) = tokio::io::duplex(64);
        let mut r = LineReader::new(b, "\r\n");
        a.write_all(b"+1.2E").await.unwrap();
        let soon = Instant::now() + Duration::from_millis(20);
        assert_eq!(r.read_line(soon).await, Err(LinkError::Timeout));
        a.write_all(b"+01\r\nnext\r\n").await.unwrap();
        let later = Instant::now() + Duration::from_secs(2);
        assert_eq!(r.read_line(later).await.unwrap(), "+1.2E+01");
        assert_eq!(r.read_line(later).await.unwrap(), "next");
        drop(a);
        assert_eq!(r.read_line(later).await, Err(LinkError::Closed));
    }

    /// Regression: a reply cut off by the link closing ("+12.3" of "+12.345E+00") is not a
    /// reading.
    #[tokio::test]
    async fn a_line_cut_off_by_closing_is_not_a_reply() {
        let (mut a, b) = tokio::io::duplex(64);
        let mut r = LineReader::new(b, "\n");
        a.write_all(b"+12.3").await.unwrap();
        drop(a);
        let later = Instant::now() + Duration::from_secs(2);
        assert_eq!(r.read_line(later).await, Err(LinkError::Closed));
    }

    #[tokio::test]
    async fn drain_discards_stale_lines() {
        let (mut a, b) = tokio::io::duplex(64);
        let mut r = LineReader::new(b, "\n");
        a.write_all(b"old\nstray\npart").await.unwrap();
        tokio::task::yield_now().await;
        assert_eq!(r.drain().await.unwrap(), vec!["old", "stray", "part"]);
        a.write_all(b"fresh\n").await.unwrap();
        let later = Instant::now() + Duration::from_secs(2);
        assert_eq!(r.read_line(later).await.unwrap(), "fresh");
    }

    #[tokio::test]
    async fn endless_garbage_is_cut_into_bounded_lines() {
        let (mut a, b) = tokio::io::duplex(1 << 16);
        let mut r = LineReader::new(b, "\n");
        a.write_all(&vec![b'x'; MAX_LINE + 10]).await.unwrap();
        let later = Instant::now() + Duration::from_secs(2);
        assert_eq!(r.read_line(later).await.unwrap().len(), MAX_LINE);
    }
}
