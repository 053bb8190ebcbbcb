//! What the index keeps per run so `compare --index` can judge it without its metrics: the
//! run's metrics compared with the design it ran with (the design's checks with the likely
//! causes found by the diagnosis, and the plan's limit checks), the promised metrics it lacks,
//! its key values and run.json's reason. Made when the run is indexed, from the record's own
//! design snapshot, and keyed by that snapshot's content hash with the tool version (a new
//! index schema rebuilds them all): a comparison against any other design, or by another
//! version, does not use it and judges from the metrics instead. The one rule
//! (`compare::judge`) still decides at query time from these parts and the run's outcome and
//! state.

use crate::analysis::Metrics;
use crate::compare::{self, Comparison, DesignExpectation, Judging, KeyMetric, KeyValues, Missing};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::collections::HashMap;
use std::path::Path;

/// A run's judgement before the one rule, as the index holds it.
#[derive(Debug, Clone, PartialEq)]
pub struct Prejudged {
    /// The checks against the design and the plan's limits (verdict: the worst of them).
    pub comparison: Comparison,
    /// The promised metrics the run lacks, with why.
    pub missing: Vec<Missing>,
    /// The run's key metric values, as [`KeyValues::from_metrics`] gives them.
    pub values: KeyValues,
    /// run.json's reason, if any.
    pub reason: Option<String>,
}

/// Revision of the judgement's rules and stored form; raised whenever either changes, so a
/// judgement made by an earlier build of the same version is made again, not reused.
/// Revision 2: bench readings judged by the as-built bands, the operating envelope beside;
/// a record whose checks pass is marginal when the joint fit names a wrong part.
/// Revision 3: the case reading and dissipation at the knee come from the row nearest the knee
/// point in V and I, not the nearest in current alone (which could be deep in the limit).
pub const JUDGEMENT_REVISION: u32 = 3;

/// The key under which a judgement made against the design with content hash `sha256` is
/// stored: the hash, the tool version and the judgement's revision. (An index of another
/// schema is dropped and made again from the folders, its judgements with it.)
pub fn prejudged_key(sha256: &str) -> String {
    format!(
        "{sha256} regulus {} judgement {JUDGEMENT_REVISION}",
        env!("CARGO_PKG_VERSION")
    )
}

/// The stored form: every field written (the JSON form of a check skips an empty note, which
/// a compact encoding cannot).
#[derive(Serialize, Deserialize)]
struct Stored {
    design_name: String,
    checks: Vec<StoredCheck>,
    verdict: compare::Verdict,
    likely_causes: Vec<String>,
    not_measured: Vec<String>,
    joint_fit_names_a_part: bool,
    missing: Vec<Missing>,
    /// In [`KeyMetric::ALL`] order.
    values: Vec<Option<f64>>,
    reason: Option<String>,
}

#[derive(Serialize, Deserialize)]
struct StoredCheck {
    metric: String,
    unit: String,
    measured: f64,
    nominal: f64,
    worst_case: compare::Limits,
    monte_carlo_band: compare::Limits,
    verdict: compare::Verdict,
    margin: f64,
    margin_percent: f64,
    deviation_percent: f64,
    note: Option<String>,
    band_basis: Option<String>,
    envelope: Option<compare::Limits>,
}

impl Prejudged {
    /// Compare metrics with a design and the plan's limits as the one rule's inputs.
    pub fn make(m: &Metrics, exp: &DesignExpectation, judging: &Judging) -> Prejudged {
        Prejudged {
            comparison: compare::compare_with_limits(m, exp, &judging.limits),
            missing: compare::missing_metrics(m, &judging.promised),
            values: KeyValues::from_metrics(m),
            reason: judging.reason.clone(),
        }
    }

    /// The compact stored form (postcard).
    pub fn encode(&self) -> Option<Vec<u8>> {
        let c = &self.comparison;
        let stored = Stored {
            design_name: c.design_name.clone(),
            checks: c
                .checks
                .iter()
                .map(|k| StoredCheck {
                    metric: k.metric.clone(),
                    unit: k.unit.clone(),
                    measured: k.measured,
                    nominal: k.nominal,
                    worst_case: k.worst_case,
                    monte_carlo_band: k.monte_carlo_band,
                    verdict: k.verdict,
                    margin: k.margin,
                    margin_percent: k.margin_percent,
                    deviation_percent: k.deviation_percent,
                    note: k.note.clone(),
                    band_basis: k.band_basis.clone(),
                    envelope: k.envelope,
                })
                .collect(),
            verdict: c.verdict,
            likely_causes: c.likely_causes.clone(),
            not_measured: c.not_measured.clone(),
            joint_fit_names_a_part: c.joint_fit_names_a_part,
            missing: self.missing.clone(),
            values: KeyMetric::ALL.iter().map(|k| self.values.get(*k)).collect(),
            reason: self.reason.clone(),
        };
        postcard::to_allocvec(&stored).ok()
    }

