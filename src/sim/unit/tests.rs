//! Unit tests of the simulated unit, each against the formula it names.

use super::as_built::*;
use super::model::*;
use crate::design::{Clamp, Design};
use crate::measure::LoadMode;

fn design(name: &str) -> Design {
    let path = format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"));
    Design::load(std::path::Path::new(&path)).expect("sample design loads")
}
fn lab() -> Design {
    design("teaching-lab-0-20v.toml")
}
fn fold() -> Design {
    design("fixed-12v-3a-foldback.toml")
}
fn unit(d: &Design, faults: &[UnitFault]) -> SimUnit {
    SimUnit::build(d, 11, faults, UnitModel::default()).unwrap()
}
fn per_junction_unit(d: &Design) -> SimUnit {
    let model = UnitModel {
        knee: KneeModel::PerJunction,
        ..UnitModel::default()
    };
    SimUnit::build(d, 7, &[], model).unwrap()
}
fn one_junction_unit(d: &Design) -> SimUnit {
    let model = UnitModel {
        knee: KneeModel::OneJunction,
        ..UnitModel::default()
    };
    SimUnit::build(d, 11, &[], model).unwrap()
}

fn load(mode: LoadMode, value: f64) -> Controls {
    let mut c = Controls::default();
    c.load.mode = mode;
    c.load.input_on = true;
    match mode {
        LoadMode::ConstantCurrent => c.load.current = value,
        LoadMode::ConstantVoltage => c.load.voltage = value,
        LoadMode::ConstantResistance => c.load.resistance = value,
    }
    c
}

#[test]
fn thermal_voltage_at_25c_is_25_69_mv() {
    // kT/q at 298.15 K = 25.69 mV (SI 2019 constants; textbook value).
    assert!((thermal_voltage(25.0) - 0.025_693).abs() < 2e-6);
}

#[test]
fn first_order_step_reaches_63_percent_at_one_time_constant() {
    // Step response of a first-order system: 1 - e^-1 = 63.2 % at t = tau (textbook).
    let v = first_order_step(0.0, 1.0, 8.0, 8.0);
    assert!((v - 0.632_12).abs() < 1e-4, "{v}");
    let v = first_order_step(25.0, 125.0, 5.0, 5.0);
    assert!((v - (25.0 + 63.212)).abs() < 1e-2, "{v}");
}

#[test]
fn regulated_output_follows_vref_times_one_plus_rt_over_rb() {
    // Non-inverting amplifier: V_out = V_ref (1 + R_t / R_b) (textbook).
    let d = fold();
    let u = unit(&d, &[]);
    let p = u.params();
    let expected = p.vref * (1.0 + p.fb_top / p.fb_bottom);
    assert!((u.regulated_v() - expected).abs() < 1e-9);
    let op = u.operating_point(&Controls::default());
    assert!(
        (op.vout - expected).abs() < 1e-6,
        "{} vs {expected}",
        op.vout
    );
    assert_eq!(op.iout, 0.0);
    // The drawn unit differs from nominal 12 V only within the element tolerances.
    assert!((expected - 12.0).abs() < 0.3);
}

#[test]
fn output_resistance_is_minus_dv_di_in_regulation() {
    // R_out = -dV/dI over the regulation region (definition of output resistance; common practice).
    let d = fold();
    let u = unit(&d, &[]);
    let a = u.operating_point(&load(LoadMode::ConstantCurrent, 0.5));
    let b = u.operating_point(&load(LoadMode::ConstantCurrent, 1.5));
    assert!((a.iout - 0.5).abs() < 1e-12 && (b.iout - 1.5).abs() < 1e-12);
    let r = -(b.vout - a.vout) / (b.iout - a.iout);
    assert!((r - u.model().output_resistance).abs() < 1e-5, "{r}");
}

#[test]
fn diode_string_limit_line_away_from_knee() {
    // V_sense = n V_F - m V_BE, I_lim = V_sense / R_sense (textbook relation; common practice).
    let d = lab();
    let u = unit(&d, &[]);
    let p = u.params();
    let expected = (p.diodes as f64 * p.diode_vf - 2.0 * p.pass_vbe) / p.r_sense;
    let vset = u.regulated_v();
    for frac in [0.1, 0.5, 0.8] {
        let op = u.operating_point(&load(LoadMode::ConstantVoltage, frac * vset));
        assert!(
            (op.iout - expected).abs() < 1e-9,
            "at {frac}: {} vs {expected}",
            op.iout
        );
    }
}

