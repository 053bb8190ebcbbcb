//! Stresses the expectation collects beside the bands: the self-heated operating points over
//! every corner ([`HeatCollect`], from [`heating`](super::heating)), the auxiliary rail at the
//! lowest input and the drive the pass stage needs at the limit ([`aux_and_drive`]). Pure.
//!
//! Relations (textbook; common practice): base drive I_B = I / h_FE; the amplifier sourcing
//! its most current I_amp into a clamped stage leaves I_amp - I / h_FE for the clamp to sink;
//! the aux transistor's V_CE = V_in - I_aux R_c - V_aux (collector resistor drop, Ohm's law);
//! below its saturation voltage the rail sags to V_in - I_aux R_c - V_CE(sat).

use super::dwell::{self, Dwell};
use super::file::Design;
use super::heating::{self, Condition, Solved};
use super::model::Params;
use super::tolerance::Interval;
use serde::{Deserialize, Serialize};

/// Self-heated operating points of a design: the nominal unit and the worst corner for the
/// sustained short, the knee and the pass device's hardest point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SelfHeated {
    pub short_nominal: Solved,
    pub short_worst: Solved,
    pub knee_nominal: Solved,
    pub knee_worst: Solved,
    /// The corner whose hardest point runs the pass junction hottest.
    pub worst: Solved,
    /// Settled short-circuit and knee currents over every corner.
    pub short_current: Interval,
    pub knee_current: Interval,
    /// Some corner has no stable point at or below T_j max.
    pub runaway: bool,
    /// Largest heatsink (sink to ambient, degC/W) that keeps every corner's settled pass
    /// junction at T_j max less the margin.
    pub max_theta_sa: f64,
    /// What the solve assumes, in words.
    pub assumptions: Vec<String>,
    /// The pass junction over a sustained short from the rated-load steady state, nominal
    /// unit and the corner with the hottest settled short (null without thermal masses).
    pub short_dwell_nominal: Option<Dwell>,
    pub short_dwell_worst: Option<Dwell>,
}

/// Gathers the self-heated points corner by corner.
pub struct HeatCollect {
    tj_target: f64,
    short_worst: Option<Solved>,
    short_worst_params: Option<Params>,
    knee_worst: Option<Solved>,
    worst: Option<Solved>,
    hottest_watts: Option<Solved>,
    sense_watts: Option<Solved>,
    short_current: Option<Interval>,
    knee_current: Option<Interval>,
    runaway: bool,
    max_theta_sa: f64,
}

fn hotter(a: &Option<Solved>, b: &Solved) -> bool {
    a.as_ref()
        .is_none_or(|x| b.pass_junction_c > x.pass_junction_c)
}

fn widen(i: &mut Option<Interval>, v: f64) {
    match i {
        Some(x) => x.include(v),
        None => *i = Some(Interval::point(v)),
    }
}

impl HeatCollect {
    pub fn new(d: &Design) -> HeatCollect {
        HeatCollect {
            tj_target: d.pass.tj_max_c - d.rules.tj_margin_c,
            short_worst: None,
            short_worst_params: None,
            knee_worst: None,
            worst: None,
            hottest_watts: None,
            sense_watts: None,
            short_current: None,
            knee_current: None,
            runaway: false,
            max_theta_sa: f64::INFINITY,
        }
    }

    /// Solve one unit (a corner) and keep what is worst so far.
    pub fn include(&mut self, d: &Design, p: &Params) {
        let short = heating::solve(d, p, Condition::Short);
        let knee = heating::solve(d, p, Condition::Knee);
        let worst = heating::solve(d, p, Condition::Worst);
        widen(&mut self.short_current, short.current_a);
        widen(&mut self.knee_current, knee.current_a);
        if hotter(&self.short_worst, &short) {
            self.short_worst = Some(short);
            self.short_worst_params = Some(p.clone());
        }
        if hotter(&self.knee_worst, &knee) {
            self.knee_worst = Some(knee);
        }
        if hotter(&self.worst, &worst) {
            self.worst = Some(worst);
        }
        if self
            .hottest_watts
            .as_ref()
            .is_none_or(|x| worst.pass_watts > x.pass_watts)
        {
            self.hottest_watts = Some(worst);
        }
        for s in [short, knee, worst] {
            if self
                .sense_watts
                .as_ref()
                .is_none_or(|x| s.sense_watts > x.sense_watts)
            {
                self.sense_watts = Some(s);
            }
            self.runaway |= !s.below_tj_max;
        }
        self.max_theta_sa = self.max_theta_sa.min(heating::max_theta_sa(
            d,
            p,
            Condition::Worst,
            self.tj_target,
        ));
    }

