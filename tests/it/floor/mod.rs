//! The production floor: station files, `regulus run --station`, the batch loop over stdin
//! against the simulated bench, certificates rendered in headless Chromium and the records
//! index.

mod batch;
mod certificate;
mod compare_index;
mod conventions;
mod index;
mod plots;
mod station;
