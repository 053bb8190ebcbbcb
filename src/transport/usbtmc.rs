//! USB-TMC links: the Linux usbtmc driver's `/dev/usbtmc*` nodes. The device is
//! message-based: each write(2) is one message to the instrument, and each read(2) fetches one
//! reply, which the driver asks the instrument for when the read is made, blocking until the
//! instrument answers or the driver's own timeout passes. So the link writes a whole line at
//! flush as one message, and reads only when a reply is owed: one read per query sent (a
//! message with a `?` in it, as IEEE 488.2 query headers end in `?`). A read asked for with
//! no reply owed stays pending (the line reader's deadline ends it) and never reaches the
//! device: no speculative reads. A reply without a trailing newline gets one, since the end of
//! the message is the end of the reply. Blocking calls run on tokio's blocking threads.

use super::{BoxTransport, IoCause, OpenError};
use std::fs::File;
use std::future::Future;
use std::io::{self, Read, Write};
use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::task::{Context, Poll};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::task::JoinHandle;

/// Largest reply read in one call (a reply is one message; the driver splits longer ones).
const READ_MAX: usize = 64 * 1024;

/// The udev rule that lets a group use USB-TMC nodes (the driver's nodes are root-only by
/// default; the usbtmc driver's nodes belong to the `usbmisc` class).
pub const UDEV_RULE: &str =
    "SUBSYSTEM==\"usbmisc\", KERNEL==\"usbtmc*\", GROUP=\"plugdev\", MODE=\"0660\"";

/// What to do when a USB-TMC node cannot be opened for lack of permission.
pub fn permission_help(path: &str) -> String {
    format!(
        "permission denied opening {path}; USB-TMC nodes are root-only unless a udev rule says otherwise: put\n  {UDEV_RULE}\ninto /etc/udev/rules.d/60-usbtmc.rules, run 'udevadm control --reload-rules && udevadm trigger' (or replug the instrument) and add your user to the group (plugdev here), then log in again"
    )
}

/// How many device reads and writes a link made (for checking that nothing is read unasked).
#[derive(Debug, Default)]
pub struct UsbTmcCounters {
    pub messages_written: AtomicUsize,
    pub reads: AtomicUsize,
}

/// The blocking side of a USB-TMC node: the character device, or a stand-in with the same
/// one-message-per-call behaviour.
pub trait MessageDevice: Read + Write + Send + 'static {}
impl<T: Read + Write + Send + 'static> MessageDevice for T {}

enum ReadState {
    Idle,
    Reading(JoinHandle<io::Result<Vec<u8>>>),
    Ready(Vec<u8>, usize),
}

/// A message-based link over a USB-TMC node.
pub struct UsbTmcLink {
    dev: Arc<Mutex<Box<dyn MessageDevice>>>,
    out: Vec<u8>,
    writing: Option<JoinHandle<io::Result<()>>>,
    owed: usize,
    read: ReadState,
    counters: Arc<UsbTmcCounters>,
    /// The device node's descriptor, for the guardian (none for a stand-in without one).
    fd: Option<i32>,
}

impl UsbTmcLink {
    /// A link over an open device (or a stand-in that behaves like one).
    pub fn new(dev: impl MessageDevice) -> UsbTmcLink {
        UsbTmcLink {
            dev: Arc::new(Mutex::new(Box::new(dev))),
            out: Vec::new(),
            writing: None,
            owed: 0,
            read: ReadState::Idle,
            counters: Arc::new(UsbTmcCounters::default()),
            fd: None,
        }
    }

    /// A link over an open file (the device node, or a stand-in with the same one message per
    /// write): its descriptor goes to the guardian, which writes each safe-state line as one
    /// message of its own.
    pub fn from_file(f: File) -> UsbTmcLink {
        #[cfg(unix)]
        let fd = Some(std::os::fd::AsRawFd::as_raw_fd(&f));
        #[cfg(not(unix))]
        let fd = None;
        let mut l = UsbTmcLink::new(f);
        l.fd = fd;
        l
    }

    pub fn counters(&self) -> Arc<UsbTmcCounters> {
        Arc::clone(&self.counters)
    }
}

/// Whether a message asks for a reply: any `?` (a query header; compound queries get one
/// reply message with their answers joined by `;`).
fn is_query(message: &[u8]) -> bool {
    message.contains(&b'?')
}

fn join_err(e: tokio::task::JoinError) -> io::Error {
    io::Error::other(format!("USB-TMC worker failed: {e}"))
}

impl AsyncWrite for UsbTmcLink {
    fn poll_write(
        mut self: Pin<&mut Self>,
        _cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        self.out.extend_from_slice(buf);
        Poll::Ready(Ok(buf.len()))
    }

