//! USB-TMC links: the Linux usbtmc driver's `/dev/usbtmc*` nodes. The device is
//! message-based: each write(2) is one message to the instrument, and each read(2) fetches one
//! reply, which the driver asks the instrument for when the read is made, blocking until the
//! instrument answers or the driver's own timeout passes. So the link writes a whole line at
//! flush as one message, and reads only when a reply is owed: one read per query sent (a
//! message with a `?` in it, as IEEE 488.2 query headers end in `?`). A read asked for with
//! no reply owed stays pending (the line reader's deadline ends it) and never reaches the
//! device: no speculative reads. A reply without a trailing newline gets one, since the end of
//! the message is the end of the reply.
//!
//! Deadlines: on a real node the driver's timeout is set to the instrument's reply deadline
//! (`USBTMC_IOCTL_SET_TIMEOUT`) and auto-abort is switched on (`USBTMC_IOCTL_AUTO_ABORT`: a
//! timed-out read aborts the bulk-in transfer, so the instrument's late reply is dropped).
//! Whatever the device does, the blocking read runs on a thread of the link's own, never on
//! the async runtime: the caller's deadline abandons the wait, and the thread's read goes on.
//! Its reply, if one comes, is delivered in order like any other line, so the lockstep rules
//! of the bench (a line that arrived before a query is stale; after a timeout the link is
//! resynchronised) see it as late and never as the answer to the next query. Writes use a
//! handle of their own, so a read left waiting never holds up the next message.

use super::{BoxTransport, IoCause, OpenError};
use std::fs::File;
use std::future::Future;
use std::io::{self, Read, Write};
use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{mpsc, Arc, Mutex};
use std::task::{Context, Poll};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::sync::mpsc as tmpsc;
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

/// How many device reads and writes a link made (for checking that nothing is read unasked),
/// and how many device reads ended by the device's own timeout.
#[derive(Debug, Default)]
pub struct UsbTmcCounters {
    pub messages_written: AtomicUsize,
    pub reads: AtomicUsize,
    pub device_timeouts: AtomicUsize,
}

/// The ioctl request numbers of linux/usb/tmc.h: `USBTMC_IOC_NR` is 91 (`'['`),
/// `USBTMC_IOCTL_SET_TIMEOUT` is `_IOW(USBTMC_IOC_NR, 10, __u32)` (milliseconds) and
/// `USBTMC_IOCTL_AUTO_ABORT` is `_IOW(USBTMC_IOC_NR, 25, __u8)`. `_IOW` in the generic
/// encoding of asm-generic/ioctl.h: direction write (1) << 30 | size << 16 | type << 8 | nr.
mod ioctl {
    const fn iow(nr: u64, size: u64) -> u64 {
        (1 << 30) | (size << 16) | (91 << 8) | nr
    }
    pub const SET_TIMEOUT: u64 = iow(10, 4);
    pub const AUTO_ABORT: u64 = iow(25, 1);
    /// The driver refuses timeouts below this (USBTMC_MIN_TIMEOUT in the driver, from memory).
    pub const MIN_TIMEOUT_MS: u32 = 100;
}

/// Give a real node the instrument's deadline and auto-abort. True when the driver took both
/// (a stand-in that is not a usbtmc node refuses them: ENOTTY).
#[cfg(all(
    target_os = "linux",
    any(
        target_arch = "x86_64",
        target_arch = "x86",
        target_arch = "aarch64",
        target_arch = "arm",
        target_arch = "riscv64"
    )
))]
fn set_driver_deadline(fd: i32, deadline: Duration) -> bool {
    let ms: u32 = deadline
        .as_millis()
        .clamp(ioctl::MIN_TIMEOUT_MS as u128, u32::MAX as u128) as u32;
    let abort: u8 = 1;
    // SAFETY: both requests take a pointer to a value of the size encoded in the request
    // (u32, u8) that lives across the call; `fd` is an open descriptor we own.
    unsafe {
        libc::ioctl(fd, ioctl::SET_TIMEOUT as _, &ms as *const u32) == 0
            && libc::ioctl(fd, ioctl::AUTO_ABORT as _, &abort as *const u8) == 0
    }
}

