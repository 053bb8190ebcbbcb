//! The runner's view of a bench: a small trait that the real bench (instruments over serial
//! and TCP) implements, so the runner's logic never touches a port directly. Implementations
//! must read all meters of one step concurrently and must never have two commands in flight on
//! one port. No I/O lives in this file.

use crate::measure::{LoadMode, Measurement, Role};
use serde::{Deserialize, Serialize};

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

/// A failure talking to one instrument, phrased so the user knows what to check.
#[derive(Debug, Clone, thiserror::Error, PartialEq)]
#[error("instrument '{instrument}': {detail}")]
pub struct ControlError {
    pub instrument: String,
    pub detail: String,
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
}
