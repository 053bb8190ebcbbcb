//! The guardian: a small process (`regulus __guardian`, hidden) started before the first
//! setting of a run, holding duplicates of every instrument link's descriptor (serial ports
//! and TCP sockets alike). When regulus ends without standing it down (killed, `kill -9`
//! included, or crashed), the pipe from regulus closes and the guardian sends every
//! instrument's safe-state sequence at once, then appends a note to the record
//! (`guardian.txt`). Linux and other Unix systems: the pipe closing is the trigger (the kernel
//! closes it on any death). Elsewhere no guardian is started and only regulus's own safe state
//! protects the bench. This module knows descriptors, lines and files; it must not know
//! about roles, bench files or plans.

mod child;
mod parent;
mod spec;

pub use child::serve;
pub use parent::{enable, enabled, start, GuardError, Guardian, GUARDIAN_ARG};
pub use spec::{GuardFrame, GuardLink, GuardPayload, GuardSpec, NOTE_FILE};
