//! The one rule that decides a record's overall outcome: PASS, MARGINAL, FAIL, INCOMPLETE or
//! ERROR. A run that did not finish, or that lacks a metric its plan's steps promise, cannot
//! pass; a station failure (instrument, link, disk) is an ERROR, never a verdict on the unit.
//! `run`, `report`, `history` and `compare` all decide through [`judge`] (or its short form
//! [`record_verdict`] when only run.json is known). Pure: no files are read here.

use super::{Comparison, DesignExpectation, MetricLimits, Verdict};
use crate::analysis::Metrics;
use crate::record::{Outcome, RecordState, StepKind};
use serde::{Deserialize, Serialize};

/// True when the run completed and its record was closed: the outcome is `completed` and the
/// record is not still running or cut short. `state` is `None` when only run.json is known.
pub fn finished(outcome: Outcome, state: Option<RecordState>) -> bool {
    outcome == Outcome::Completed
        && !matches!(state, Some(RecordState::Running | RecordState::Incomplete))
}

/// A metric that a plan step promises to measure. Every promised metric is required: a
/// record without it cannot pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Promised {
    /// No-load output voltage (load sweep; also the reference of every curve step's knee).
    OutputVoltage,
    /// Load regulation (load sweep).
    LoadRegulation,
    /// The limit knee (knee search, limit trace).
    LimitCurrent,
    /// Short-circuit current at the start of the dwell (short circuit).
    ShortCircuitCurrent,
    /// The output's return after the short is released (short circuit).
    Recovery,
    /// Line regulation (line sweep).
    LineRegulation,
    /// Output drift over the soak (soak).
    SoakDrift,
}

impl Promised {
    pub fn as_str(self) -> &'static str {
        match self {
            Promised::OutputVoltage => "output_voltage",
            Promised::LoadRegulation => "load_regulation",
            Promised::LimitCurrent => "limit_current",
            Promised::ShortCircuitCurrent => "short_circuit_current",
            Promised::Recovery => "recovery",
            Promised::LineRegulation => "line_regulation",
            Promised::SoakDrift => "soak_drift",
        }
    }

    /// What one kind of step promises.
    pub fn by_step(kind: StepKind) -> &'static [Promised] {
        match kind {
            StepKind::LoadSweep => &[Promised::OutputVoltage, Promised::LoadRegulation],
            StepKind::KneeSearch | StepKind::LimitTrace => {
                &[Promised::OutputVoltage, Promised::LimitCurrent]
            }
            StepKind::ShortCircuit => &[Promised::ShortCircuitCurrent, Promised::Recovery],
            StepKind::LineSweep => &[Promised::LineRegulation],
            StepKind::Soak => &[Promised::SoakDrift],
            // The pre-flight reading only decides whether the plan runs.
            StepKind::Preflight => &[],
        }
    }

    /// Whether the metrics hold this metric.
    pub fn measured(self, m: &Metrics) -> bool {
        match self {
            Promised::OutputVoltage => m.no_load.is_some(),
            Promised::LoadRegulation => m.load_regulation.is_some(),
            Promised::LimitCurrent => m.limit_current().is_some(),
            Promised::ShortCircuitCurrent => m.short_circuit.is_some(),
            Promised::Recovery => m.short_circuit.and_then(|s| s.recovered).is_some(),
            Promised::LineRegulation => m.line_regulation.is_some(),
            Promised::SoakDrift => m.soak.is_some(),
        }
    }
}

/// Every metric promised by a plan made of these steps, each once, in a fixed order.
pub fn promised_metrics(kinds: &[StepKind]) -> Vec<Promised> {
    let mut v: Vec<Promised> = kinds
        .iter()
        .flat_map(|k| Promised::by_step(*k).iter().copied())
        .collect();
    v.sort();
    v.dedup();
    v
}

/// A promised metric the record lacks, with why (from the analysis' notes when it has one).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Missing {
    pub metric: Promised,
    pub why: String,
}

/// The promised metrics that `m` lacks. The analysis' notes say why when they can.
pub fn missing_metrics(m: &Metrics, promised: &[Promised]) -> Vec<Missing> {
    promised
        .iter()
        .filter(|p| !p.measured(m))
        .map(|p| Missing {
            metric: *p,
            why: why_missing(*p, m),
        })
        .collect()
}

fn why_missing(p: Promised, m: &Metrics) -> String {
    let note = |word: &str| m.notes.iter().find(|n| n.contains(word)).cloned();
    let found = match p {
        Promised::OutputVoltage => note("no load-sweep"),
        Promised::LimitCurrent => note("limit was not reached").or_else(|| note("two-segment")),
        Promised::LoadRegulation => note("load regulation").or_else(|| note("full-load")),
        Promised::LineRegulation => note("line"),
        Promised::SoakDrift => note("soak"),
        Promised::ShortCircuitCurrent | Promised::Recovery => note("short"),
    };
    found.unwrap_or_else(|| {
        if m.rows == 0 {
            "the record holds no readings".to_string()
        } else {
            "the step that measures it wrote no usable rows (not run, or stopped)".to_string()
        }
    })
}

