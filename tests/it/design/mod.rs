//! The design model against published formulas and worked examples.

mod heating;
mod model;
mod validation;
