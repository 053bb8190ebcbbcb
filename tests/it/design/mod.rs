//! The design model against published formulas and worked examples.

mod bands;
mod dwell;
mod heating;
mod model;
mod rectifier;
mod stress;
mod validation;