/// The overall outcome of a record and every reason that is not a plain pass.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Judgement {
    /// `None` only for a finished record with every promised metric and no design to judge
    /// against (metrics only).
    pub verdict: Option<Verdict>,
    /// Why the outcome is not PASS (empty for PASS): the run's stop reason, the missing
    /// metrics, the failing or marginal checks.
    pub reasons: Vec<String>,
}

/// What the judgement needs to know about a record.
#[derive(Debug, Clone, Copy)]
pub struct RecordFacts<'a> {
    /// The outcome in run.json.
    pub outcome: Outcome,
    /// The record's state, when the folder was looked at (`None`: only run.json is known).
    pub state: Option<RecordState>,
    /// run.json's reason, if any.
    pub reason: Option<&'a str>,
}

/// The one rule. Severity decides: ERROR (the station failed: instrument, link, disk) over
/// FAIL (a judged metric outside its worst case: evidence against the unit, even when the
/// run stopped early) over INCOMPLETE (did not finish, stopped by an interlock or the
/// operator, killed, a promised metric missing, or nothing judged) over MARGINAL over PASS.
/// `missing` comes from [`missing_metrics`]; `comparison` is `None` without a design.
pub fn judge(
    facts: RecordFacts<'_>,
    comparison: Option<&Comparison>,
    missing: &[Missing],
) -> Judgement {
    let mut reasons = Vec::new();
    let mut worst: Option<Verdict> = None;
    let raise = |v: Verdict, worst: &mut Option<Verdict>| {
        *worst = Some(worst.map_or(v, |w| w.max(v)));
    };
    let reason = facts.reason.map(|r| format!(": {r}")).unwrap_or_default();
    match facts.outcome {
        Outcome::Error | Outcome::Failed => {
            raise(Verdict::Error, &mut worst);
            reasons.push(format!("the station failed{reason}"));
        }
        Outcome::Aborted => {
            raise(Verdict::Incomplete, &mut worst);
            reasons.push(format!(
                "the run stopped before the end of the plan{reason}"
            ));
        }
        Outcome::Running => {
            raise(Verdict::Incomplete, &mut worst);
            reasons.push(match facts.state {
                Some(RecordState::Running) => "the run is still going".to_string(),
                _ => "the run never finished (killed or cut short: run.json still says running)"
                    .to_string(),
            });
        }
        Outcome::Completed => {
            if matches!(
                facts.state,
                Some(RecordState::Running | RecordState::Incomplete)
            ) {
                raise(Verdict::Incomplete, &mut worst);
                reasons.push("the record was not closed".to_string());
            }
        }
    }
    for m in missing {
        raise(Verdict::Incomplete, &mut worst);
        reasons.push(format!("{} not measured: {}", m.metric.as_str(), m.why));
    }
    if let Some(c) = comparison {
        if c.checks.is_empty() {
            raise(Verdict::Incomplete, &mut worst);
            reasons.push(if missing.is_empty() {
                "no metric of this record has a limit in the design: nothing was judged".to_string()
            } else {
                "none of the metrics the design limits was measured: nothing was judged".to_string()
            });
        }
        for ch in &c.checks {
            raise(ch.verdict, &mut worst);
            if ch.verdict != Verdict::Pass {
                reasons.push(format!("{} {}", ch.metric, ch.verdict.as_str()));
            }
        }
        if c.joint_fit_names_a_part {
            raise(Verdict::Marginal, &mut worst);
            reasons.push(
                "every check lies inside its band, but the measurements fitted together point \
                 to a wrong part (see the likely cause)"
                    .to_string(),
            );
        }
    }
    Judgement {
        verdict: worst.or(comparison.map(|_| Verdict::Pass)),
        reasons,
    }
}

/// The overall verdict when only run.json (and perhaps the record's state) and the
/// comparison's verdict are known: [`judge`] with no promised metrics to check.
pub fn record_verdict(
    outcome: Outcome,
    state: Option<RecordState>,
    comparison: Option<Verdict>,
) -> Option<Verdict> {
    let facts = RecordFacts {
        outcome,
        state,
        reason: None,
    };
    let mut j = judge(facts, None, &[]);
    if let Some(v) = comparison {
        j.verdict = Some(j.verdict.map_or(v, |w| w.max(v)));
    }
    j.verdict
}

