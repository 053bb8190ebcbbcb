//! Simulated instruments, server side of the wire protocol in docs/ARCHITECTURE.md: a query
//! meter, a streaming meter, an electronic load, a programmable source and a thermometer. Each
//! answers one command line with zero or more reply lines, given the unit's true values and the
//! bench settings; noise, resolution and range are applied here. Also the injected port faults
//! (garbage, dropped and slow replies, closing) as a pure schedule. Pure: no ports, no clocks;
//! the serving code in `serve` feeds lines in and writes replies out.

mod channels;
mod faults;
mod kinds;
mod scpi;
#[cfg(test)]
mod tests;

pub use channels::{nr3, stream_line, Noise, OVERRANGE};
pub use faults::{Fate, FaultSchedule, PortFaults, GARBAGE};
pub use kinds::{InstrumentKind, Snapshot, MAKER};
pub use scpi::{parse_number, respond, InstrumentState};
