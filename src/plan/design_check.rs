//! A plan checked against the design's worst case before any port opens: interlock defaults
//! derived from the worst case (a unit inside its tolerances never trips them), and steps
//! refused, at the value to fix, when they must exceed an interlock or set a constant-current
//! load above the design's lowest worst-case limit (a CC load above the limit fights a
//! current source, and a foldback unit can latch at 0 V). A step with `beyond_design = "why"`
//! is let through, and says so. Pure.

use super::error::PlanError;
use super::fields::Cx;
use super::raw::RawPlan;
use super::steps::{Action, Plan, Step};
use super::targets::DesignTargets;
use crate::measure::LoadMode;
use crate::quantity::eng;
use std::ops::Range;

/// Margin of the default interlocks over the design's worst case (10 %: common practice,
/// room for meter error without letting a unit far outside its tolerances run on).
pub const INTERLOCK_MARGIN: f64 = 1.10;

/// The design's worst-case bounds a plan is checked against.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DesignBounds {
    /// Worst-case output voltage range (V).
    pub vout_min_v: f64,
    pub vout_max_v: f64,
    /// Worst-case limit (knee) current range (A).
    pub limit_min_a: f64,
    pub limit_max_a: f64,
    /// Lowest worst-case current on the limit line (A): the short-circuit current for a
    /// foldback clamp, the limit otherwise.
    pub limit_line_min_a: f64,
}

impl DesignBounds {
    /// The bounds of a design's computed expectation.
    pub fn from_design(e: &crate::design::Expectation) -> DesignBounds {
        let vout = e.vout.setting_band.worst_case;
        let lim = e.limit_current.worst_case;
        let sc = e.short_circuit_current.worst_case;
        DesignBounds {
            vout_min_v: vout.min,
            vout_max_v: vout.max,
            limit_min_a: lim.min,
            limit_max_a: lim.max,
            limit_line_min_a: sc.min.min(lim.min),
        }
    }

    /// Default highest output voltage: the worst-case output plus the margin.
    pub fn default_max_output_voltage(&self) -> f64 {
        INTERLOCK_MARGIN * self.vout_max_v
    }

    /// Default highest load power: the worst-case output at the worst-case highest limit,
    /// plus the margin (the most an in-tolerance unit can deliver).
    pub fn default_max_load_power(&self) -> f64 {
        INTERLOCK_MARGIN * self.vout_max_v * self.limit_max_a
    }
}

impl Plan {
    /// [`Plan::parse`], then checked against the design's worst case: interlocks the plan
    /// leaves out default to the design's worst case plus [`INTERLOCK_MARGIN`] (or the
    /// parse's default when higher); a step is refused, located at the value to fix, when an
    /// in-tolerance unit would trip an interlock during it or when it sets a constant-current
    /// load above the design's lowest worst-case limit, unless it carries `beyond_design`.
    pub fn parse_for_design(
        text: &str,
        file: &str,
        targets: &DesignTargets,
        bounds: &DesignBounds,
    ) -> Result<Plan, PlanError> {
        let mut plan = Plan::parse(text, file, targets)?;
        let cx = Cx::new(text, file, targets);
        let raw: RawPlan = toml::from_str(text)
            .map_err(|e| PlanError::Invalid(crate::config::from_toml(file, text, &e)))?;
        let given_v = raw
            .interlocks
            .as_ref()
            .and_then(|i| i.max_output_voltage.as_ref());
        let given_p = raw
            .interlocks
            .as_ref()
            .and_then(|i| i.max_load_power.as_ref());
        let il = &mut plan.interlocks;
        if given_v.is_none() {
            il.max_output_voltage_v = il
                .max_output_voltage_v
                .max(bounds.default_max_output_voltage());
        }
        if given_p.is_none() {
            il.max_load_power_w = il.max_load_power_w.max(bounds.default_max_load_power());
        }
        let il = plan.interlocks;
        for (k, step) in plan.steps.iter().enumerate() {
            if step.beyond_design.is_some() {
                continue;
            }
            let rs = raw.step.get(k).map(|s| s.get_ref());
            let step_span = raw.step.get(k).map(|s| s.span()).unwrap_or(0..0);
            let span_of = |field: &str| -> Range<usize> {
                let f = rs.and_then(|s| match field {
                    "to" => s.to.as_ref().map(|v| v.span()),
                    "load" => s.load.as_ref().map(|v| v.span()),
                    "from" => s.from.as_ref().map(|v| v.span()),
                    _ => None,
                });
                f.unwrap_or_else(|| step_span.clone())
            };
            let hint = "or add `beyond_design = \"<why>\"` to the step to run it anyway";
            if let Some(v) = given_v.filter(|_| il.max_output_voltage_v < bounds.vout_max_v) {
                return Err(cx.at(
                    v.span(),
                    format!(
                        "max_output_voltage {} is below the design's worst-case output {}: a \
                         unit inside its tolerances trips it in step {} ('{}'); raise it, {hint}",
                        eng(il.max_output_voltage_v, "V"),
                        eng(bounds.vout_max_v, "V"),
                        k + 1,
                        step.label
                    ),
                ));
            }
            let (field, cc) = cc_load(step);
            if let Some(i) = cc {
                if i > bounds.limit_min_a {
                    return Err(cx.at(
                        span_of(field),
                        format!(
                            "step {} ('{}') sets a constant-current load of {}, above the \
                             design's lowest worst-case limit {}: a unit inside its \
                             tolerances cannot deliver it (the output collapses, a foldback \
                             unit may latch at 0 V); stay at or below {}, trace the limit in \
                             cv or cr mode, {hint}",
                            k + 1,
                            step.label,
                            eng(i, "A"),
                            eng(bounds.limit_min_a, "A"),
                            eng(bounds.limit_min_a, "A"),
                        ),
                    ));
                }
                let p = bounds.vout_min_v * i;
                if p > il.max_load_power_w {
                    return Err(self_power(
                        &cx,
                        given_p.map(|v| v.span()),
                        span_of(field),
                        k,
                        step,
                        i,
                        p,
                        il.max_load_power_w,
                        hint,
                    ));
                }
            }
            if let Action::Sweep {
                mode: LoadMode::ConstantVoltage,
                setpoints,
            } = &step.action
            {
                let v = setpoints.iter().copied().fold(0.0, f64::max);
                let p = v * bounds.limit_line_min_a;
                if p > il.max_load_power_w {
                    return Err(self_power(
                        &cx,
                        given_p.map(|v| v.span()),
                        span_of("from"),
                        k,
                        step,
                        bounds.limit_line_min_a,
                        p,
                        il.max_load_power_w,
                        hint,
                    ));
                }
            }
            if let Action::KneeSearch(_) = &step.action {
                let p = bounds.vout_min_v * bounds.limit_min_a;
                if p > il.max_load_power_w {
                    return Err(self_power(
                        &cx,
                        given_p.map(|v| v.span()),
                        step_span.clone(),
                        k,
                        step,
                        bounds.limit_min_a,
                        p,
                        il.max_load_power_w,
                        hint,
                    ));
                }
            }
        }
        Ok(plan)
    }