    /// The pass device's highest settled dissipation (its point), and the sense resistor's.
    pub fn pass_and_sense(&self) -> (Option<Solved>, Option<Solved>) {
        (self.hottest_watts, self.sense_watts)
    }

    /// Finish with the nominal unit's points.
    pub fn finish(self, d: &Design, nominal: &Params) -> SelfHeated {
        let short_nominal = heating::solve(d, nominal, Condition::Short);
        let knee_nominal = heating::solve(d, nominal, Condition::Knee);
        let worst_nominal = heating::solve(d, nominal, Condition::Worst);
        SelfHeated {
            short_worst: self.short_worst.unwrap_or(short_nominal),
            knee_worst: self.knee_worst.unwrap_or(knee_nominal),
            worst: self.worst.unwrap_or(worst_nominal),
            short_current: self
                .short_current
                .unwrap_or(Interval::point(short_nominal.current_a)),
            knee_current: self
                .knee_current
                .unwrap_or(Interval::point(knee_nominal.current_a)),
            runaway: self.runaway || !worst_nominal.below_tj_max,
            max_theta_sa: self.max_theta_sa.min(heating::max_theta_sa(
                d,
                nominal,
                Condition::Worst,
                self.tj_target,
            )),
            short_dwell_nominal: dwell::short_dwell(d, nominal),
            short_dwell_worst: dwell::short_dwell(
                d,
                self.short_worst_params.as_ref().unwrap_or(nominal),
            ),
            short_nominal,
            knee_nominal,
            assumptions: heating::assumptions(d),
        }
    }
}

/// The auxiliary rail and the drive of the pass stage.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DriveExpect {
    /// Collector resistor of the aux transistor, ohms (0 without one), and whether it was
    /// given as a part (`collector_ohms`) or from `collector_share`.
    pub collector_ohms: Option<f64>,
    /// Aux transistor V_CE at the lowest input with the full aux current.
    pub aux_vce_at_lowest_input_v: Option<f64>,
    /// The aux rail at the lowest input (its set value, or lower when the transistor saturates).
    pub aux_rail_at_lowest_input_v: Option<f64>,
    /// Aux rail less the amplifier's swing loss less what the pass stage's base needs at the
    /// highest output (null without an aux rail).
    pub drive_headroom_v: Option<f64>,
    /// Base drive the pass stage needs at the rated load and at the highest settled limit
    /// (I / h_FE; null without `pass.current_gain`).
    pub base_drive_at_rated_a: Option<f64>,
    pub base_drive_at_limit_a: Option<f64>,
    /// The amplifier's most output current, and what the clamp must sink at the limit
    /// (I_amp - I_limit,lowest / h_FE).
    pub amplifier_output_a: Option<f64>,
    pub clamp_sink_a: Option<f64>,
}

/// Inputs to [`aux_and_drive`] that the expectation has computed.
pub struct DriveInputs {
    pub vin_nominal: f64,
    pub vin_min: f64,
    pub vout_max: f64,
    /// Current through the sense resistor at rated load (the lower of rated and limit).
    pub rated_current: f64,
    pub limit_current_min: f64,
    pub limit_current_max: f64,
}

/// Collector resistor of the aux transistor: the fitted part, or the share of the nominal drop.
pub fn collector_ohms(d: &Design, vin_nominal: f64) -> Option<f64> {
    let a = d.aux.as_ref()?;
    match a.collector_ohms {
        Some(r) => Some(r),
        None if a.collector_share > 0.0 => {
            Some(a.collector_share * (vin_nominal - a.volts).max(0.0) / a.current_a)
        }
        None => Some(0.0),
    }
}