#[test]
fn foldback_limit_line_and_short_circuit() {
    // k = Rb/(Rt+Rb); I(V) = (V_BE + (1-k) V)/(k R_s); I_sc = V_BE/(k R_s) (common practice).
    let d = fold();
    let u = unit(&d, &[]);
    let p = u.params();
    let k = p.fold_bottom / (p.fold_top + p.fold_bottom);
    for v in [2.0, 6.0, 9.0] {
        let expected = (p.limiter_vbe + (1.0 - k) * v) / (k * p.r_sense);
        let op = u.operating_point(&load(LoadMode::ConstantVoltage, v));
        assert!((op.iout - expected).abs() < 1e-9, "{v}: {}", op.iout);
    }
    let isc = p.limiter_vbe / (k * p.r_sense);
    let op = u.operating_point(&load(LoadMode::ConstantResistance, 1e-4));
    assert!((op.iout - isc).abs() / isc < 1e-3, "{} vs {isc}", op.iout);
    assert!((u.truth().short_circuit_current - isc).abs() < 1e-9);
}

#[test]
fn knee_is_soft_over_a_few_thermal_voltages() {
    // Upper branch: dV = dV_sat exp((I - I_L) R_s / (N kT/q)) (Shockley's law, module doc).
    // At the 2 % point: I = I_L + (N V_T / R_s) ln(0.02 V0 / dV_sat) - R_out I, so the knee sits
    // ln(0.03/0.02) = 0.405 thermal voltages of sense drop below the sharp limit line. This is
    // the one-junction knee (`KneeModel::OneJunction`, chosen here; the default is per junction,
    // checked in the next test).
    let d = lab();
    let u = one_junction_unit(&d);
    let t = u.truth();
    let p = u.params();
    let vt = thermal_voltage(p.ambient_c);
    let dv_sat = u.model().knee_sat_fraction * t.regulated_v;
    let v = 0.98 * t.no_load_v;
    let il = t.limit_line_current;
    let ro = u.model().output_resistance;
    // Solve t.regulated_v - ro I - dv_sat e^{(I-il)Rs/vt} = v directly for a check.
    let deficit = t.regulated_v - ro * t.knee_current - v;
    let expected = il + vt / p.r_sense * (deficit / dv_sat).ln();
    assert!((t.knee_current - expected).abs() < 1e-6);
    let below_mv = (il - t.knee_current) * p.r_sense * 1e3;
    assert!(below_mv > 5.0 && below_mv < 30.0, "{below_mv} mV");
    // Between a 0.1 % drop and saturation the sense drop moves by tens of millivolts.
    let i_01 = u.supply_current_at(&Controls::default(), 0.999 * t.no_load_v);
    let span_mv = (il - i_01) * p.r_sense * 1e3;
    assert!(span_mv > 40.0 && span_mv < 150.0, "{span_mv} mV");
}

#[test]
fn a_diode_string_knee_is_as_wide_as_its_junctions() {
    // Upper branch: dV = dV_sat exp((I - I_L) R_s / (n N kT/q)) (Shockley's law for the n
    // junctions in series that set the threshold, module doc): a string of three diodes has a
    // knee three times as wide as one junction's. At the 2 % point:
    // I = I_L + (n N V_T / R_s) ln(0.02 V0 / dV_sat) - R_out I, so the knee sits
    // ln(0.03/0.02) = 0.405 of n thermal voltages of sense drop below the sharp limit line.
    let d = lab();
    let u = per_junction_unit(&d);
    let t = u.truth();
    let p = u.params();
    let n = p.diodes as f64;
    assert_eq!(n, 3.0);
    let vt = thermal_voltage(p.ambient_c);
    let dv_sat = u.model().knee_sat_fraction * t.regulated_v;
    let v = 0.98 * t.no_load_v;
    let il = t.limit_line_current;
    let ro = u.model().output_resistance;
    // Solve t.regulated_v - ro I - dv_sat e^{(I-il)Rs/(n vt)} = v directly for a check.
    let deficit = t.regulated_v - ro * t.knee_current - v;
    let expected = il + n * vt / p.r_sense * (deficit / dv_sat).ln();
    assert!((t.knee_current - expected).abs() < 1e-6);
    let below_mv = (il - t.knee_current) * p.r_sense * 1e3;
    assert!(below_mv > 15.0 && below_mv < 90.0, "{below_mv} mV");
    // Between a 0.1 % drop and saturation the sense drop moves by a few tenths of a volt.
    let i_01 = u.supply_current_at(&Controls::default(), 0.999 * t.no_load_v);
    let span_mv = (il - i_01) * p.r_sense * 1e3;
    assert!(span_mv > 120.0 && span_mv < 450.0, "{span_mv} mV");
    // A limiter transistor's knee is one junction wide.
    let f = fold();
    let w1 = knee_width_v(f.limit.clamp, 3, 1.0, 25.0);
    assert!((w1 - thermal_voltage(25.0)).abs() < 1e-15);
    assert!((knee_width_v(d.limit.clamp, 3, 1.0, 25.0) - 3.0 * w1).abs() < 1e-15);
}

