//! Test kit (only with `cfg(test)` or the `testkit` feature): helpers shared by the unit
//! tests, the integration tests and the benchmarks. It owns the soft-knee supply curve and
//! the in-memory bench double. It is no part of the tool: nothing outside tests and benches
//! may use it, and a release build of the binary does not contain it. As test support it may
//! use any layer of the library.

mod fake_bench;
mod soft_knee;

pub use fake_bench::{targets, FakeBench, Faults, Foldback};
pub use soft_knee::SoftKnee;