#[cfg(not(all(
    target_os = "linux",
    any(
        target_arch = "x86_64",
        target_arch = "x86",
        target_arch = "aarch64",
        target_arch = "arm",
        target_arch = "riscv64"
    )
)))]
fn set_driver_deadline(_fd: i32, _deadline: Duration) -> bool {
    false
}

/// Whether a read error is the device's own timeout (the driver's ETIMEDOUT, or a receive
/// timeout of a stand-in socket).
fn is_device_timeout(e: &io::Error) -> bool {
    matches!(
        e.kind(),
        io::ErrorKind::TimedOut | io::ErrorKind::WouldBlock
    ) || e.raw_os_error() == Some(libc::ETIMEDOUT)
}

/// The link's reader thread: one device read per request, its result sent back. Ends when
/// the link is dropped (after the read in progress, if any, returns).
fn spawn_reader(
    mut dev: Box<dyn Read + Send>,
) -> (
    mpsc::Sender<()>,
    tmpsc::UnboundedReceiver<io::Result<Vec<u8>>>,
) {
    let (req_tx, req_rx) = mpsc::channel::<()>();
    let (res_tx, res_rx) = tmpsc::unbounded_channel();
    let spawned = std::thread::Builder::new()
        .name("usbtmc-read".into())
        .spawn(move || {
            while req_rx.recv().is_ok() {
                let mut b = vec![0u8; READ_MAX];
                let r = dev.read(&mut b).map(|n| {
                    b.truncate(n);
                    b
                });
                if res_tx.send(r).is_err() {
                    return;
                }
            }
        });
    if let Err(e) = spawned {
        // No thread: every read reports why.
        let (tx, rx) = tmpsc::unbounded_channel();
        let _ = tx.send(Err(io::Error::other(format!(
            "USB-TMC reader thread could not start: {e}"
        ))));
        let (req_tx, _) = mpsc::channel();
        return (req_tx, rx);
    }
    (req_tx, res_rx)
}

enum ReadState {
    Idle,
    /// A device read was asked of the reader thread and has not returned.
    Reading,
    Ready(Vec<u8>, usize),
}

/// A message-based link over a USB-TMC node.
pub struct UsbTmcLink {
    writer: Arc<Mutex<Box<dyn Write + Send>>>,
    read_req: mpsc::Sender<()>,
    read_res: tmpsc::UnboundedReceiver<io::Result<Vec<u8>>>,
    out: Vec<u8>,
    writing: Option<JoinHandle<io::Result<()>>>,
    /// Replies owed: queries sent minus replies read.
    owed: usize,
    read: ReadState,
    counters: Arc<UsbTmcCounters>,
    /// The device drops the reply of a read that timed out (the driver's auto-abort): a
    /// device timeout settles the query. Otherwise its reply may still come and stays owed.
    aborts_late: bool,
    /// The device node's descriptor, for the guardian (none for a stand-in without one).
    fd: Option<i32>,
}

impl UsbTmcLink {
    /// A link over the two sides of a device (or of a stand-in with its behaviour): reads go
    /// to `reader` on the link's reader thread, each message to `writer` in one write.
    pub fn from_parts(
        reader: impl Read + Send + 'static,
        writer: impl Write + Send + 'static,
    ) -> UsbTmcLink {
        let (read_req, read_res) = spawn_reader(Box::new(reader));
        UsbTmcLink {
            writer: Arc::new(Mutex::new(Box::new(writer))),
            read_req,
            read_res,
            out: Vec::new(),
            writing: None,
            owed: 0,
            read: ReadState::Idle,
            counters: Arc::new(UsbTmcCounters::default()),
            aborts_late: false,
            fd: None,
        }
    }

