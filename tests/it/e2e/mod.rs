//! End to end on the simulated bench: the built binary runs plans over real pseudo-terminals and loopback TCP.

mod diagnosis;
mod interlocks;
mod knee;
mod run;
mod verdicts;
