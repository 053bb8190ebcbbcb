//! SPICE netlist export, parsing the simulator's output and the design command's simulator options.

mod cli;
mod netlist;
mod parse;
mod random;
mod simulator;
