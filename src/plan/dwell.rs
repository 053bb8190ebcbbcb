//! A plan's short-circuit dwell against how long the design's pass device survives a short:
//! a step whose `dwell` exceeds the longest dwell the design model gives (the pass junction
//! reaching T_j max through its thermal network, at the corner with the hottest short) is
//! refused before any port opens, located at that `dwell` in the plan file. Pure: the plan,
//! its text and the design's expectation in, a located error out.

use super::error::PlanError;
use super::steps::{Action, Plan};
use crate::config::{self, Located};
use crate::design::Expectation;

/// Refuse a plan whose short-circuit dwell is longer than the design allows. A design without
/// thermal masses (no dwell computed) or whose short settles below T_j max passes.
pub fn check_short_dwell(
    plan: &Plan,
    plan_text: &str,
    plan_label: &str,
    e: &Expectation,
) -> Result<(), PlanError> {
    let Some(dw) = &e.thermal.self_heated.short_dwell_worst else {
        return Ok(());
    };
    let Some(longest) = dw.longest_s else {
        return Ok(());
    };
    for (index, step) in plan.steps.iter().enumerate() {
        let Action::ShortCircuit(s) = &step.action else {
            continue;
        };
        let dwell = s.dwell.as_secs_f64();
        if dwell > longest {
            let (line, column) = match dwell_offset(plan_text, index) {
                Some(off) => {
                    let (l, c) = config::line_col(plan_text, off);
                    (Some(l), Some(c))
                }
                None => (None, None),
            };
            return Err(PlanError::Invalid(Located {
                file: plan_label.to_string(),
                line,
                column,
                message: format!(
                    "step {} (short_circuit): a dwell of {dwell} s is longer than this design survives: its pass junction reaches T_j max ({} degC) after {longest:.1} s of short (the corner with the hottest short, {} degC ambient, from the rated-load steady state); write at most `dwell = \"{}\"`, or give the pass device a larger heatsink",
                    index + 1,
                    dw.limit_c,
                    dw.ambient_c,
                    format_seconds(longest)
                ),
            }));
        }
    }
    Ok(())
}

/// A duration a little below `s`, in the plan's syntax.
fn format_seconds(s: f64) -> String {
    if s >= 10.0 {
        format!("{} s", s.floor())
    } else if s >= 1.0 {
        format!("{:.1} s", (s * 10.0).floor() / 10.0)
    } else {
        format!("{} ms", (s * 1000.0).floor())
    }
}

/// Byte offset of `dwell` (its value) in the `index`-th `[[step]]` table.
fn dwell_offset(text: &str, index: usize) -> Option<usize> {
    let doc = toml_edit::ImDocument::parse(text).ok()?;
    let steps = doc.get("step")?.as_array_of_tables()?;
    let t = steps.get(index)?;
    let (k, v) = t.get_key_value("dwell")?;
    v.span().or_else(|| k.span()).map(|s| s.start)
}
