//! What one unit's test came to on the production floor, in the five words of the outcome
//! contract: PASS, MARGINAL, FAIL, INCOMPLETE (did not finish, or nothing to judge against),
//! ERROR (the station failed, not the unit). Only a measured, finished, judged run reads PASS.
//! The mapping from a record to this result lives in one place, `index::floor_result`.

use serde::{Deserialize, Serialize};

/// The floor result of one unit's run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FloorResult {
    Pass,
    Marginal,
    Fail,
    Incomplete,
    Error,
}

impl FloorResult {
    pub const ALL: [FloorResult; 5] = [
        FloorResult::Pass,
        FloorResult::Marginal,
        FloorResult::Fail,
        FloorResult::Incomplete,
        FloorResult::Error,
    ];

    /// The word as shown to people (upper case).
    pub fn word(self) -> &'static str {
        match self {
            FloorResult::Pass => "PASS",
            FloorResult::Marginal => "MARGINAL",
            FloorResult::Fail => "FAIL",
            FloorResult::Incomplete => "INCOMPLETE",
            FloorResult::Error => "ERROR",
        }
    }

    /// The word as stored (lower case).
    pub fn as_str(self) -> &'static str {
        match self {
            FloorResult::Pass => "pass",
            FloorResult::Marginal => "marginal",
            FloorResult::Fail => "fail",
            FloorResult::Incomplete => "incomplete",
            FloorResult::Error => "error",
        }
    }

    pub fn parse(s: &str) -> Option<FloorResult> {
        FloorResult::ALL.into_iter().find(|r| r.as_str() == s)
    }

    /// The unit was accepted (passed, or passed inside its limits but near one).
    pub fn accepted(self) -> bool {
        matches!(self, FloorResult::Pass | FloorResult::Marginal)
    }

    /// The run says something about the unit (accepted or failed); incomplete and error
    /// runs do not.
    pub fn judged(self) -> bool {
        matches!(
            self,
            FloorResult::Pass | FloorResult::Marginal | FloorResult::Fail
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn words_round_trip() {
        for r in FloorResult::ALL {
            assert_eq!(FloorResult::parse(r.as_str()), Some(r));
            assert_eq!(r.word().to_lowercase(), r.as_str());
        }
        assert_eq!(FloorResult::parse("running"), None);
        assert!(!FloorResult::Incomplete.judged() && !FloorResult::Error.accepted());
    }
}