#[test]
fn cc_load_sinks_set_current_then_collapses_above_limit() {
    let d = lab();
    let u = unit(&d, &[]);
    let t = u.truth();
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 0.8));
    assert!((op.iout - 0.8).abs() < 1e-12);
    // V = V_set - R_out I - dV_sat exp((I - I_L) R_s / (n N kT/q)) (module doc: the clamp's
    // Shockley law against the amplifier's gain; the string of n = 3 diodes sets the knee's
    // width, so half-way to the limit the output already sags a few millivolts).
    let p = u.params();
    let width = p.diodes as f64 * thermal_voltage(p.ambient_c);
    let dv_sat = u.model().knee_sat_fraction * t.regulated_v;
    let expected = t.regulated_v
        - 0.8 * t.output_resistance
        - dv_sat * ((0.8 - t.limit_line_current) * p.r_sense / width).exp();
    assert!(
        (op.vout - expected).abs() < 1e-5,
        "{} vs {expected} {t:?}",
        op.vout
    );
    // Above the limit a CC load has no operating point on the upper branch: the output
    // collapses onto the limit line at 0 V (common practice).
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, t.limit_line_current * 1.2));
    assert!(op.vout < 1e-9, "{}", op.vout);
    assert!((op.iout - t.short_circuit_current).abs() < 1e-9);
}

#[test]
fn foldback_cc_between_short_and_knee_stays_on_upper_branch() {
    let d = fold();
    let u = unit(&d, &[]);
    let t = u.truth();
    let i = 0.5 * (t.short_circuit_current + t.knee_current);
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, i));
    assert!((op.iout - i).abs() < 1e-12);
    assert!(op.vout > 0.99 * t.no_load_v - i * t.output_resistance);
}

#[test]
fn foldback_latches_low_under_cc_until_the_setting_is_below_short_circuit() {
    // A foldback supply driven into collapse by a CC load stays down while the load asks
    // for more than I_sc (common practice: foldback supplies can latch low under CC).
    let d = fold();
    let mut u = unit(&d, &[]);
    let t = u.truth();
    let between = 0.5 * (t.short_circuit_current + t.knee_current);
    let op = u.advance(&load(LoadMode::ConstantCurrent, t.knee_current * 1.2), 0.01);
    assert!(op.collapsed && op.vout == 0.0);
    let op = u.advance(&load(LoadMode::ConstantCurrent, between), 0.01);
    assert!(op.collapsed && op.vout == 0.0, "{op:?}");
    assert!((op.iout - t.short_circuit_current).abs() < 0.01 * t.short_circuit_current);
    let op = u.advance(
        &load(LoadMode::ConstantCurrent, 0.5 * t.short_circuit_current),
        0.01,
    );
    assert!(!op.collapsed && op.vout > 0.99 * t.no_load_v, "{op:?}");
    let op = u.advance(&load(LoadMode::ConstantCurrent, between), 0.01);
    assert!(!op.collapsed && op.vout > 0.99 * t.no_load_v, "{op:?}");
}

#[test]
fn cr_load_meets_ohms_law() {
    // Regulation region: V = V_set R / (R + R_out) (voltage divider); always V = I R.
    let d = fold();
    let u = unit(&d, &[]);
    let t = u.truth();
    let r = 10.0;
    let op = u.operating_point(&load(LoadMode::ConstantResistance, r));
    assert!((op.vout - op.iout * r).abs() < 1e-6);
    let expected = t.regulated_v * r / (r + t.output_resistance);
    assert!(
        (op.vout - expected).abs() < 1e-6,
        "{} vs {expected}",
        op.vout
    );
    // In the limit region: on the limit line and on V = I R.
    let r = 1.0;
    let op = u.operating_point(&load(LoadMode::ConstantResistance, r));
    let p = u.params();
    let k = p.fold_bottom / (p.fold_top + p.fold_bottom);
    // Intersection of I = (V_BE + (1-k) V)/(k R_s) with V = I R.
    let v = p.limiter_vbe * r / (k * p.r_sense - (1.0 - k) * r);
    assert!((op.vout - v).abs() < 1e-6, "{} vs {v}", op.vout);
}

#[test]
fn cv_load_above_open_voltage_draws_nothing_and_off_input_draws_nothing() {
    let d = lab();
    let u = unit(&d, &[]);
    let t = u.truth();
    let op = u.operating_point(&load(LoadMode::ConstantVoltage, t.no_load_v + 1.0));
    assert_eq!(op.iout, 0.0);
    let mut c = load(LoadMode::ConstantCurrent, 1.0);
    c.load.input_on = false;
    assert_eq!(u.operating_point(&c).iout, 0.0);
}

