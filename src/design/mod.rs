//! Design model: the design file, the circuit model, tolerance bands, E-series and sizing.

/// A design file problem, located in the file.
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub struct DesignError(pub String);
