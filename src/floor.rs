//! The floor result of a record, decided in one place: the one mapping from what a record
//! says (run.json's outcome, the record's state, the verdict against the design) to PASS,
//! MARGINAL, FAIL, INCOMPLETE or ERROR. Everything on the production floor (the batch tally,
//! certificates, the report's banner, the index, the store, the dashboard) decides through
//! [`floor_result`]. A run that did not finish, or was judged against nothing, never reads
//! PASS. Pure.

use crate::compare::{self, Verdict};
use crate::record::{Outcome, RecordState};
use crate::station::FloorResult;

/// The limits a plan's steps set on metrics the design gives no band for, the first of each
/// kind.
pub fn metric_limits(
    steps: impl Iterator<Item = crate::plan::StepLimits>,
) -> compare::MetricLimits {
    let mut l = compare::MetricLimits::default();
    for s in steps {
        l.line_regulation_percent = l.line_regulation_percent.or(s.max_change_percent);
        l.soak_drift_percent = l.soak_drift_percent.or(s.max_drift_percent);
        l.soak_rise_c = l.soak_rise_c.or(s.max_rise_c);
    }
    l
}

/// What a run's plan promised and limited, from its plan snapshot's steps, with run.json's
/// reason: what judging the run's metrics without its files needs.
pub fn judging_of(steps: &[crate::plan::StepOutline], reason: Option<String>) -> compare::Judging {
    let kinds: Vec<_> = steps.iter().map(|o| o.kind).collect();
    compare::Judging {
        promised: compare::promised_metrics(&kinds),
        limits: metric_limits(steps.iter().map(|o| o.limits)),
        reason,
    }
}

/// The floor result of an overall verdict decided by the one rule (`compare::judge`, as
/// summary.json holds it): the five outcomes map one to one; no verdict at all (nothing was
/// judged) is INCOMPLETE, never PASS.
pub fn from_verdict(verdict: Option<Verdict>) -> FloorResult {
    match verdict {
        Some(Verdict::Pass) => FloorResult::Pass,
        Some(Verdict::Marginal) => FloorResult::Marginal,
        Some(Verdict::Fail) => FloorResult::Fail,
        Some(Verdict::Incomplete) | None => FloorResult::Incomplete,
        Some(Verdict::Error) => FloorResult::Error,
    }
}

/// The floor result of a record known only by run.json's outcome, its state and a
/// comparison's verdict (no summary): through `compare::record_verdict`, the same rule.
pub fn floor_result(
    outcome: Outcome,
    state: Option<RecordState>,
    verdict: Option<Verdict>,
) -> FloorResult {
    from_verdict(compare::record_verdict(outcome, state, verdict))
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