#[test]
fn dropout_when_the_source_is_too_low() {
    // Headroom: V_out <= V_in - I R_s - V_CE(sat) (common practice).
    let d = fold();
    let u = unit(&d, &[]);
    let t = u.truth();
    let mut c = load(LoadMode::ConstantCurrent, 1.0);
    c.source = SourceSetting {
        in_use: true,
        volts: t.regulated_v + 1.0,
        output_on: true,
    };
    let op = u.operating_point(&c);
    let expected = t.regulated_v + 1.0 - 1.0 * t.params.r_sense - 0.9;
    assert!(
        (op.vout - expected).abs() < 1e-6,
        "{} vs {expected}",
        op.vout
    );
    c.source.output_on = false;
    let op = u.operating_point(&c);
    assert_eq!((op.vout, op.iout), (0.0, 0.0));
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(200))]
    #[test]
    fn every_load_setting_gives_a_physical_operating_point(
        mode in 0u8..3,
        value in 0.0f64..40.0,
        source in proptest::option::of(0.0f64..60.0),
        seed in 0u64..50,
        foldback in proptest::bool::ANY,
    ) {
        let d = if foldback { fold() } else { lab() };
        let u = SimUnit::build(&d, seed, &[], UnitModel::default()).unwrap();
        let mode = [LoadMode::ConstantCurrent, LoadMode::ConstantVoltage,
            LoadMode::ConstantResistance][mode as usize];
        let mut c = load(mode, value.max(1e-3));
        if let Some(v) = source {
            c.source = SourceSetting { in_use: true, volts: v, output_on: true };
        }
        let op = u.operating_point(&c);
        let open = u.operating_point(&Controls { source: c.source, ..Controls::default() });
        for x in [op.vout, op.iout, op.vin, op.iin, op.pass_w] {
            proptest::prop_assert!(x.is_finite() && x >= 0.0, "{op:?}");
        }
        // Never above the open-circuit voltage; never more than the unit can give there.
        proptest::prop_assert!(op.vout <= open.vout + 1e-9, "{op:?} {open:?}");
        proptest::prop_assert!(op.iout <= u.supply_current_at(&c, op.vout) + 1e-9);
        // The pass device obeys energy balance: P = (V_in - V_out - I R_s) I >= 0.
        let p = (op.vin - op.vout - op.iout * u.params().r_sense) * op.iout;
        proptest::prop_assert!((op.pass_w - p.max(0.0)).abs() < 1e-9);
        if mode == LoadMode::ConstantResistance {
            proptest::prop_assert!((op.vout - op.iout * value.max(1e-3)).abs() < 1e-6);
        }
    }
}

#[test]
fn a_hotter_room_moves_the_diode_string_limit() {
    // V_sense = n V_F - m V_BE with every junction 2 mV/degC lower at +10 degC: the
    // threshold changes by (n - m)(-2 mV/degC)(10 degC) (textbook tempco; common practice).
    let d = lab();
    let cold = unit(&d, &[]).truth();
    let model = UnitModel {
        ambient_c: Some(35.0),
        ..UnitModel::default()
    };
    let hot = SimUnit::build(&d, 11, &[], model).unwrap().truth();
    let n = cold.params.diodes as f64;
    let expected = cold.sense_v + (n - 2.0) * -2e-3 * 10.0;
    assert!(
        (hot.sense_v - expected).abs() < 1e-12,
        "{} vs {expected}",
        hot.sense_v
    );
    assert_eq!(hot.ambient_c, 35.0);
}

#[test]
fn line_change_moves_the_output_by_the_input_rejection() {
    // Line regulation: dV_out = rejection * dV_in while headroom lasts (80 dB -> 1e-4 V/V).
    let d = fold();
    let u = unit(&d, &[]);
    let mut c = load(LoadMode::ConstantCurrent, 1.0);
    c.source = SourceSetting {
        in_use: true,
        volts: 18.0,
        output_on: true,
    };
    let a = u.operating_point(&c);
    c.source.volts = 24.0;
    let b = u.operating_point(&c);
    let k = u.model().line_rejection;
    assert!(
        ((b.vout - a.vout) - 6.0 * k).abs() < 1e-9,
        "{} {}",
        a.vout,
        b.vout
    );
}

