//! Netlist structure, without the simulator: every element of each topology is present, the
//! junction models are parameterised so that Shockley's law gives the design file's drops at
//! the matched currents, and the header says which design, which setting and how models were
//! matched.

use crate::support::spice_designs;

use regulus::design::{Clamp, Design, Stage};
use regulus::spice::netlist::{junction_drop, saturation_current, thermal_voltage};
use regulus::spice::{build, ModelMode, NetlistOptions};

fn netlist(d: &Design, models: ModelMode) -> regulus::spice::Netlist {
    match build(d, &NetlistOptions { models }) {
        Ok(n) => n,
        Err(e) => panic!("{}: {e}", d.design.name),
    }
}

/// Element lines (not comments or dot-commands), by name.
fn element<'a>(text: &'a str, name: &str) -> Option<&'a str> {
    text.lines()
        .find(|l| l.split_whitespace().next() == Some(name))
}

/// The IS value of a `.model NAME ...(IS=...)` line.
fn model_is(text: &str, name: &str) -> Option<f64> {
    let line = text
        .lines()
        .find(|l| l.starts_with(&format!(".model {name} ")))?;
    let start = line.find("IS=")? + 3;
    let rest = &line[start..];
    let end = rest.find([' ', ')']).unwrap_or(rest.len());
    rest[..end].parse().ok()
}

#[test]
fn thermal_voltage_at_25_c_is_25_69_mv() {
    // kT/q at 298.15 K = 25.693 mV (CODATA constants; 25.69 mV to four figures).
    assert!((thermal_voltage(25.0) - 0.025693).abs() < 1e-6);
    // Shockley: IS from (V, I) and back.
    let vt = thermal_voltage(25.0);
    let is = saturation_current(0.65, 1.5, vt);
    assert!((junction_drop(is, 1.5, vt) - 0.65).abs() < 1e-12);
    // A decade of current moves the drop by Vt ln 10 = 59.2 mV (textbook).
    assert!((junction_drop(is, 15.0, vt) - 0.65 - vt * 10f64.ln()).abs() < 1e-6);
}

#[test]
fn every_topology_has_its_elements_models_and_sweep() {
    for (label, d) in spice_designs::all() {
        let n = netlist(&d, ModelMode::Matched);
        let t = &n.text;
        for name in [
            "Vin", "Vref", "Rfbt", "Rfbb", "Bamp", "Bdrv", "Qp1", "Rsense", "Vmeas", "Vsw", "Bload",
        ] {
            assert!(element(t, name).is_some(), "{label}: {name} missing\n{t}");
        }
        assert_eq!(
            element(t, "Qp2").is_some(),
            d.pass.stage == Stage::Darlington,
            "{label}"
        );
        assert_eq!(element(t, "Vaux").is_some(), d.aux.is_some(), "{label}");
        match d.limit.clamp {
            Clamp::DiodeString => {
                let n_d = d.limit.diodes.expect("diodes");
                for i in 1..=n_d {
                    assert!(element(t, &format!("Dc{i}")).is_some(), "{label}: Dc{i}");
                }
                assert!(element(t, &format!("Dc{}", n_d + 1)).is_none(), "{label}");
                // The string runs from the drive node to the output.
                assert!(element(t, "Dc1").expect("Dc1").contains(" drive "));
                assert!(element(t, &format!("Dc{n_d}"))
                    .expect("last")
                    .contains(" out "));
            }
            Clamp::Transistor => {
                assert_eq!(element(t, "Qlim"), Some("Qlim drive e out QLIM"), "{label}");
            }
            Clamp::Foldback => {
                assert_eq!(
                    element(t, "Qlim"),
                    Some("Qlim drive fbk out QLIM"),
                    "{label}"
                );
                assert!(element(t, "Rfdt").expect("Rfdt").starts_with("Rfdt e fbk "));
                assert!(element(t, "Rfdb").expect("Rfdb").starts_with("Rfdb fbk 0 "));
            }
        }
        // Sense resistor value and the sweep from open circuit to short.
        assert_eq!(
            element(t, "Rsense"),
            Some(format!("Rsense e out {}", d.limit.sense.ohms).as_str()),
            "{label}"
        );
        assert!(t.contains("\n.dc Vsw 1 0 -"), "{label}");
        assert!(t.contains("\n.print dc i(Vmeas) v(out)\n"), "{label}");
        assert!(t.contains("\n.options tnom=25\n"), "{label}");
        assert!(t.ends_with(".end\n"), "{label}");
    }
}

