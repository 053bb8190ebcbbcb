//! The simulated bench: an as-built unit drawn from a design ([`mod@unit`]) and simulated
//! instruments that speak the project's wire protocol ([`instruments`]) on pseudo-terminals and
//! loopback TCP ([`serve`]). It is a product feature for learning and rehearsing, and the ground
//! the end-to-end tests run on. [`SimBench`] starts everything and writes a bench file for its
//! ports; it must not parse bench files or drive a test plan itself.

mod bench;
mod bench_file;
pub mod instruments;
mod modbus;
pub mod modbus_map;
mod options;
mod ports;
pub mod serve;
pub mod unit;

pub use bench::{SimBench, PTY_PAIR_LOCK};
pub use bench_file::bench_toml;
pub use options::{Fault, PortFault, SimError, SimOptions, TransportMix};
pub use ports::{Link, PortInfo, PortProtocol};
pub use unit::{
    Controls, HeatInUse, HeatModel, KneeModel, OperatingPoint, SimUnit, Thermal, Truth, UnitFault,
    UnitModel,
};