#[test]
fn transistor_clamp_on_a_dc_input() {
    // Transistor limiter: I_lim = V_BE / R_sense (common practice); DC input: dropout
    // at V_in - I R_s - V_CE(sat) with no ripple.
    let text = std::fs::read_to_string(format!(
        "{}/samples/teaching-lab-0-20v.toml",
        env!("CARGO_MANIFEST_DIR")
    ))
    .unwrap()
    .replace(
        "kind = \"full_wave\"\nsecondary_vrms = 26.0",
        "kind = \"dc\"\nvolts = 24.0",
    )
    .replace("clamp = \"diode_string\"", "clamp = \"transistor\"")
    .replace("diodes = 3\n", "");
    let d = Design::parse(&text, "inline").unwrap();
    assert_eq!(d.limit.clamp, Clamp::Transistor);
    let u = unit(&d, &[]);
    let t = u.truth();
    let p = u.params();
    assert!((t.short_circuit_current - p.limiter_vbe / p.r_sense).abs() < 1e-9);
    let op = u.operating_point(&load(LoadMode::ConstantVoltage, 5.0));
    assert!((op.iout - p.limiter_vbe / p.r_sense).abs() < 1e-9);
    // DC input at the drawn line: the input does not sag with load.
    let vin = 24.0 * p.line;
    assert!((op.vin - vin).abs() < 1e-9, "{} vs {vin}", op.vin);
    assert!(t.no_load_v <= vin - 0.9 + 1e-9);
}

#[test]
fn faults_change_the_limit_as_the_formulas_say() {
    let d = lab();
    let base = unit(&d, &[]).truth();
    let t = unit(&d, &[UnitFault::SenseOhms(0.56)]).truth();
    // I_lim = V_sense / R_sense with the wrong resistor.
    assert!((t.limit_line_current - base.sense_v / 0.56).abs() < 1e-9);
    let t = unit(&d, &[UnitFault::DiodeDelta(1)]).truth();
    // One more diode adds one V_F to V_sense = n V_F - m V_BE.
    assert!((t.sense_v - (base.sense_v + base.params.diode_vf)).abs() < 1e-9);
    assert!(SimUnit::build(
        &fold(),
        1,
        &[UnitFault::DiodeDelta(1)],
        UnitModel::default()
    )
    .is_err());
}

#[test]
fn fault_specs_parse_and_reject() {
    assert_eq!(
        UnitFault::parse("sense=0.56"),
        Ok(UnitFault::SenseOhms(0.56))
    );
    assert_eq!(UnitFault::parse("diodes=+1"), Ok(UnitFault::DiodeDelta(1)));
    assert_eq!(UnitFault::parse("diodes=-1"), Ok(UnitFault::DiodeDelta(-1)));
    assert!(UnitFault::parse("diodes=1").is_err());
    assert!(UnitFault::parse("sense=-2").is_err());
    assert!(UnitFault::parse("bogus=1").is_err());
    assert!(UnitFault::parse("sense").is_err());
}

#[test]
fn diode_string_limit_rises_as_the_pass_device_heats() {
    // V_sense = n V_F(T_clamp) - m V_BE(T_pass); junction drops fall 2 mV/degC (textbook),
    // so a hotter pass device raises the limit by m * 2 mV/degC / R_s per degree.
    let d = lab();
    let mut u = unit(&d, &[]);
    let cold = u.truth();
    let short = load(LoadMode::ConstantResistance, 1e-3);
    let i0 = u.operating_point(&short).iout;
    let op = u.advance(&short, 15.0);
    let th = u.thermal();
    assert!(th.pass_junction_c > cold.ambient_c + 20.0, "{th:?}");
    assert!(th.clamp_junction_c - cold.ambient_c < 0.2 * (th.pass_junction_c - cold.ambient_c));
    assert!(op.iout > i0 * 1.05, "{} -> {}", i0, op.iout);
    let p = u.params();
    let tc = d.environment.junction_tempco_mv_per_c * 1e-3;
    let vs = p.diodes as f64 * (p.diode_vf + tc * (th.clamp_junction_c - 25.0))
        - 2.0 * (p.pass_vbe + tc * (th.pass_junction_c - 25.0));
    assert!(
        (op.iout - vs / p.r_sense).abs() < 1e-3 * op.iout,
        "{} vs {}",
        op.iout,
        vs / p.r_sense
    );
}

#[test]
fn pass_junction_heats_with_first_order_response_at_constant_power() {
    // With dissipation held (source-fed, CV load on the limit line) the junction follows
    // T_a + P theta (1 - e^{-t/tau}): T_j = T_a + P (theta_jc + theta_cs + theta_sa) (thermal Ohm's law; common practice).
    let d = fold();
    let mut u = unit(&d, &[]);
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 2.0));
    let tau = u.model().pass_tau_s;
    let ta = u.params().ambient_c;
    u.heat(op, tau);
    let rise = u.thermal().pass_junction_c - ta;
    let full = op.pass_w * u.pass_theta();
    assert!((rise / full - 0.632_12).abs() < 1e-4, "{rise} of {full}");
}

