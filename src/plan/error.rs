//! The plan's error type. Every `PlanError` is a configuration problem (the CLI maps it to
//! exit code 2, "usage or configuration error"): the plan file could not be read, or it says
//! something that cannot be run, located at its file, line and column when the place is known.

use crate::config::Located;

/// A plan file problem. Always a configuration problem: the user fixes the plan file (or its
/// path) and runs again. Located errors name the file, line and column (1-based).
#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    #[error("cannot read plan file {path}: {source}")]
    Read {
        path: String,
        #[source]
        source: std::io::Error,
    },
    /// The plan text is not a valid plan; `file:line:column: message`, or `file: message`
    /// when no single place is to blame.
    #[error(transparent)]
    Invalid(Located),
}

impl PlanError {
    /// Where in the plan file the problem is, when the file was read.
    pub fn location(&self) -> Option<&Located> {
        match self {
            PlanError::Read { .. } => None,
            PlanError::Invalid(l) => Some(l),
        }
    }
}
