//! Injected port faults (garbage, dropped and slow replies, closing) as a pure schedule the
//! serving code asks before each reply.

use serde::Serialize;
use std::collections::VecDeque;
use std::time::Instant;

/// Faults injected on one instrument's port.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Default)]
pub struct PortFaults {
    /// Every Nth reply (or streamed line) is preceded by a garbage line.
    pub garbage_every: Option<u32>,
    /// Every Nth reply (or streamed line) is not sent.
    pub drop_every: Option<u32>,
    /// Every reply is delayed by this many extra milliseconds.
    pub slow_ms: u64,
    /// The port closes after this many commands (streaming meter: lines).
    pub close_after: Option<u32>,
    /// The port closes this many seconds after the bench starts.
    pub close_at_s: Option<f64>,
    /// Setting commands are answered `OK` or `ERR <code>,"<text>"`.
    pub acknowledge: bool,
    /// The Nth setting command with a value is refused.
    pub refuse_nth: Option<u32>,
    /// Settings take effect this many milliseconds after they arrive.
    pub lag_ms: u64,
    /// Every Nth reply is sent late.
    pub late_every: Option<u32>,
}

/// What happens to one reply under the injected faults.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fate {
    Send,
    Drop,
    GarbageThenSend,
}

/// A garbage line (no instrument would mean it).
pub const GARBAGE: &str = "~#%&*!@^ ?E+";

/// Counters that turn [`PortFaults`] into a schedule.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FaultSchedule {
    pub faults: PortFaults,
    replies: u32,
    commands: u32,
    settings: u32,
    late: u32,
    /// Settings received but not yet applied (a lagging instrument), oldest first, with the
    /// moment each takes effect.
    pub pending: VecDeque<(Instant, String)>,
}

impl FaultSchedule {
    pub fn new(faults: PortFaults) -> FaultSchedule {
        FaultSchedule {
            faults,
            replies: 0,
            commands: 0,
            settings: 0,
            late: 0,
            pending: VecDeque::new(),
        }
    }

    /// Count one command (or streamed line); true when the port must close after handling it.
    pub fn count_command(&mut self) -> bool {
        self.commands = self.commands.saturating_add(1);
        matches!(self.faults.close_after, Some(n) if self.commands >= n)
    }

    /// Decide the fate of the next reply.
    pub fn next_reply(&mut self) -> Fate {
        self.replies = self.replies.saturating_add(1);
        let hit = |every: Option<u32>, n: u32| matches!(every, Some(e) if e > 0 && n % e == 0);
        if hit(self.faults.drop_every, self.replies) {
            Fate::Drop
        } else if hit(self.faults.garbage_every, self.replies) {
            Fate::GarbageThenSend
        } else {
            Fate::Send
        }
    }

    /// Count one setting command that carries a value; true when it is the one to refuse.
    pub fn refuse_setting(&mut self) -> bool {
        self.settings = self.settings.saturating_add(1);
        matches!(self.faults.refuse_nth, Some(n) if self.settings == n)
    }

    /// Count one reply sent; true when it is to be sent late.
    pub fn reply_late(&mut self) -> bool {
        self.late = self.late.saturating_add(1);
        matches!(self.faults.late_every, Some(n) if n > 0 && self.late % n == 0)
    }

    /// True when the port must close at `elapsed_s` seconds after start.
    pub fn closed_by_time(&self, elapsed_s: f64) -> bool {
        matches!(self.faults.close_at_s, Some(t) if elapsed_s >= t)
    }
}