    /// Read the stored form back; `None` for bytes that do not decode.
    pub fn decode(bytes: &[u8]) -> Option<Prejudged> {
        let s: Stored = postcard::from_bytes(bytes).ok()?;
        if s.values.len() != KeyMetric::ALL.len() {
            return None;
        }
        Some(Prejudged {
            comparison: Comparison {
                design_name: s.design_name,
                checks: s
                    .checks
                    .into_iter()
                    .map(|k| compare::Check {
                        metric: k.metric,
                        unit: k.unit,
                        measured: k.measured,
                        nominal: k.nominal,
                        worst_case: k.worst_case,
                        monte_carlo_band: k.monte_carlo_band,
                        verdict: k.verdict,
                        margin: k.margin,
                        margin_percent: k.margin_percent,
                        deviation_percent: k.deviation_percent,
                        note: k.note,
                        band_basis: k.band_basis,
                        envelope: k.envelope,
                    })
                    .collect(),
                verdict: s.verdict,
                likely_causes: s.likely_causes,
                not_measured: s.not_measured,
                joint_fit_names_a_part: s.joint_fit_names_a_part,
            },
            missing: s.missing,
            values: KeyValues(KeyMetric::ALL.iter().copied().zip(s.values).collect()),
            reason: s.reason,
        })
    }
}

/// The expectations of the designs met while indexing, by content hash (one model
/// evaluation per design, not per record). A snapshot that does not read or validate has none.
#[derive(Default)]
pub(super) struct Expectations {
    by_sha: HashMap<String, Option<DesignExpectation>>,
}

impl Expectations {
    /// The content hash of a record's design snapshot and the expectation of that design.
    pub(super) fn of_record(&mut self, dir: &Path) -> Option<(String, &DesignExpectation)> {
        let path = dir.join(crate::record::DESIGN_SNAPSHOT);
        let bytes = std::fs::read(&path).ok()?;
        let sha = format!("{:x}", Sha256::digest(&bytes));
        let exp = self.by_sha.entry(sha.clone()).or_insert_with(|| {
            let text = std::str::from_utf8(&bytes).ok()?;
            let d = crate::design::Design::parse(text, &path.display().to_string()).ok()?;
            let e = crate::design::expect(&d);
            Some(DesignExpectation::from_design(&d, &e))
        });
        Some((sha, exp.as_ref()?))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::compare::{Check, Limits, Promised, Verdict};

    fn check(metric: &str, note: Option<&str>) -> Check {
        Check {
            metric: metric.into(),
            unit: "V".into(),
            measured: 20.41,
            nominal: 20.0,
            worst_case: Limits {
                min: 19.2,
                max: 20.8,
            },
            monte_carlo_band: Limits {
                min: 19.6,
                max: 20.4,
            },
            verdict: Verdict::Marginal,
            margin: 0.39,
            margin_percent: 1.95,
            deviation_percent: 2.05,
            note: note.map(String::from),
            band_basis: Some("as built: part tolerances at 25 degC and the nominal input".into()),
            envelope: Some(Limits {
                min: 19.0,
                max: 21.0,
            }),
        }
    }

    #[test]
    fn the_stored_form_reads_back_as_made() {
        let p = Prejudged {
            comparison: Comparison {
                design_name: "lab".into(),
                // A check without a note beside one with: the stored form keeps both.
                checks: vec![
                    check("output_voltage", None),
                    check("limit_current", Some("n")),
                ],
                verdict: Verdict::Marginal,
                likely_causes: vec!["a 0.68 ohm sense resistor".into()],
                not_measured: vec!["short_circuit_current".into()],
                joint_fit_names_a_part: true,
            },
            missing: vec![Missing {
                metric: Promised::LineRegulation,
                why: "no line sweep".into(),
            }],
            values: KeyValues(
                KeyMetric::ALL
                    .iter()
                    .zip([
                        Some(20.41),
                        None,
                        Some(f64::MIN_POSITIVE),
                        None,
                        Some(-0.0),
                        None,
                    ])
                    .map(|(k, v)| (*k, v))
                    .collect(),
            ),
            reason: Some("operator".into()),
        };
        let bytes = p.encode().expect("encodes");
        assert_eq!(Prejudged::decode(&bytes), Some(p));
        // Bytes that are not a stored judgement are refused, never misread.
        assert_eq!(Prejudged::decode(&bytes[..bytes.len() / 2]), None);
        assert_eq!(Prejudged::decode(b""), None);
    }

    #[test]
    fn the_key_names_the_design_and_the_version() {
        let a = prejudged_key("ab12");
        assert!(a.starts_with("ab12 "), "{a}");
        assert!(a.contains(env!("CARGO_PKG_VERSION")), "{a}");
        assert_ne!(a, prejudged_key("ab13"));
    }
}
