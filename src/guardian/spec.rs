//! What a guardian is told: every link's descriptor, its write terminator and the lines that
//! make it safe, in the order to send them (loads first, then sources), and the record folder
//! for its note. Plain data, sent as one JSON line.

use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// The file in the record folder the guardian appends its note to.
pub const NOTE_FILE: &str = "guardian.txt";

/// One instrument link the guardian holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GuardLink {
    /// The instrument's name (for the note).
    pub name: String,
    /// The link's descriptor number, the same in the guardian as in regulus.
    pub fd: i32,
    pub terminator: String,
    /// The safe-state lines, in order.
    pub safe_state: Vec<String>,
}

/// Everything a guardian needs.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct GuardSpec {
    /// The run's record folder, for the note (none: no note).
    pub record: Option<PathBuf>,
    pub links: Vec<GuardLink>,
}
