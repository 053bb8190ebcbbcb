//! Modbus instruments: a Modbus server that is not ours (tokio-modbus's server side) driven by
//! a bench file alone, and the standard plan against the simulator's Modbus load and source
//! over RTU on pseudo-terminals and over loopback TCP, with its port faults.

mod foreign;
mod sim_plan;
