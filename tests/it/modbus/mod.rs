//! Modbus instruments: a Modbus server that is not ours (tokio-modbus's server side) driven by
//! a bench file alone, and the standard plan against the simulator's Modbus load and source
//! over RTU on pseudo-terminals and over loopback TCP, with its port faults, and `kill -9` of
//! regulus mid-run (the guardian makes the Modbus load and source safe).

mod foreign;
mod kill;
mod sim_plan;
