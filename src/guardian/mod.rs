//! The guardian: a small process (`regulus __guardian`, hidden) started before the first
//! setting of a run, holding duplicates of every instrument link's descriptor: serial ports,
//! TCP sockets, USB-TMC nodes and Modbus links (RTU on a serial line, Modbus TCP) alike. When
//! regulus ends without standing it down (killed, `kill -9` included, or crashed), the pipe
//! from regulus closes and the guardian sends every instrument's safe state at once, then
//! appends a note to the record (`guardian.txt`). A link's safe state comes in one of two
//! kinds ([`GuardPayload`]): text lines (written after a terminator, each with it), or frames
//! written as they are, one write per frame, after a silence: a Modbus RTU ADU with its CRC, a
//! Modbus TCP ADU with its MBAP header, a USB-TMC message. The bench builds them; the
//! guardian does not read replies. Linux and other Unix systems: the pipe closing is the
//! trigger (the kernel closes it on any death). Elsewhere no guardian is started and only
//! regulus's own safe state protects the bench. This module knows descriptors, bytes, lines
//! and files; it must not know about roles, bench files, register maps or plans.

mod child;
mod parent;
mod spec;

pub use child::serve;
pub use parent::{enable, enabled, start, GuardError, Guardian, GUARDIAN_ARG};
pub use spec::{GuardFrame, GuardLink, GuardPayload, GuardSpec, NOTE_FILE};