/// The aux rail at the lowest input, and the drive the pass stage needs.
pub fn aux_and_drive(d: &Design, x: &DriveInputs) -> DriveExpect {
    let m = d.pass.stage.junctions() as f64;
    let rc = collector_ohms(d, x.vin_nominal);
    let (vce, rail, headroom) = match (&d.aux, rc) {
        (Some(a), Some(rc)) => {
            let after_r = x.vin_min - a.current_a * rc;
            let vce = after_r - a.volts;
            let rail = a.volts.min(after_r - a.vce_sat_v);
            // The amplifier must drive the pass stage's base above the highest output plus
            // the sense drop plus the pass junctions (coldest, highest drop).
            let need = x.vout_max
                + x.rated_current * d.limit.sense.ohms
                + m * (d.pass.vbe_v + d.pass.vbe_spread_v);
            (
                Some(vce),
                Some(rail),
                Some(rail - a.amplifier_swing_loss_v - need),
            )
        }
        _ => (None, None, None),
    };
    let gain = d.pass.current_gain;
    let amp = d.amplifier.as_ref().map(|a| a.output_current_a);
    DriveExpect {
        collector_ohms: rc.filter(|_| d.aux.is_some()),
        aux_vce_at_lowest_input_v: vce,
        aux_rail_at_lowest_input_v: rail,
        drive_headroom_v: headroom,
        base_drive_at_rated_a: gain.map(|g| d.load.max_current_a / g),
        base_drive_at_limit_a: gain.map(|g| x.limit_current_max / g),
        amplifier_output_a: amp,
        clamp_sink_a: match (amp, gain) {
            (Some(i), Some(g)) => Some((i - x.limit_current_min / g).max(0.0)),
            (Some(i), None) => Some(i),
            _ => None,
        },
    }
}

/// Dissipation of one feedback element at its worst corner and setting.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FeedbackStress {
    pub watts: f64,
    /// Resistance in circuit at that point (for a potentiometer: the part of the track in use).
    pub ohms_in_use: f64,
    /// Share of a potentiometer's track in use (1 for a fixed resistor): its rating spreads
    /// over the whole track, so the part in use may carry only that share of it.
    pub track_share: f64,
    pub output_v: f64,
}

/// Dissipation in the feedback divider's top and bottom elements, over the tolerance corners
/// of the reference and both elements and over the ends of any potentiometer's travel, with
/// the wiper (if any) at its top. The divider carries I = V_ref,eff / R_bottom,set (the
/// amplifier holds the bottom at the reference), so P = I^2 R_set in each element (Ohm's law);
/// for a potentiometer the worst point is the one that loads its track most per ohm in use.
pub fn feedback_stress(d: &Design) -> (FeedbackStress, FeedbackStress) {
    use super::file::ReferenceAdjust;
    let r = &d.reference;
    let t = &d.feedback.top;
    let b = &d.feedback.bottom;
    let w = match r.adjust {
        ReferenceAdjust::Fixed => 1.0,
        ReferenceAdjust::Wiper => r.wiper_max_pct / 100.0,
    };
    let corners = |v: f64, pct: f64| [v * (1.0 - pct / 100.0), v * (1.0 + pct / 100.0)];
    let settings = |pot: bool, min: f64, full: f64, nominal_full: f64| -> Vec<f64> {
        if pot {
            vec![min * full / nominal_full, full]
        } else {
            vec![full]
        }
    };
    let empty = FeedbackStress {
        watts: 0.0,
        ohms_in_use: 0.0,
        track_share: 1.0,
        output_v: 0.0,
    };
    let (mut top, mut bottom) = (empty, empty);
    let density = |s: &FeedbackStress| s.watts / s.track_share.max(1e-12);
    for vref in corners(r.volts, r.tolerance_pct) {
        for rt in corners(t.ohms, t.tolerance_pct) {
            for rb in corners(b.ohms, b.tolerance_pct) {
                for rt_set in settings(t.pot, t.min_ohms, rt, t.ohms) {
                    for rb_set in settings(b.pot, b.min_ohms, rb, b.ohms) {
                        if rb_set <= 0.0 {
                            continue;
                        }
                        let i = vref * w / rb_set;
                        let vout = vref * w * (1.0 + rt_set / rb_set);
                        let st = FeedbackStress {
                            watts: i * i * rt_set,
                            ohms_in_use: rt_set,
                            track_share: if t.pot { rt_set / rt } else { 1.0 },
                            output_v: vout,
                        };
                        let sb = FeedbackStress {
                            watts: i * i * rb_set,
                            ohms_in_use: rb_set,
                            track_share: if b.pot { rb_set / rb } else { 1.0 },
                            output_v: vout,
                        };
                        if density(&st) > density(&top) {
                            top = st;
                        }
                        if density(&sb) > density(&bottom) {
                            bottom = sb;
                        }
                    }
                }
            }
        }
    }
    (top, bottom)
}
