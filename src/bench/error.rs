//! What can go wrong with a bench, phrased as what to check: the bench file (a located
//! configuration error, or a file that cannot be read) and the instruments (opening a link,
//! no reply, an unreadable reply, a closed link). Every variant keeps the error it came from
//! (io, link, open, template, reply) as a typed value; its message already quotes that
//! error's text, so it is not repeated as a separate cause.

use crate::config::Located;
use crate::control::{ControlError, InstrumentFault};
use crate::protocol::{ReplyError, TemplateError};
use crate::transport::{IoCause, LinkError, OpenError};
use std::fmt;
use std::path::PathBuf;

/// Everything that can go wrong with a bench. Messages of instrument failures start with
/// `instrument '<name>': `.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BenchError {
    /// A rule of the bench file is broken, at `file:line:column`.
    Config(Located),
    /// The bench file cannot be read.
    ReadFile {
        path: String,
        error: IoCause,
    },
    PortMissing {
        instrument: String,
        port: String,
    },
    PermissionDenied {
        instrument: String,
        port: String,
    },
    PortBusy {
        instrument: String,
        port: String,
    },
    /// A link could not be opened for another reason.
    Open {
        instrument: String,
        link: String,
        error: OpenError,
    },
    ConnectionRefused {
        instrument: String,
        addr: String,
    },
    ConnectTimeout {
        instrument: String,
        addr: String,
        ms: u128,
    },
    NoReply {
        instrument: String,
        command: String,
        ms: u128,
    },
    Unparseable {
        instrument: String,
        command: String,
        raw: String,
        pattern: String,
        reason: Box<ReplyError>,
    },
    Closed {
        instrument: String,
        command: String,
    },
    /// The instrument refused a command: an error reply, or an entry in its error queue.
    Refused {
        instrument: String,
        command: String,
        raw: String,
    },
    /// A reply that is not what the exchange expects (an acknowledgement or confirmation).
    UnexpectedReply {
        instrument: String,
        command: String,
        raw: String,
        expected: String,
    },
    /// A setting read back as something else than what was set.
    Readback {
        instrument: String,
        command: String,
        query: String,
        raw: String,
        expected: String,
    },
    /// A reply came later than its deadline and the link could not be brought back in step.
    OutOfSync {
        instrument: String,
        query: String,
        ms: u128,
    },
    Io {
        instrument: String,
        command: String,
        error: LinkError,
    },
    /// The instrument's traffic log cannot be opened.
    TrafficLog {
        instrument: String,
        path: PathBuf,
        error: IoCause,
    },
    /// A command template cannot be rendered for this value.
    Render {
        instrument: String,
        template: String,
        error: TemplateError,
    },
    /// Anything else about one instrument (a missing command, a bench used wrongly).
    Command {
        instrument: String,
        detail: String,
    },
    NoRole {
        role: crate::measure::Role,
    },
    /// A Modbus exchange failed (see `modbus_fault`).
    Modbus {
        instrument: String,
        action: String,
        fault: super::modbus_fault::ModbusFault,
    },
    NoInstrument {
        name: String,
        known: String,
    },
}

/// Whether an error is about the bench file or about talking to the instruments.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BenchErrorKind {
    /// The bench file is wrong or unreadable, or names no such instrument (exit code 2).
    Config,
    /// An instrument or its link failed (exit code 3).
    Instrument,
}

impl BenchError {
    /// Configuration problem or instrument failure.
    pub fn kind(&self) -> BenchErrorKind {
        match self {
            BenchError::Config(_)
            | BenchError::ReadFile { .. }
            | BenchError::NoInstrument { .. } => BenchErrorKind::Config,
            _ => BenchErrorKind::Instrument,
        }
    }

    /// True for errors in the bench file itself (exit code 2), false for instrument failures.
    pub fn is_config(&self) -> bool {
        self.kind() == BenchErrorKind::Config
    }

    /// The instrument concerned, if any.
    pub fn instrument(&self) -> Option<&str> {
        match self {
            BenchError::PortMissing { instrument, .. }
            | BenchError::PermissionDenied { instrument, .. }
            | BenchError::PortBusy { instrument, .. }
            | BenchError::Open { instrument, .. }
            | BenchError::ConnectionRefused { instrument, .. }
            | BenchError::ConnectTimeout { instrument, .. }
            | BenchError::NoReply { instrument, .. }
            | BenchError::Unparseable { instrument, .. }
            | BenchError::Closed { instrument, .. }
            | BenchError::Refused { instrument, .. }
            | BenchError::UnexpectedReply { instrument, .. }
            | BenchError::Readback { instrument, .. }
            | BenchError::OutOfSync { instrument, .. }
            | BenchError::Io { instrument, .. }
            | BenchError::TrafficLog { instrument, .. }
            | BenchError::Render { instrument, .. }
            | BenchError::Command { instrument, .. }
            | BenchError::Modbus { instrument, .. } => Some(instrument),
            _ => None,
        }
    }

