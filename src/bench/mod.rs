//! The bench: instruments by role, built from a checked bench file, talking over transports.
//! Owns the bench file format ([`config`]), opening links, init and identity queries,
//! concurrent reads (one task per instrument, never two commands in flight on one port) and the
//! safe state. It implements [`crate::control::BenchControl`] for the runner. It must not parse
//! replies itself (that is [`crate::protocol`]) nor know about plans or records.

pub mod config;

pub use config::{
    BenchConfig, CommandSet, FlowControl, InstrumentConfig, LinkConfig, Parity, ReadingStyle,
    SerialSettings, StreamPick, PRESET_NAMES,
};

/// Everything that can go wrong with a bench, phrased as what to check.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BenchError {
    #[error("{file}:{line}:{column}: {message}")]
    Config {
        file: String,
        line: usize,
        column: usize,
        message: String,
    },
    #[error("cannot read bench file {path}: {detail}; check the path")]
    ReadFile { path: String, detail: String },
    #[error("instrument '{instrument}': serial port {port} does not exist; check the cable, the adapter and the port name in the bench file")]
    PortMissing { instrument: String, port: String },
    #[error("instrument '{instrument}': permission denied opening {port}; add your user to the group that owns the port (often 'dialout') or check its permissions")]
    PermissionDenied { instrument: String, port: String },
    #[error("instrument '{instrument}': serial port {port} is busy; close the other program using it (or another regulus run)")]
    PortBusy { instrument: String, port: String },
    #[error("instrument '{instrument}': cannot open {link}: {detail}")]
    Open {
        instrument: String,
        link: String,
        detail: String,
    },
    #[error("instrument '{instrument}': connection refused by {addr}; is the instrument on, on the network, and listening on that port (often 5025)?")]
    ConnectionRefused { instrument: String, addr: String },
    #[error("instrument '{instrument}': no connection to {addr} within {ms} ms; check the address, the network and that the instrument is on")]
    ConnectTimeout {
        instrument: String,
        addr: String,
        ms: u128,
    },
    #[error("instrument '{instrument}': no reply to '{command}' within {ms} ms; check the cable, baud rate and terminators, and that the instrument knows this command")]
    NoReply {
        instrument: String,
        command: String,
        ms: u128,
    },
    #[error("instrument '{instrument}': reply to '{command}' cannot be read: {reason}; raw line {raw:?}, pattern {pattern:?}; check the reply pattern, scale and the instrument's mode")]
    Unparseable {
        instrument: String,
        command: String,
        raw: String,
        pattern: String,
        reason: String,
    },
    #[error("instrument '{instrument}': connection closed (while '{command}'); check the cable or network and that the instrument is still on")]
    Closed { instrument: String, command: String },
    #[error("instrument '{instrument}': input/output error (while '{command}'): {detail}")]
    Io {
        instrument: String,
        command: String,
        detail: String,
    },
    #[error("instrument '{instrument}': {detail}")]
    Command { instrument: String, detail: String },
    #[error(
        "no instrument on this bench holds role '{role}'; add it to a [[instrument]] roles list"
    )]
    NoRole { role: crate::measure::Role },
    #[error("no instrument named '{name}' in the bench file")]
    NoInstrument { name: String },
}

impl BenchError {
    /// True for errors in the bench file itself (exit code 2), false for instrument failures.
    pub fn is_config(&self) -> bool {
        matches!(
            self,
            BenchError::Config { .. }
                | BenchError::ReadFile { .. }
                | BenchError::NoInstrument { .. }
        )
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
            | BenchError::Io { instrument, .. }
            | BenchError::Command { instrument, .. } => Some(instrument),
            _ => None,
        }
    }
}
