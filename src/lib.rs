//! regulus: design, characterize and track linear regulated DC power supplies.
//!
//! The library holds all logic; `src/main.rs` only parses arguments and dispatches to `cli`.
//! Pure modules (design, protocol parsing, plan expansion, analysis, comparison) do no I/O;
//! transports, instruments, the runner and the record writer sit at the edges.

pub mod analysis;
pub mod bench;
pub mod capability;
pub mod cli;
pub mod compare;
pub mod config;
pub mod control;
pub mod design;
pub mod floor;
pub mod guardian;
pub mod index;
pub mod measure;
pub mod par;
pub mod pipeline;
pub mod plan;
pub mod protocol;
pub mod quantity;
pub mod record;
pub mod report;
pub mod rng;
pub mod runner;
pub mod sim;
pub mod spice;
pub mod station;
pub mod store;
#[cfg(any(test, feature = "testkit"))]
pub mod testkit;
pub mod transport;

#[cfg(test)]
mod layers;
