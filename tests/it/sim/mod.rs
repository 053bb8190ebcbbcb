//! The simulated bench: its ports, the bench file it writes, and the sim command.

mod bench;
mod cli;
mod ports;
mod run;
