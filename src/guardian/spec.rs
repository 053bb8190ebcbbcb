//! What a guardian is told: every link's descriptor and what makes it safe, in the order to
//! send them (loads first, then sources), and the record folder for its note. A link's safe
//! state is either text lines (written after a terminator, with one) or frames (bytes written
//! as they are, one write each, with a silence between them: Modbus ADUs, USB-TMC messages).
//! Plain data, sent as one JSON line.

use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// The file in the record folder the guardian appends its note to.
pub const NOTE_FILE: &str = "guardian.txt";

/// One frame of a link's safe state: bytes written as they are, in one write.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct GuardFrame {
    /// What the frame does (for the note), e.g. `load_input_off`.
    pub what: String,
    pub bytes: Vec<u8>,
}

/// What the guardian writes to a link to make its instrument safe.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum GuardPayload {
    /// Text lines: the terminator first (ending any line left half-written), then each line
    /// with the terminator.
    Lines {
        terminator: String,
        lines: Vec<String>,
    },
    /// Frames: a silence of `gap_us` microseconds before each frame (a half-written frame
    /// left on a serial line is ended by the silence), then the frame in one write. On a
    /// stream socket (Modbus TCP) silence ends nothing: were regulus killed inside the write
    /// of a frame (a short write, which a socket with room in its send buffer does not make),
    /// the peer would take the guardian's first bytes for the rest of that frame.
    Frames {
        gap_us: u64,
        frames: Vec<GuardFrame>,
    },
}

impl GuardPayload {
    /// True when there is nothing to send.
    pub fn is_empty(&self) -> bool {
        match self {
            GuardPayload::Lines { lines, .. } => lines.is_empty(),
            GuardPayload::Frames { frames, .. } => frames.is_empty(),
        }
    }

    /// What is sent, for the note: the lines, or what each frame does.
    pub fn describe(&self) -> String {
        match self {
            GuardPayload::Lines { lines, .. } => lines.join(" / "),
            GuardPayload::Frames { frames, .. } => frames
                .iter()
                .map(|f| f.what.as_str())
                .collect::<Vec<_>>()
                .join(" / "),
        }
    }
}

/// One instrument link the guardian holds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GuardLink {
    /// The instrument's name (for the note).
    pub name: String,
    /// The link's descriptor number, the same in the guardian as in regulus.
    pub fd: i32,
    /// What makes it safe, in order.
    pub safe_state: GuardPayload,
}

/// Everything a guardian needs.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct GuardSpec {
    /// The run's record folder, for the note (none: no note).
    pub record: Option<PathBuf>,
    pub links: Vec<GuardLink>,
}

#[cfg(test)]
mod tests {
    use super::*;

    // The spec crosses a process boundary as one JSON line (serde_json): both kinds of
    // payload come back as they went.
    #[test]
    fn both_payload_kinds_survive_the_json_line() {
        let spec = GuardSpec {
            record: Some(PathBuf::from("/tmp/rec")),
            links: vec![
                GuardLink {
                    name: "load".into(),
                    fd: 7,
                    safe_state: GuardPayload::Frames {
                        gap_us: 1750,
                        frames: vec![GuardFrame {
                            what: "load_input_off".into(),
                            bytes: vec![0x01, 0x05, 0x00, 0x00, 0x00, 0x00, 0xCD, 0xCA],
                        }],
                    },
                },
                GuardLink {
                    name: "psu".into(),
                    fd: 9,
                    safe_state: GuardPayload::Lines {
                        terminator: "\n".into(),
                        lines: vec!["OUTP OFF".into(), "VOLT 0".into()],
                    },
                },
            ],
        };
        let line = serde_json::to_string(&spec).unwrap();
        assert!(!line.contains('\n'), "{line}");
        let back: GuardSpec = serde_json::from_str(&line).unwrap();
        assert_eq!(back, spec);
        assert_eq!(back.links[0].safe_state.describe(), "load_input_off");
        assert_eq!(back.links[1].safe_state.describe(), "OUTP OFF / VOLT 0");
        assert!(!back.links[1].safe_state.is_empty());
    }
}