    /// The steps that carry `beyond_design`, as lines for people.
    pub fn beyond_design_notes(&self) -> Vec<String> {
        self.steps
            .iter()
            .enumerate()
            .filter_map(|(k, s)| {
                s.beyond_design.as_ref().map(|why| {
                    format!(
                        "step {} ('{}') runs beyond the design: {why}",
                        k + 1,
                        s.label
                    )
                })
            })
            .collect()
    }
}

/// A step that must exceed the load-power interlock, located at the interlock when the plan
/// sets it (the value to fix), else at the step.
#[allow(clippy::too_many_arguments)]
fn self_power(
    cx: &Cx<'_>,
    interlock: Option<Range<usize>>,
    step_span: Range<usize>,
    k: usize,
    step: &Step,
    current: f64,
    power: f64,
    limit: f64,
    hint: &str,
) -> PlanError {
    cx.at(
        interlock.unwrap_or(step_span),
        format!(
            "step {} ('{}') must exceed max_load_power {}: at {} a unit inside its \
             tolerances delivers at least {}; raise max_load_power, lower the step, {hint}",
            k + 1,
            step.label,
            eng(limit, "W"),
            eng(current, "A"),
            eng(power, "W"),
        ),
    )
}

/// The highest constant-current load a step sets, with the field that sets it.
fn cc_load(step: &Step) -> (&'static str, Option<f64>) {
    match &step.action {
        Action::Sweep {
            mode: LoadMode::ConstantCurrent,
            setpoints,
        } => ("to", setpoints.iter().copied().reduce(f64::max)),
        Action::LineSweep { load, .. } | Action::Soak { load, .. }
            if load.mode == LoadMode::ConstantCurrent =>
        {
            ("load", Some(load.value))
        }
        _ => ("to", None),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(name: &str) -> (DesignTargets, DesignBounds) {
        let text = match name {
            "lab" => include_str!("../../samples/teaching-lab-0-20v.toml"),
            _ => include_str!("../../samples/fixed-12v-3a-foldback.toml"),
        };
        let d = crate::design::Design::parse(text, name).unwrap();
        let e = crate::design::expect_with(&d, 2000, 1);
        (
            DesignTargets::from_design(&d, &e),
            DesignBounds::from_design(&e),
        )
    }

    fn parse(name: &str, text: &str) -> Result<Plan, PlanError> {
        let (t, b) = sample(name);
        Plan::parse_for_design(text, "p.toml", &t, &b)
    }

    fn err(name: &str, text: &str) -> crate::config::Located {
        match parse(name, text) {
            Ok(_) => panic!("accepted: {text}"),
            Err(PlanError::Invalid(l)) => l,
            Err(e) => panic!("{e}"),
        }
    }

    #[test]
    fn default_interlocks_cover_the_worst_case() {
        // The teaching-lab sample: worst-case output up to about 21.1 V and limit up to about
        // 2.21 A (its design report), so an in-tolerance unit may deliver 21.1 V x 2.21 A =
        // 46.7 W at the knee; the default must lie above that (the old 1.25 x V x nominal
        // limit gave 42.5 W).
        let (_, b) = sample("lab");
        let p = parse("lab", "name = \"k\"\n[[step]]\nkind = \"knee_search\"\n").unwrap();
        let worst = b.vout_max_v * b.limit_max_a;
        assert!(worst > 45.0, "{worst}");
        assert!(p.interlocks.max_load_power_w >= worst, "{:?}", p.interlocks);
        assert!(p.interlocks.max_output_voltage_v >= b.vout_max_v);
    }

    #[test]
    fn an_interlock_below_the_worst_case_output_is_refused_at_its_place() {
        let l = err(
            "fx",
            "name = \"v\"\n[interlocks]\nmax_output_voltage = \"11 V\"\n[[step]]\n\
             kind = \"knee_search\"\n",
        );
        assert_eq!((l.line, l.column), (Some(3), Some(22)), "{l}");
        assert!(
            l.message.contains("below the design's worst-case output"),
            "{l}"
        );
    }

    #[test]
    fn a_step_that_must_exceed_the_power_interlock_is_refused() {
        // 3 A into a 12 V output is about 35 W, far above 10 W.
        let l = err(
            "fx",
            "name = \"p\"\n[interlocks]\nmax_load_power = \"10 W\"\n[[step]]\n\
             kind = \"load_sweep\"\nfrom = \"0 A\"\nto = \"3 A\"\npoints = 4\n",
        );
        assert_eq!(l.line, Some(3), "{l}");
        assert!(l.message.contains("must exceed max_load_power"), "{l}");
    }

    #[test]
    fn a_cc_load_above_the_lowest_worst_case_limit_is_refused_unless_the_step_says_why() {
        let text = "name = \"cc\"\n[[step]]\nkind = \"load_sweep\"\nfrom = \"0 A\"\n\
                    to = \"200 % of limit\"\npoints = 5\n";
        let l = err("fx", text);
        assert_eq!((l.line, l.column), (Some(5), Some(6)), "{l}");
        assert!(l.message.contains("lowest worst-case limit"), "{l}");
        assert!(l.message.contains("beyond_design"), "{l}");
        let why = text.replace(
            "points = 5\n",
            "points = 5\nbeyond_design = \"latch-up check on a reworked unit\"\n",
        );
        let p = parse("fx", &why).unwrap();
        assert_eq!(
            p.beyond_design_notes(),
            vec![
                "step 1 ('1 load_sweep') runs beyond the design: latch-up check on a reworked \
                  unit"
                    .to_string()
            ]
        );
        // An empty reason is no reason.
        let l = err(
            "fx",
            &text.replace("points = 5\n", "points = 5\nbeyond_design = \" \"\n"),
        );
        assert!(l.message.contains("must say why"), "{l}");
        // Soak and line-sweep loads are constant-current too.
        let l = err(
            "lab",
            "name = \"s\"\n[[step]]\nkind = \"soak\"\nload = \"limit\"\nduration = \"2 s\"\n\
             interval = \"1 s\"\n",
        );
        assert_eq!(l.line, Some(4), "{l}");
    }

    #[test]
    fn line_and_soak_steps_carry_their_limits_and_only_theirs() {
        let p = parse(
            "fx",
            "name = \"l\"\n[[step]]\nkind = \"line_sweep\"\nfrom = \"90 % of vin\"\n\
             to = \"110 % of vin\"\npoints = 3\nmax_change = \"0.2 %\"\n[[step]]\n\
             kind = \"soak\"\nload = \"1 A\"\nduration = \"2 s\"\ninterval = \"1 s\"\n\
             max_drift = \"0.5 %\"\nmax_rise = \"25 degC\"\n",
        )
        .unwrap();
        assert_eq!(p.steps[0].limits.max_change_percent, Some(0.2));
        assert_eq!(p.steps[1].limits.max_drift_percent, Some(0.5));
        assert_eq!(p.steps[1].limits.max_rise_c, Some(25.0));
        let l = err(
            "fx",
            "name = \"l\"\n[[step]]\nkind = \"load_sweep\"\nfrom = \"0 A\"\nto = \"1 A\"\n\
             points = 3\nmax_drift = \"1 %\"\n",
        );
        assert_eq!(l.line, Some(7), "{l}");
    }

    #[test]
    fn the_standard_plan_passes_on_both_samples() {
        for name in ["lab", "fx"] {
            parse(name, include_str!("../../samples/plans/standard.toml"))
                .unwrap_or_else(|e| panic!("{name}: {e}"));
        }
    }
}