#[test]
fn the_case_lags_the_junction_and_the_heatsink_takes_minutes() {
    // The teaching-lab sample states its thermal masses (junction tau 0.5 s, case 10 J/degC,
    // heatsink 900 J/degC through 0.35 degC/W: about 5 minutes). At a held dissipation the
    // junction leads, the case follows, the sink is slow; the steady state is thermal Ohm's law,
    // T_j = T_a + P (theta_jc + theta_cs + theta_sa), T_case = T_a + P (theta_cs + theta_sa).
    let d = lab();
    let model = UnitModel {
        heat: HeatModel::Network,
        ..UnitModel::default()
    };
    let mut u = SimUnit::build(&d, 7, &[], model).unwrap();
    assert!(u.network().is_some());
    assert!(unit(&d, &[]).network().is_some(), "the network by default");
    let simple = UnitModel {
        heat: HeatModel::Lumped,
        ..UnitModel::default()
    };
    assert!(SimUnit::build(&d, 7, &[], simple)
        .unwrap()
        .network()
        .is_none());
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 1.0));
    let ta = u.params().ambient_c;
    let w = op.pass_w;
    assert!(w > 5.0, "{w}");
    u.heat(op, 1.0);
    let t1 = u.thermal();
    assert!(t1.pass_junction_c - ta > 0.5 * w * 0.7, "{t1:?}");
    assert!(t1.case_c - ta < 0.3 * (t1.pass_junction_c - ta), "{t1:?}");
    for _ in 0..59 {
        u.heat(op, 1.0);
    }
    let t60 = u.thermal();
    assert!(t60.sink_c - ta < 0.25 * w * 0.35, "{t60:?}");
    for _ in 0..200 {
        u.heat(op, 30.0);
    }
    let ts = u.thermal();
    assert!(
        (ts.pass_junction_c - (ta + w * 1.25)).abs() < 0.01 * w * 1.25,
        "{ts:?}"
    );
    assert!((u.case_temperature() - (ta + w * 0.55)).abs() < 0.01 * w * 0.55);
}

#[test]
fn own_input_sags_to_the_rated_secondary_at_rated_load() {
    // A transformer with 8 % regulation: 26 V RMS at the rated 1.2 A, 28.08 V with no load.
    // Fed from its own input the unit sees the no-load peak with nothing drawn, and at rated
    // load the rated-load peak less half the reservoir's ripple I / (2 f C) (textbook
    // capacitor-input rectifier; the mean of a sawtooth ripple is half its height).
    let text = include_str!("../../../samples/teaching-lab-0-20v.toml").replace(
        "reservoir_tolerance_pct = 20\n",
        "reservoir_tolerance_pct = 20\nregulation_pct = 8\n",
    );
    let d = Design::parse(&text, "lab-reg").unwrap();
    let u = unit(&d, &[]);
    let line = u.params().line;
    let feed = u.feed(&Controls::default());
    let c = u.params().reservoir_f;
    let ripple = 1.2 / (2.0 * 50.0 * c);
    let rated_peak = 26.0 * 2f64.sqrt() * line - 1.4;
    let no_load_peak = 26.0 * 1.08 * 2f64.sqrt() * line - 1.4;
    assert!((feed.mean(0.0) - no_load_peak).abs() < 1e-9);
    assert!((feed.mean(1.2) - (rated_peak - 0.5 * ripple)).abs() < 1e-9);
    // Without a stated regulation there is no sag.
    assert_eq!(transformer_sag_per_a(&lab(), 1.0), 0.0);
}

