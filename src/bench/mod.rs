//! The bench: instruments by role, built from a checked bench file, talking over transports.
//! Owns the bench file format ([`config`]), opening links, init and identity queries,
//! concurrent reads (one task per instrument, never two commands in flight on one port) and the
//! safe state. It implements [`crate::control::BenchControl`] for the runner. It must not parse
//! replies itself (that is [`crate::protocol`]) nor know about plans or records.

mod bench_control;
pub mod config;
mod error;
mod instrument;
mod lockstep;
mod modbus;
mod modbus_fault;
mod modbus_identify;
mod open;
mod probe;
mod reading;

pub use crate::transport::IoCause;
pub use bench_control::control_error;
pub use config::{
    BenchConfig, CommandKey, CommandSet, FlowControl, InstrumentConfig, LinkConfig, Lockstep,
    Parity, Readback, ReadingStyle, SerialSettings, StreamPick, TcpSettings, PRESET_NAMES,
};
pub use error::{BenchError, BenchErrorKind};
pub use instrument::{connect, Instrument};
pub use lockstep::SettingCommand;
pub use modbus_fault::ModbusFault;
pub use modbus_identify::{modbus_identify, DeviceObject};
pub use open::Bench;
pub use probe::{probe, write_probe_table, ProbeReport, ProbeRow};