#[test]
fn matched_models_give_the_design_drops_at_the_currents_each_junction_carries() {
    let vt = thermal_voltage(25.0);
    for (label, d) in spice_designs::all() {
        let n = netlist(&d, ModelMode::Matched);
        let i_lim = n.point.limit_current_a;
        let beta = 100.0;
        let alpha = beta / (beta + 1.0);
        // Expected collector (or diode) current of each junction at the limit (textbook BJT
        // relations I_C = alpha I_E, I_B = I_E / (beta + 1)).
        let mut expected: Vec<(&str, f64, f64)> = Vec::new();
        let base_in = match d.pass.stage {
            Stage::Single => {
                expected.push(("QP1", d.pass.vbe_v, alpha * i_lim));
                i_lim / (beta + 1.0)
            }
            Stage::Darlington => {
                expected.push(("QP2", d.pass.vbe_v, alpha * i_lim));
                expected.push(("QP1", d.pass.vbe_v, alpha * i_lim / (beta + 1.0)));
                i_lim / (beta + 1.0) / (beta + 1.0)
            }
        };
        let clamp_i = n.point.drive_limit_a - base_in;
        match d.limit.clamp {
            Clamp::DiodeString => expected.push(("DCLAMP", d.limit.diode_vf_v, clamp_i)),
            _ => expected.push(("QLIM", d.limit.vbe_v, clamp_i)),
        }
        for (model, drop, current) in expected {
            let is = model_is(&n.text, model)
                .unwrap_or_else(|| panic!("{label}: {model} has no IS\n{}", n.text));
            let v = junction_drop(is, current, vt);
            // The netlist writes 6 significant digits: the drop comes back within 1 uV.
            assert!(
                (v - drop).abs() < 1e-6,
                "{label}: {model} gives {v} V at {current} A, design says {drop} V"
            );
            // And the header states the match.
            assert!(
                n.text.contains(&format!("*   {model:<7} {drop} V at ")),
                "{label}: {model}"
            );
        }
        // The Darlington's two junctions differ by the ratio of their currents.
        if d.pass.stage == Stage::Darlington {
            let r = model_is(&n.text, "QP2").expect("QP2") / model_is(&n.text, "QP1").expect("QP1");
            assert!((r - (beta + 1.0)).abs() < 1e-3, "{label}: {r}");
        }
    }
}

#[test]
fn default_models_carry_no_parameters() {
    let d = spice_designs::sample(spice_designs::SAMPLE_FOLDBACK);
    let n = netlist(&d, ModelMode::SimulatorDefaults);
    for m in ["QP1", "QP2", "QLIM"] {
        assert!(
            n.text.contains(&format!("\n.model {m} NPN\n")),
            "{m}\n{}",
            n.text
        );
    }
    assert!(!n.text.contains("IS="));
    assert!(n.text.contains("the simulator's defaults"));
}

#[test]
fn header_names_design_setting_and_model_matching() {
    let d = spice_designs::sample(spice_designs::SAMPLE_DIODE);
    let n = netlist(&d, ModelMode::Matched);
    let head: Vec<&str> = n.text.lines().take_while(|l| l.starts_with('*')).collect();
    let head = head.join("\n");
    assert!(head.starts_with(
        "* regulus: DC load sweep of \"Teaching-lab bench supply 0-20 V / 1.2 A (demo)\" (revision B)"
    ));
    // The wiper sample is evaluated at its highest output: 5.1 V x (1 + 30k / 10k) = 20.4 V.
    assert!(
        head.contains("output 20.4 V at the evaluated setting"),
        "{head}"
    );
    // Full-wave input: 26 V RMS x sqrt 2 - 1.4 V = 35.37 V at no load.
    assert!(head.contains("input 35.3696 V DC"), "{head}");
    assert!(head.contains("Junction models: matched"), "{head}");
    assert!(head.contains("V = N Vt ln(I/IS + 1)"), "{head}");
    assert!(head.contains("ngspice -b"), "{head}");
    assert!(head.contains("aux rail (26 V)"), "{head}");
    // The wiper becomes two fixed resistors: 100 % of travel.
    assert!(n.text.contains("\nRwpt ref refw 0.001\n"));
    assert!(n.text.contains("\nRwpb refw 0 10000\n"));
    assert!(n.text.contains("v(refw) - v(fb)"));
    // Every comment line is a SPICE comment; the title line is the first line.
    assert!(n.text.lines().next().expect("title").starts_with("* "));
}

#[test]
fn a_pot_in_the_divider_becomes_fixed_resistors_for_the_setting() {
    // V_out = 2.5 V (1 + top / 2.5k); output_setting_v = 12.5 V needs top = 10 kohm on a
    // 20 kohm pot.
    let text = r#"
[design]
name = "pot top"
[input]
kind = "dc"
volts = 20.0
[reference]
volts = 2.5
[feedback]
top = { ohms = 20000, pot = true, min_ohms = 1000 }
bottom = { ohms = 2500 }
[pass]
stage = "darlington"
power_rating_w = 100
theta_jc = 1
[limit]
clamp = "transistor"
sense = { ohms = 0.5 }
[load]
max_current_a = 1.0
output_setting_v = 12.5
"#;
    let d = Design::parse(text, "pot.toml").expect("design");
    let n = netlist(&d, ModelMode::Matched);
    assert_eq!(element(&n.text, "Rfbt"), Some("Rfbt out fb 10000"));
    assert_eq!(element(&n.text, "Rfbb"), Some("Rfbb fb 0 2500"));
    assert!(n.text.contains("output 12.5 V at the evaluated setting"));
    // No aux rail: the amplifier is supplied from the input.
    assert!(element(&n.text, "Bdrv")
        .expect("Bdrv")
        .starts_with("Bdrv in drive "));
}

#[test]
fn spice_temperature_law_gives_about_minus_2_mv_per_degree() {
    use regulus::spice::netlist::spice_drop_at;
    // At the matching temperature the drop is the design's.
    assert!((spice_drop_at(0.65, 0.01, 25.0) - 0.65).abs() < 1e-12);
    // A silicon junction's drop falls about 2 mV per degC (common practice):
    // SPICE's law (EG = 1.11 eV, XTI = 3) gives about -1.8 mV/degC at 0.65 V.
    for i in [1e-3, 1e-2, 1.0] {
        let slope = (spice_drop_at(0.65, i, 35.0) - 0.65) / 10.0;
        assert!(
            (-2.3e-3..-1.5e-3).contains(&slope),
            "{slope} V/degC at {i} A"
        );
    }
}