#[test]
fn the_simulated_short_follows_the_designs_dwell_model() {
    // The design model's dwell (design::dwell::short_dwell) steps the same three-stage network
    // with the clamp's current following the heating (diode-string threshold n V_F - m V_BE,
    // -2 mV/degC per junction, diodes at ambient), fed at the highest input (no load, its
    // line) from the rated-load steady state. The unit is put in the same place: fed from a
    // source at that input, its junction, case and heatsink at the dwell's starting
    // temperatures, its output shorted (a CV load at 0 V). Its junction rise above ambient
    // must follow the dwell's curve within 1 % wherever the dwell samples it.
    let d = lab();
    let mut u = unit(&d, &[]);
    let p = u.params().clone();
    let dwell = crate::design::dwell::short_dwell(&d, &p).expect("the sample states its masses");
    let ta = p.ambient_c;
    u.set_thermal(Thermal {
        pass_junction_c: dwell.start_junction_c,
        clamp_junction_c: ta,
        case_c: dwell.start_case_c,
        sink_c: dwell.start_sink_c,
    });
    let mut c = load(LoadMode::ConstantVoltage, 0.0);
    c.source = SourceSetting {
        in_use: true,
        volts: crate::design::evaluate(&d, &p).vin_no_load,
        output_on: true,
    };
    let mut now = 0.0;
    let mut compared = 0;
    for &(t, tj, tc) in dwell.curve.iter().filter(|s| s.0 > 0.0 && s.0 <= 1200.0) {
        while now < t - 1e-12 {
            let dt = (t - now).min(20.0);
            let op = u.advance(&c, dt);
            assert!(op.vout == 0.0 && op.iout > 1.0, "{op:?}");
            now += dt;
        }
        let th = u.thermal();
        let (sim_rise, model_rise) = (th.pass_junction_c - ta, tj - ta);
        assert!(
            (sim_rise - model_rise).abs() <= 0.01 * model_rise,
            "at {t} s: unit {} degC, design {} degC",
            th.pass_junction_c,
            tj
        );
        let (sim_case, model_case) = (th.case_c - ta, tc - ta);
        assert!(
            (sim_case - model_case).abs() <= 0.01 * model_case,
            "case at {t} s: unit {} degC, design {} degC",
            th.case_c,
            tc
        );
        compared += 1;
    }
    assert!(compared >= 10, "{compared} points compared");
    // Over the 20 minutes the junction has heated well above its start (the short
    // dissipates more than rated load).
    assert!(u.thermal().pass_junction_c > dwell.start_junction_c + 20.0);
}

/// The teaching-lab sample with its thermal masses replaced (the `[pass.thermal_mass]` lines).
fn lab_with_masses(junction: &str, case: &str, sink: &str) -> Design {
    let text = include_str!("../../../samples/teaching-lab-0-20v.toml")
        .replace("junction_tau_s = 0.5 ", &format!("{junction} "))
        .replace("case_j_per_c = 10 ", &format!("{case} "))
        .replace("sink_j_per_c = 900 ", &format!("{sink} "));
    Design::parse(&text, "lab-masses").unwrap()
}

#[test]
fn junction_and_case_stages_each_follow_a_first_order_step() {
    // First-order thermal stage (textbook RC step response): at a held power P a stage of
    // resistance theta and capacity C rises as P theta (1 - e^(-t/tau)), tau = theta C.
    // Junction stage: with the case's capacity made huge (10^7 J/degC) the case stays at
    // ambient for seconds, so the junction alone is first order, tau = 0.5 s (the sample's).
    let d = lab_with_masses(
        "junction_tau_s = 0.5",
        "case_j_per_c = 1e7",
        "sink_j_per_c = 1e7",
    );
    let mut u = SimUnit::build(&d, 7, &[], UnitModel::default()).unwrap();
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 1.0));
    let (w, ta) = (op.pass_w, u.params().ambient_c);
    assert!(w > 5.0, "{w}");
    u.heat(op, 0.5);
    let rise = u.thermal().pass_junction_c - ta;
    let want = w * d.pass.theta_jc * (1.0 - (-1.0f64).exp());
    assert!((rise - want).abs() <= 0.005 * want, "{rise} vs {want}");
    // Case stage: with the junction's capacity made negligible (tau 0.1 ms) and the heatsink's
    // huge, all of P flows into the case, which rises as P theta_cs (1 - e^(-t/tau_c)),
    // tau_c = theta_cs C_case = 0.2 x 10 = 2 s, while the junction sits P theta_jc above it at
    // once: the case lags the junction.
    let d = lab_with_masses(
        "junction_tau_s = 1e-4",
        "case_j_per_c = 10",
        "sink_j_per_c = 1e7",
    );
    let mut u = SimUnit::build(&d, 7, &[], UnitModel::default()).unwrap();
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 1.0));
    let w = op.pass_w;
    let tau_c = d.pass.theta_cs * 10.0;
    for (t, dt) in [(0.5, 0.5), (2.0, 1.5), (6.0, 4.0)] {
        u.heat(op, dt);
        let th = u.thermal();
        let case_want = w * d.pass.theta_cs * (1.0 - (-t / tau_c).exp());
        assert!(
            (th.case_c - ta - case_want).abs() <= 0.005 * case_want,
            "at {t} s: case {} vs {}",
            th.case_c - ta,
            case_want
        );
        let over_case = th.pass_junction_c - th.case_c;
        assert!(
            (over_case - w * d.pass.theta_jc).abs() <= 0.005 * w * d.pass.theta_jc,
            "at {t} s: junction over case {over_case}"
        );
    }
    // On the sample as drawn the case lags too: one junction time constant into a held
    // dissipation the case has taken under a tenth of the junction's rise (its capacity is
    // 14 times the junction's, C_j = 0.5 s / 0.7 degC/W).
    let d = lab();
    let mut u = SimUnit::build(&d, 7, &[], UnitModel::default()).unwrap();
    let op = u.operating_point(&load(LoadMode::ConstantCurrent, 1.0));
    u.heat(op, 0.5);
    let th = u.thermal();
    assert!(th.case_c - ta < 0.1 * (th.pass_junction_c - ta), "{th:?}");
}

