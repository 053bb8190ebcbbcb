//! The one rule that says whether a record finished and what its overall verdict is: a run
//! that did not finish cannot pass. `run`, `report`, `history` and `compare` all decide
//! through [`record_verdict`]. Pure: no files are read here.

use super::Verdict;
use crate::record::{Outcome, RecordState};

/// True when the run completed and its record was closed: the outcome is `completed` and the
/// record is not still running or cut short. `state` is `None` when only run.json is known.
pub fn finished(outcome: Outcome, state: Option<RecordState>) -> bool {
    outcome == Outcome::Completed
        && !matches!(state, Some(RecordState::Running | RecordState::Incomplete))
}

/// The overall verdict of a record: fail for a run that aborted or failed, with or without a
/// comparison; the comparison's verdict for a finished run; for a run still running or cut
/// short, fail when it was judged against a design (it cannot pass) and no verdict when it
/// was not (metrics only); `None` for a finished run judged against no design.
pub fn record_verdict(
    outcome: Outcome,
    state: Option<RecordState>,
    comparison: Option<Verdict>,
) -> Option<Verdict> {
    if matches!(outcome, Outcome::Aborted | Outcome::Failed) {
        Some(Verdict::Fail)
    } else if finished(outcome, state) {
        comparison
    } else {
        comparison.map(|_| Verdict::Fail)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_a_finished_completed_run_keeps_its_comparison() {
        let done = Some(RecordState::Finished(Outcome::Completed));
        assert_eq!(
            record_verdict(Outcome::Completed, done, Some(Verdict::Pass)),
            Some(Verdict::Pass)
        );
        assert_eq!(record_verdict(Outcome::Completed, done, None), None);
        assert_eq!(
            record_verdict(Outcome::Completed, None, Some(Verdict::Marginal)),
            Some(Verdict::Marginal)
        );
        for outcome in [Outcome::Aborted, Outcome::Failed] {
            let state = Some(RecordState::Finished(outcome));
            assert_eq!(
                record_verdict(outcome, state, Some(Verdict::Pass)),
                Some(Verdict::Fail)
            );
            assert_eq!(record_verdict(outcome, state, None), Some(Verdict::Fail));
        }
        for (outcome, state) in [
            (Outcome::Running, Some(RecordState::Running)),
            (Outcome::Running, Some(RecordState::Incomplete)),
            (Outcome::Running, None),
            // run.json says completed but the record state says it was cut short.
            (Outcome::Completed, Some(RecordState::Incomplete)),
        ] {
            assert!(!finished(outcome, state));
            assert_eq!(
                record_verdict(outcome, state, Some(Verdict::Pass)),
                Some(Verdict::Fail),
                "{outcome:?} {state:?}"
            );
            // Judged against no design: metrics only, no verdict.
            assert_eq!(record_verdict(outcome, state, None), None);
        }
    }
}
