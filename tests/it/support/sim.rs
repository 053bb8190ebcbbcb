//! Starting the in-process simulated bench for tests whose bench runs in this process too
//! (no child process of theirs needs the bench's ports): the bench's pseudo-terminals are
//! marked close-on-exec once it has started, so a child process started meanwhile by another
//! test does not keep them open (a closing-port fault must hang up the bench's side).

use regulus::design::Design;
use regulus::sim::{SimBench, SimError, SimOptions};

/// `SimBench::start`, then its pseudo-terminals made close-on-exec (see `lock::cloexec_ptys`).
pub fn start(design: &Design, opts: SimOptions) -> Result<SimBench, SimError> {
    let sim = SimBench::start(design, opts)?;
    let guard = super::lock::pty();
    super::lock::cloexec_ptys(&guard);
    Ok(sim)
}