/// What judging a run without its files needs beside its metrics and outcome: the metrics
/// its plan promised, the limits its plan set, and run.json's reason.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Judging {
    pub promised: Vec<Promised>,
    pub limits: MetricLimits,
    pub reason: Option<String>,
}

/// A record's metrics against a design and its plan's limits: the design's checks (with the
/// likely causes) and the plan's limit checks; the comparison's verdict is the worst of them.
/// What [`judge_metrics`] hands the one rule, and what an index keeps per run so the rule can
/// decide again without the metrics.
pub fn compare_with_limits(
    m: &Metrics,
    exp: &DesignExpectation,
    limits: &MetricLimits,
) -> Comparison {
    let mut c = super::compare(m, exp);
    c.checks.extend(super::plan_limit_checks(m, limits));
    c.verdict = c
        .checks
        .iter()
        .map(|ch| ch.verdict)
        .max()
        .unwrap_or(Verdict::Pass);
    c
}

/// A record's metrics judged as its summary judges them: the design's checks and the plan's
/// limit checks (the comparison's verdict is the worst of them), the promised metrics that
/// are missing, and the one rule over all of it with the record's facts. `exp` is `None`
/// when there is no design to judge against. Used by the summary of a record and by
/// everything that re-judges indexed or stored metrics without the record's files, so both
/// decide alike.
pub fn judge_metrics(
    m: &Metrics,
    exp: Option<&DesignExpectation>,
    limits: &MetricLimits,
    promised: &[Promised],
    facts: RecordFacts<'_>,
) -> (Option<Comparison>, Vec<Missing>, Judgement) {
    let comparison = exp.map(|e| compare_with_limits(m, e, limits));
    let missing = missing_metrics(m, promised);
    let judgement = judge(facts, comparison.as_ref(), &missing);
    (comparison, missing, judgement)
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
        // Stopped by an interlock or the operator: incomplete, not failed.
        let state = Some(RecordState::Finished(Outcome::Aborted));
        assert_eq!(
            record_verdict(Outcome::Aborted, state, Some(Verdict::Pass)),
            Some(Verdict::Incomplete)
        );
        assert_eq!(
            record_verdict(Outcome::Aborted, state, None),
            Some(Verdict::Incomplete)
        );
        // ...but a measured failure stays a failure.
        assert_eq!(
            record_verdict(Outcome::Aborted, state, Some(Verdict::Fail)),
            Some(Verdict::Fail)
        );
        // The station failed: an error whatever the metrics say.
        for outcome in [Outcome::Error, Outcome::Failed] {
            let state = Some(RecordState::Finished(outcome));
            for c in [None, Some(Verdict::Pass), Some(Verdict::Fail)] {
                assert_eq!(record_verdict(outcome, state, c), Some(Verdict::Error));
            }
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
                Some(Verdict::Incomplete),
                "{outcome:?} {state:?}"
            );
            assert_eq!(
                record_verdict(outcome, state, None),
                Some(Verdict::Incomplete)
            );
        }
    }

    #[test]
    fn steps_promise_their_metrics() {
        let p = promised_metrics(&[StepKind::KneeSearch, StepKind::LoadSweep]);
        assert_eq!(
            p,
            vec![
                Promised::OutputVoltage,
                Promised::LoadRegulation,
                Promised::LimitCurrent
            ]
        );
        let m = crate::analysis::analyse(&[], &Default::default());
        let missing = missing_metrics(&m, &p);
        assert_eq!(missing.len(), 3);
        assert!(missing.iter().all(|x| !x.why.is_empty()), "{missing:?}");
    }

    #[test]
    fn a_missing_metric_or_nothing_judged_is_incomplete() {
        let facts = RecordFacts {
            outcome: Outcome::Completed,
            state: Some(RecordState::Finished(Outcome::Completed)),
            reason: None,
        };
        let empty = Comparison {
            design_name: "d".into(),
            checks: vec![],
            verdict: Verdict::Pass,
            likely_causes: vec![],
            not_measured: vec![],
            joint_fit_names_a_part: false,
        };
        let j = judge(facts, Some(&empty), &[]);
        assert_eq!(j.verdict, Some(Verdict::Incomplete));
        assert!(j.reasons[0].contains("nothing was judged"), "{j:?}");
        let missing = [Missing {
            metric: Promised::LimitCurrent,
            why: "the limit was not reached".into(),
        }];
        let j = judge(facts, None, &missing);
        assert_eq!(j.verdict, Some(Verdict::Incomplete));
        assert_eq!(
            j.reasons,
            vec!["limit_current not measured: the limit was not reached".to_string()]
        );
        // Finished, nothing missing, no design: metrics only.
        assert_eq!(judge(facts, None, &[]).verdict, None);
    }
}
