//! Judging metrics: against the design's expectation (pass / marginal / fail with margins, and
//! likely causes found by fitting the design's limit model to the measurement), against the
//! unit's own earlier records (drift over dates), and across units of one design (outliers by
//! z-score, Cpk). Pure: values in, verdicts out. This module must not read files or print.
//!
//! The expectation is held in [`DesignExpectation`], a small local view of the design model's
//! bands so the comparison does not depend on how the design is computed; the design module
//! converts into it.
//! This file only declares and re-exports.

mod drift;
mod finished;
pub use drift::*;
pub use finished::{
    compare_with_limits, finished, judge, judge_metrics, missing_metrics, promised_metrics,
    record_verdict, Judgement, Judging, Missing, Promised, RecordFacts,
};
mod bands;
mod expectation;
pub use bands::observations;
pub use expectation::*;
mod design;
pub use design::*;
mod diagnose;
pub use diagnose::{
    diagnose, diagnosis_lines, Diagnosis, Hypothesis, Observations, Observed, FIT_Z,
};
mod units;
pub use units::{choose_records, Candidate, Chosen, LeftOut, Selection};
