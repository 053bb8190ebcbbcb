//! The design model against published formulas and worked examples.

mod model;
mod validation;