    /// The message without the leading `instrument '<name>': ` (the whole message for errors
    /// that concern no single instrument).
    pub fn detail(&self) -> impl fmt::Display + '_ {
        Detail(self)
    }

    /// The error in the runner's terms: the instrument's name (`bench` when none) and this
    /// error, kept whole.
    pub fn into_control(self) -> ControlError {
        let instrument = self.instrument().unwrap_or("bench").to_string();
        ControlError::from_fault(instrument, self)
    }
}

impl From<BenchError> for ControlError {
    fn from(e: BenchError) -> ControlError {
        e.into_control()
    }
}

struct Detail<'a>(&'a BenchError);

impl fmt::Display for Detail<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use BenchError as E;
        match self.0 {
            E::Config(located) => write!(f, "{located}"),
            E::ReadFile { path, error } => {
                write!(f, "cannot read bench file {path}: {error}; check the path")
            }
            E::PortMissing { port, .. } => write!(f, "serial port {port} does not exist; check the cable, the adapter and the port name in the bench file"),
            E::PermissionDenied { port, .. } => write!(f, "permission denied opening {port}; add your user to the group that owns the port (often 'dialout') or check its permissions"),
            E::PortBusy { port, .. } => write!(f, "serial port {port} is busy; close the other program using it (or another regulus run)"),
            E::Open { link, error, .. } => write!(f, "cannot open {link}: {error}"),
            E::ConnectionRefused { addr, .. } => write!(f, "connection refused by {addr}; is the instrument on, on the network, and listening on that port (often 5025)?"),
            E::ConnectTimeout { addr, ms, .. } => write!(f, "no connection to {addr} within {ms} ms; check the address, the network and that the instrument is on"),
            E::NoReply { command, ms, .. } => write!(f, "no reply to '{command}' within {ms} ms; check the cable, baud rate and terminators, and that the instrument knows this command"),
            E::Unparseable { command, raw, pattern, reason, .. } => write!(f, "reply to '{command}' cannot be read: {reason}; raw line {raw:?}, pattern {pattern:?}; check the reply pattern, scale and the instrument's mode"),
            E::Closed { command, .. } => write!(f, "connection closed (while '{command}'); check the cable or network and that the instrument is still on"),
            E::Refused { command, raw, .. } => write!(f, "refused '{command}': it answered {raw:?}; check that the value is within the instrument's range and that it is in the right mode"),
            E::UnexpectedReply { command, raw, expected, .. } => write!(f, "unexpected reply to '{command}': {raw:?}, expected {expected}; check the acknowledge and confirm_reply patterns in the bench file"),
            E::Readback { command, query, raw, expected, .. } => write!(f, "setting '{command}' did not hold: '{query}' read back {raw:?}, expected {expected}; the instrument did not apply it (check its range, mode and the readback settings)"),
            E::OutOfSync { query, ms, .. } => write!(f, "a reply came later than its deadline and the link could not be brought back in step ('{query}' not answered within {ms} ms); check the instrument, and raise reply_timeout_ms if it is slow"),
            E::Io { command, error, .. } => write!(f, "input/output error (while '{command}'): {error}"),
            E::TrafficLog { path, error, .. } => write!(
                f,
                "cannot open traffic log {}: {error}; check the traffic_log path",
                path.display()
            ),
            E::Render { template, error, .. } => write!(f, "command '{template}': {error}"),
            E::Command { detail, .. } => f.write_str(detail),
            E::Modbus { action, fault, .. } => write!(f, "modbus {action}: {fault}"),
            E::NoRole { role } => write!(f, "no instrument on this bench holds role '{role}'; add it to a [[instrument]] roles list"),
            E::NoInstrument { name, known } => write!(f, "no instrument named '{name}' in the bench file; it has: {known}"),
        }
    }
}

impl fmt::Display for BenchError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(instrument) = self.instrument() {
            write!(f, "instrument '{instrument}': ")?;
        }
        write!(f, "{}", self.detail())
    }
}

impl InstrumentFault for BenchError {
    fn fmt_detail(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.detail())
    }
}
