//! The bench in lockstep with slow, lagging, late, acknowledging and failing instruments: the
//! built binary runs plans against the simulated bench with its faults, over real
//! pseudo-terminals and loopback TCP.

mod checks;
mod faults;
mod kill;
mod ports;
