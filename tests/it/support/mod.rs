//! Helpers shared by the integration tests: the binary-wide locks, the end-to-end rig, the
//! link responders, the synthetic report records and the SPICE test designs. This file only
//! declares them.

pub mod e2e;
pub mod floor;
pub mod link;
pub mod lock;
pub mod pg;
pub mod report;
pub mod sim;
pub mod spice_designs;
