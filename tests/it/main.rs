//! The one integration-test binary: every integration test of regulus, one module per area
//! (a folder per area, a file per former test binary), and the helpers they share under
//! `support`. One process runs them all, so tests that create pseudo-terminals, start the
//! simulated bench, rely on timing or on process-wide state take the locks in
//! `support::lock`; this file only declares the modules.

mod cli;
mod design;
mod e2e;
mod floor;
mod link;
mod lockstep;
mod modbus;
mod report;
mod runner;
mod sim;
mod spice;
mod store;
mod support;
