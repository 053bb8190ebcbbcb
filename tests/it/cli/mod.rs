//! Command-line tests of the built binary that belong to no other area: the demo and the design command.

mod demo;
mod design;
mod ports;
