//! The bench's links: reply parsing properties, probe, pseudo-terminals and loopback TCP.

mod lockstep;
mod parse_prop;
mod peer;
mod probe_cli;
mod pty;
mod tcp;
mod usbtmc;
