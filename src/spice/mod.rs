//! Cross-check of a design against a general-purpose circuit simulator (ngspice): SPICE
//! netlist export ([`netlist`]), running the simulator in batch mode behind the small
//! [`Simulator`] trait, and the simulated V-I curve with its knee, short-circuit current and the
//! comparison with the design model ([`curve`]). Netlist generation and output parsing are
//! pure; only [`Ngspice`] starts a process and only [`read_curve_csv`] reads a file. This module
//! must not change the design model or its verdicts: it reports beside them.
//! This file only declares and re-exports.

pub mod curve;
pub mod netlist;
pub use curve::{
    compare, curve_from_print, diff_pct, parse_curve_csv, parse_print_output, read_curve_csv,
    render_comparison, summarize, write_curve_csv, CompareRow, CurveSummary, CSV_HEADER, KNEE_DROP,
};
pub use netlist::{
    build, departures, Departure, JunctionMatch, ModelMode, Netlist, NetlistOptions, NetlistPoint,
};
mod run;
pub use run::*;