    /// A link over an open file (the device node, or a stand-in with the same one message per
    /// write): its descriptor goes to the guardian, which writes each safe-state line as one
    /// message of its own. `deadline` is the instrument's reply deadline: on a real node the
    /// driver's timeout is set to it, with auto-abort.
    pub fn from_file(f: File, deadline: Duration) -> io::Result<UsbTmcLink> {
        let w = f.try_clone()?;
        #[cfg(unix)]
        let fd = Some(std::os::fd::AsRawFd::as_raw_fd(&f));
        #[cfg(not(unix))]
        let fd = None;
        let aborts_late = fd.is_some_and(|fd| set_driver_deadline(fd, deadline));
        let mut l = UsbTmcLink::from_parts(f, w);
        l.fd = fd;
        l.aborts_late = aborts_late;
        Ok(l)
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
            let dev = Arc::clone(&self.writer);
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
                ReadState::Reading => {
                    // A read the caller gave up on (its deadline passed) is still this one:
                    // its reply comes here, in order, whenever it comes.
                    let r = match self.read_res.poll_recv(cx) {
                        Poll::Pending => return Poll::Pending,
                        Poll::Ready(None) => Err(io::Error::other("USB-TMC reader thread ended")),
                        Poll::Ready(Some(r)) => r,
                    };
                    self.read = ReadState::Idle;
                    match r {
                        Ok(mut data) => {
                            if data.is_empty() {
                                // End of file: the device went away.
                                return Poll::Ready(Ok(()));
                            }
                            self.owed = self.owed.saturating_sub(1);
                            if data.last() != Some(&b'\n') {
                                data.push(b'\n');
                            }
                            self.read = ReadState::Ready(data, 0);
                        }
                        Err(e) if is_device_timeout(&e) => {
                            // The device's own timeout: no reply this time. With auto-abort
                            // the instrument's reply is dropped, so nothing is owed for it.
                            self.counters.device_timeouts.fetch_add(1, Ordering::SeqCst);
                            if self.aborts_late {
                                self.owed = self.owed.saturating_sub(1);
                            }
                        }
                        Err(e) => return Poll::Ready(Err(e)),
                    }
                }
                ReadState::Idle => {
                    // A write still in flight must reach the device before its reply is read.
                    if self.owed == 0 || self.writing.is_some() {
                        // Nothing is owed: never ask the device (it would block until its
                        // own timeout). The caller's deadline ends the wait.
                        return Poll::Pending;
                    }
                    if self.read_req.send(()).is_err() {
                        return Poll::Ready(Err(io::Error::other("USB-TMC reader thread ended")));
                    }
                    self.counters.reads.fetch_add(1, Ordering::SeqCst);
                    self.read = ReadState::Reading;
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

/// Open a USB-TMC node for reading and writing; `deadline` is the instrument's reply deadline
/// (the driver's timeout is set to it).
pub fn open_usbtmc(path: &str, deadline: Duration) -> Result<BoxTransport, OpenError> {
    let f = File::options()
        .read(true)
        .write(true)
        .open(path)
        .map_err(|e| classify_open(&e))?;
    let l = UsbTmcLink::from_file(f, deadline).map_err(|e| classify_open(&e))?;
    Ok(Box::new(l))
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

    // The request numbers of linux/usb/tmc.h on the generic ioctl encoding (checked against
    // the header's _IOW(91, 10, __u32) and _IOW(91, 25, __u8)).
    #[test]
    fn ioctl_numbers_follow_the_header() {
        assert_eq!(ioctl::SET_TIMEOUT, 0x4004_5B0A);
        assert_eq!(ioctl::AUTO_ABORT, 0x4001_5B19);
    }

    #[test]
    fn device_timeouts_are_told_from_errors() {
        assert!(is_device_timeout(&io::Error::from_raw_os_error(
            libc::ETIMEDOUT
        )));
        assert!(is_device_timeout(&io::Error::from_raw_os_error(
            libc::EAGAIN
        )));
        assert!(!is_device_timeout(&io::Error::from_raw_os_error(libc::EIO)));
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
