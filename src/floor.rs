//! The floor result of a record, decided in one place: the one mapping from what a record
//! says (run.json's outcome, the record's state, the verdict against the design) to PASS,
//! MARGINAL, FAIL, INCOMPLETE or ERROR. Everything on the production floor (the batch tally,
//! certificates, the report's banner, the index, the store, the dashboard) decides through
//! [`floor_result`]. A run that did not finish, or was judged against nothing, never reads
//! PASS. Pure.

use crate::compare::{self, Verdict};
use crate::record::{Outcome, RecordState};
use crate::station::FloorResult;

/// The floor result of a record. `verdict` is the comparison's verdict against the design
/// (`None` when there was no design to judge against).
pub fn floor_result(
    outcome: Outcome,
    state: Option<RecordState>,
    verdict: Option<Verdict>,
) -> FloorResult {
    match outcome {
        // The record could not be written: the station failed, not the unit.
        Outcome::Failed => FloorResult::Error,
        // Interlock, operator interrupt, instrument failure: the test did not finish.
        Outcome::Aborted | Outcome::Running => FloorResult::Incomplete,
        Outcome::Completed if !compare::finished(outcome, state) => FloorResult::Incomplete,
        Outcome::Completed => match compare::record_verdict(outcome, state, verdict) {
            Some(Verdict::Pass) => FloorResult::Pass,
            Some(Verdict::Marginal) => FloorResult::Marginal,
            Some(Verdict::Fail) => FloorResult::Fail,
            // Measured but judged against nothing: it cannot read PASS.
            None => FloorResult::Incomplete,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_a_finished_judged_run_passes() {
        let done = Some(RecordState::Finished(Outcome::Completed));
        assert_eq!(
            floor_result(Outcome::Completed, done, Some(Verdict::Pass)),
            FloorResult::Pass
        );
        assert_eq!(
            floor_result(Outcome::Completed, done, Some(Verdict::Marginal)),
            FloorResult::Marginal
        );
        assert_eq!(
            floor_result(Outcome::Completed, done, Some(Verdict::Fail)),
            FloorResult::Fail
        );
        assert_eq!(
            floor_result(Outcome::Completed, done, None),
            FloorResult::Incomplete
        );
        assert_eq!(
            floor_result(
                Outcome::Completed,
                Some(RecordState::Incomplete),
                Some(Verdict::Pass)
            ),
            FloorResult::Incomplete
        );
        assert_eq!(
            floor_result(Outcome::Aborted, None, Some(Verdict::Pass)),
            FloorResult::Incomplete
        );
        assert_eq!(
            floor_result(
                Outcome::Running,
                Some(RecordState::Running),
                Some(Verdict::Pass)
            ),
            FloorResult::Incomplete
        );
        assert_eq!(
            floor_result(Outcome::Failed, None, Some(Verdict::Pass)),
            FloorResult::Error
        );
    }
}