    /// The buffered bytes go out as one message.
    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        loop {
            if let Some(h) = self.writing.as_mut() {
                let r = match Pin::new(h).poll(cx) {
                    Poll::Pending => return Poll::Pending,
                    Poll::Ready(r) => r.map_err(join_err).and_then(|r| r),
                };
                self.writing = None;
                return Poll::Ready(r);
            }
            if self.out.is_empty() {
                return Poll::Ready(Ok(()));
            }
            let msg = std::mem::take(&mut self.out);
            if is_query(&msg) {
                self.owed += 1;
            }
            self.counters
                .messages_written
                .fetch_add(1, Ordering::SeqCst);
            let dev = Arc::clone(&self.dev);
            self.writing = Some(tokio::task::spawn_blocking(move || {
                let mut d = dev.lock().unwrap_or_else(|e| e.into_inner());
                let n = d.write(&msg)?;
                if n != msg.len() {
                    return Err(io::Error::new(
                        io::ErrorKind::WriteZero,
                        format!("the device took {n} of {} bytes of one message", msg.len()),
                    ));
                }
                Ok(())
            }));
        }
    }

    fn poll_shutdown(self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        self.poll_flush(cx)
    }
}

impl AsyncRead for UsbTmcLink {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        loop {
            match &mut self.read {
                ReadState::Ready(data, pos) => {
                    let n = (data.len() - *pos).min(buf.remaining());
                    buf.put_slice(&data[*pos..*pos + n]);
                    *pos += n;
                    if *pos >= data.len() {
                        self.read = ReadState::Idle;
                    }
                    return Poll::Ready(Ok(()));
                }
                ReadState::Reading(h) => {
                    let r = match Pin::new(h).poll(cx) {
                        Poll::Pending => return Poll::Pending,
                        Poll::Ready(r) => r.map_err(join_err).and_then(|r| r),
                    };
                    match r {
                        Ok(mut data) => {
                            if data.is_empty() {
                                self.read = ReadState::Idle;
                                // End of file: the device went away.
                                return Poll::Ready(Ok(()));
                            }
                            if data.last() != Some(&b'\n') {
                                data.push(b'\n');
                            }
                            self.read = ReadState::Ready(data, 0);
                        }
                        Err(e) => {
                            self.read = ReadState::Idle;
                            return Poll::Ready(Err(e));
                        }
                    }
                }
                ReadState::Idle => {
                    // A write still in flight must reach the device before its reply is read.
                    if self.owed == 0 || self.writing.is_some() {
                        // Nothing is owed: never ask the device (it would block until its
                        // own timeout). The caller's deadline ends the wait.
                        return Poll::Pending;
                    }
                    self.owed -= 1;
                    self.counters.reads.fetch_add(1, Ordering::SeqCst);
                    let dev = Arc::clone(&self.dev);
                    self.read = ReadState::Reading(tokio::task::spawn_blocking(move || {
                        let mut d = dev.lock().unwrap_or_else(|e| e.into_inner());
                        let mut b = vec![0u8; READ_MAX];
                        let n = d.read(&mut b)?;
                        b.truncate(n);
                        Ok(b)
                    }));
                }
            }
        }
    }
}

/// Sort an open failure by what the user should check.
pub fn classify_open(e: &io::Error) -> OpenError {
    match e.kind() {
        io::ErrorKind::NotFound => OpenError::Missing,
        io::ErrorKind::PermissionDenied => OpenError::PermissionDenied,
        _ if e.raw_os_error() == Some(libc::EBUSY) => OpenError::Busy,
        _ => OpenError::Io(IoCause::new(io::Error::new(e.kind(), e.to_string()))),
    }
}

// The descriptor goes to the guardian, which writes whole messages (one write each) to it.
impl super::Transport for UsbTmcLink {
    fn raw_fd(&self) -> Option<i32> {
        self.fd
    }
}

/// Open a USB-TMC node for reading and writing.
pub fn open_usbtmc(path: &str) -> Result<BoxTransport, OpenError> {
    let f = File::options()
        .read(true)
        .write(true)
        .open(path)
        .map_err(|e| classify_open(&e))?;
    Ok(Box::new(UsbTmcLink::from_file(f)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn queries_are_messages_with_a_question_mark() {
        assert!(is_query(b"*IDN?\n"));
        assert!(is_query(b"VOLT 5;*OPC?\n"));
        assert!(!is_query(b"INP ON\n"));
    }

    #[test]
    fn open_failures_say_what_to_check() {
        let e = io::Error::from(io::ErrorKind::PermissionDenied);
        assert_eq!(classify_open(&e), OpenError::PermissionDenied);
        assert_eq!(
            classify_open(&io::Error::from(io::ErrorKind::NotFound)),
            OpenError::Missing
        );
        let help = permission_help("/dev/usbtmc0");
        assert!(help.contains("/dev/usbtmc0"));
        assert!(help.contains(UDEV_RULE));
    }
}