#[test]
fn the_knee_widens_with_the_junctions_that_set_it() {
    // Shockley's law for n junctions in series: the string's drop changes by n N kT/q per
    // e-fold of current, so on the upper branch of the knee (module doc)
    // V0 - R_out I - V = dV_sat exp((I - I_L) R_s / w) with width w = n N kT/q. The width is
    // read back from the unit's characteristic at a 0.5 % and a 2 % output drop, fed from a
    // 40 V source so that headroom never cuts in, for the designed string of three diodes and
    // for a unit built with one diode more; a limiter transistor's knee is one junction wide.
    let width_of = |d: &Design, faults: &[UnitFault]| {
        let u = SimUnit::build(d, 7, faults, UnitModel::default()).unwrap();
        let c = Controls {
            source: SourceSetting {
                in_use: true,
                volts: 40.0,
                output_on: true,
            },
            ..Controls::default()
        };
        let v0 = u.operating_point(&c).vout;
        let t = u.truth();
        let (rs, ro) = (u.params().r_sense, u.model().output_resistance);
        let dv_sat = u.model().knee_sat_fraction * v0;
        let widths: Vec<f64> = [0.995, 0.98]
            .iter()
            .map(|f| {
                let v = f * v0;
                let i = u.supply_current_at(&c, v);
                (i - t.limit_line_current) * rs / ((v0 - ro * i - v) / dv_sat).ln()
            })
            .collect();
        (u, widths)
    };
    let d = lab();
    for (faults, n) in [(vec![], 3.0), (vec![UnitFault::DiodeDelta(1)], 4.0)] {
        let (u, widths) = width_of(&d, &faults);
        assert_eq!(u.params().diodes as f64, n);
        let want = n * thermal_voltage(u.params().ambient_c);
        for w in widths {
            assert!(
                (w - want).abs() <= 0.01 * want,
                "{n} diodes: {w} V vs {want} V"
            );
        }
        assert!((u.truth().knee_width_v - want).abs() < 1e-12);
    }
    // A limiter transistor: one junction (the foldback sample's knee on its limit line at the
    // set output, where the divider's share is fixed).
    let f = fold();
    let u = SimUnit::build(&f, 7, &[], UnitModel::default()).unwrap();
    assert!((u.truth().knee_width_v - thermal_voltage(u.params().ambient_c)).abs() < 1e-12);
    // The one-junction model ignores the count.
    let one = one_junction_unit(&d);
    assert!((one.truth().knee_width_v - thermal_voltage(one.params().ambient_c)).abs() < 1e-12);
}

#[test]
fn clamp_diodes_sit_where_the_design_mounts_them() {
    // The design model keeps the clamp's junctions at ambient, or at the heatsink's
    // temperature with `clamp_mount = "heatsink"` (design::heating); the unit does the same.
    // On the heatsink the string's threshold follows the junction law at the sink's
    // temperature: V_sense = n (V_F + tc (T_sink - 25)) - m (V_BE + tc (T_j - 25)).
    let d = lab();
    let mut u = unit(&d, &[]);
    let short = load(LoadMode::ConstantVoltage, 0.0);
    u.advance(&short, 60.0);
    assert_eq!(u.thermal().clamp_junction_c, u.params().ambient_c);
    let text = include_str!("../../../samples/teaching-lab-0-20v.toml")
        .replace("diodes = 3\n", "diodes = 3\nclamp_mount = \"heatsink\"\n");
    let d = Design::parse(&text, "lab-on-sink").unwrap();
    let mut u = unit(&d, &[]);
    let op = u.advance(&short, 60.0);
    let th = u.thermal();
    assert!(th.sink_c > u.params().ambient_c + 1.0, "{th:?}");
    assert_eq!(th.clamp_junction_c, th.sink_c);
    let p = u.params();
    let tc = d.environment.junction_tempco_mv_per_c * 1e-3;
    let vs = p.diodes as f64 * (p.diode_vf + tc * (th.sink_c - 25.0))
        - 2.0 * (p.pass_vbe + tc * (th.pass_junction_c - 25.0));
    assert!(
        (op.iout - vs / p.r_sense).abs() < 1e-3 * op.iout,
        "{} vs {}",
        op.iout,
        vs / p.r_sense
    );
}
