//! The runner's view of a bench: a small trait that the real bench (instruments over serial
//! and TCP) implements, so the runner's logic never touches a port directly. Implementations
//! must read all meters of one step concurrently and must never have two commands in flight on
//! one port. No I/O lives in this file.

use crate::measure::{LoadMode, Measurement, Role};
use serde::{Deserialize, Serialize};
use std::fmt;
use std::sync::Arc;

/// Who an instrument said it is (the reply to its identity query, when configured).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InstrumentIdentity {
    /// The instrument's name in the bench file.
    pub name: String,
    pub roles: Vec<Role>,
    /// Transport description, e.g. `serial /dev/pts/4 @ 9600` or `tcp 127.0.0.1:5025`.
    pub link: String,
    /// Raw identity reply (for SCPI: maker, model, serial, firmware), if queried.
    pub identity: Option<String>,
}

/// A bench's own error behind a [`ControlError`]: its message without the instrument name
/// (which the control error shows once), and the error itself for its kind.
pub trait InstrumentFault: std::error::Error + Send + Sync + 'static {
    /// The message without the leading `instrument '<name>': `.
    fn fmt_detail(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result;
}

/// What went wrong, as the bench reported it.
#[derive(Debug, Clone)]
enum Detail {
    /// Plain text (a bench without a typed error of its own).
    Text(String),
    /// The bench's typed error, kept whole.
    Fault(Arc<dyn InstrumentFault>),
}

impl fmt::Display for Detail {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Detail::Text(t) => f.write_str(t),
            Detail::Fault(e) => e.fmt_detail(f),
        }
    }
}

/// A failure talking to one instrument, phrased so the user knows what to check. It keeps
/// the bench's own error ([`ControlError::fault`]); its message names the instrument once.
#[derive(Debug, Clone, thiserror::Error)]
#[error("instrument '{instrument}': {detail}")]
pub struct ControlError {
    pub instrument: String,
    detail: Detail,
}

impl ControlError {
    /// A failure described in plain text.
    pub fn new(instrument: impl Into<String>, detail: impl Into<String>) -> ControlError {
        ControlError {
            instrument: instrument.into(),
            detail: Detail::Text(detail.into()),
        }
    }

    /// A failure carrying the bench's own error.
    pub fn from_fault(instrument: impl Into<String>, fault: impl InstrumentFault) -> ControlError {
        ControlError {
            instrument: instrument.into(),
            detail: Detail::Fault(Arc::new(fault)),
        }
    }

    /// What went wrong, without the instrument name.
    pub fn detail(&self) -> String {
        self.detail.to_string()
    }

    /// The bench's own error, when it gave one (downcast it to the bench's error type).
    pub fn fault(&self) -> Option<&(dyn std::error::Error + Send + Sync + 'static)> {
        match &self.detail {
            Detail::Text(_) => None,
            Detail::Fault(e) => Some(&**e as &(dyn std::error::Error + Send + Sync + 'static)),
        }
    }
}

/// Two control errors are equal when they name the same instrument and read the same.
impl PartialEq for ControlError {
    fn eq(&self, other: &ControlError) -> bool {
        self.instrument == other.instrument && self.detail() == other.detail()
    }
}

/// What the runner needs from a bench. Every method that talks to an instrument is async.
#[allow(async_fn_in_trait)]
pub trait BenchControl {
    /// True when some instrument on this bench holds `role`.
    fn has_role(&self, role: Role) -> bool;
    /// Identities of all instruments (queried when the bench was opened).
    fn identities(&self) -> Vec<InstrumentIdentity>;
    /// Set the electronic load's mode and setpoint (A, V or ohm by mode).
    async fn set_load(&mut self, mode: LoadMode, value: f64) -> Result<(), ControlError>;
    /// Switch the electronic load's input on or off.
    async fn set_load_input(&mut self, on: bool) -> Result<(), ControlError>;
    /// Set the programmable input source's voltage.
    async fn set_source_voltage(&mut self, volts: f64) -> Result<(), ControlError>;
    /// Switch the programmable input source's output on or off.
    async fn set_source_output(&mut self, on: bool) -> Result<(), ControlError>;
    /// Read every measuring role once, all instruments concurrently.
    async fn measure(&mut self) -> Result<Measurement, ControlError>;
    /// Run every instrument's safe-state sequence (load first, then the source), continuing
    /// past failures; returns the failures.
    async fn safe_state(&mut self) -> Vec<ControlError>;
    /// Arm (`true`, before a stressful step) or disarm the instruments' own limits. A bench
    /// without any does nothing.
    async fn limits(&mut self, _arm: bool) -> Result<(), ControlError> {
        Ok(())
    }
    /// Before the first setting of a run recorded in `record`: start whatever keeps the bench
    /// safe if this process dies (the real bench's guardian process). Default: nothing.
    fn guard(&mut self, _record: &std::path::Path) -> Result<(), ControlError> {
        Ok(())
    }
    /// The run ended with its own safe state: stand the guardian down. Default: nothing.
    fn stand_down(&mut self) {}
    /// How many exchanges were retried (or links resynchronised) since the last call; the
    /// runner flags the rows taken after one.
    fn take_retries(&mut self) -> u32 {
        0
    }
}
