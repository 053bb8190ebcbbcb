//! Which records stand for which units when records are judged together: by default each
//! unit's latest finished run (a unit with no finished run is judged on its latest record,
//! which cannot pass), and every record left out is counted with why. Pure.

use serde::Serialize;

/// One record offered for judgement.
#[derive(Debug, Clone, PartialEq)]
pub struct Candidate {
    /// How the record is named to the user (its folder).
    pub record: String,
    pub unit: String,
    /// Run start, RFC 3339 UTC (sorts by time).
    pub started_utc: String,
    /// True when the run completed and its record was closed ([`super::finished`]).
    pub finished: bool,
}

/// How records are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Selection {
    /// Each unit's latest finished run; without one, its latest record.
    LatestFinished,
    /// Every record, each judged on its own (units may count more than once).
    Every,
}

/// A record that was offered but not judged, with why.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LeftOut {
    pub record: String,
    pub unit: String,
    pub why: String,
}

/// The records chosen (indices into the candidates, one per unit unless
/// [`Selection::Every`]) and those left out.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Chosen {
    pub judged: Vec<usize>,
    pub left_out: Vec<LeftOut>,
}

/// Choose the records to judge.
pub fn choose_records(candidates: &[Candidate], selection: Selection) -> Chosen {
    let mut out = Chosen::default();
    if selection == Selection::Every {
        out.judged = (0..candidates.len()).collect();
        return out;
    }
    // Each unit's candidates: the indices sorted by unit (a stable sort keeps each unit's in
    // order), then taken unit by unit in name order.
    let mut order: Vec<usize> = (0..candidates.len()).collect();
    order.sort_by(|&a, &b| candidates[a].unit.cmp(&candidates[b].unit));
    for mine in order.chunk_by(|&a, &b| candidates[a].unit == candidates[b].unit) {
        let Some(&first) = mine.first() else {
            continue;
        };
        let unit = candidates[first].unit.as_str();
        let latest = |pick: &dyn Fn(&Candidate) -> bool| {
            mine.iter()
                .copied()
                .filter(|&i| pick(&candidates[i]))
                .max_by(|&a, &b| {
                    (&candidates[a].started_utc, &candidates[a].record)
                        .cmp(&(&candidates[b].started_utc, &candidates[b].record))
                })
        };
        let (chosen, has_finished) = match latest(&|c| c.finished) {
            Some(i) => (i, true),
            None => match latest(&|_| true) {
                Some(i) => (i, false),
                None => continue,
            },
        };
        out.judged.push(chosen);
        for &i in mine {
            if i == chosen {
                continue;
            }
            let c = &candidates[i];
            let why = if !c.finished && has_finished {
                "did not finish; the unit has a finished run".to_string()
            } else if c.record == candidates[chosen].record {
                "given twice".to_string()
            } else {
                format!(
                    "an earlier run of {unit} (judged: {})",
                    candidates[chosen].record
                )
            };
            out.left_out.push(LeftOut {
                record: c.record.clone(),
                unit: unit.to_string(),
                why,
            });
        }
    }
    out.judged.sort();
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(record: &str, unit: &str, t: &str, finished: bool) -> Candidate {
        Candidate {
            record: record.into(),
            unit: unit.into(),
            started_utc: t.into(),
            finished,
        }
    }

    #[test]
    fn each_unit_counts_once_on_its_latest_finished_run() {
        let cands = vec![
            c("a1", "A", "2026-01-01T00:00:00Z", true),
            c("a2", "A", "2026-01-02T00:00:00Z", true),
            c("a3", "A", "2026-01-03T00:00:00Z", false),
            c("b1", "B", "2026-01-01T00:00:00Z", false),
        ];
        let ch = choose_records(&cands, Selection::LatestFinished);
        // Two units: A on its latest finished run a2, B on its only (unfinished) record.
        assert_eq!(ch.judged, vec![1, 3]);
        assert_eq!(ch.left_out.len(), 2);
        let why = |r: &str| {
            ch.left_out
                .iter()
                .find(|l| l.record == r)
                .unwrap()
                .why
                .clone()
        };
        assert!(why("a1").contains("earlier run"), "{ch:?}");
        assert!(why("a3").contains("did not finish"), "{ch:?}");
        let every = choose_records(&cands, Selection::Every);
        assert_eq!(every.judged, vec![0, 1, 2, 3]);
        assert!(every.left_out.is_empty());
    }
}
