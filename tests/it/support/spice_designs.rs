//! Invented test designs, one per limit topology, shared by the simulator tests. Values are
//! chosen as a designer would (stiff foldback divider, drive within an op-amp's reach); they are
//! not real products.

#![allow(dead_code)]

use regulus::design::Design;
use std::path::Path;

const COMMON_TAIL: &str = r#"
[environment]
ambient_c = 25
ambient_min_c = 15
ambient_max_c = 40

[rules]
monte_carlo_samples = 500
seed = 3
"#;

fn design(name: &str, body: &str) -> Design {
    let text = format!("[design]\nname = \"{name}\"\ndemo = true\n{body}{COMMON_TAIL}");
    match Design::parse(&text, name) {
        Ok(d) => d,
        Err(e) => panic!("test design {name} does not parse: {e}"),
    }
}

/// Diode string (2 diodes) across a single pass transistor: V_sense = 2 x 0.66 - 0.62 = 0.70 V,
/// I_lim = 0.70 / 1.0 = 0.70 A at 10 V, DC input, amplifier supplied from the input.
pub fn diode_single() -> Design {
    design(
        "diode string, single pass",
        r#"
[input]
kind = "dc"
volts = 16.0
[reference]
volts = 2.5
[feedback]
top = { ohms = 7500, tolerance_pct = 1 }
bottom = { ohms = 2500, tolerance_pct = 1 }
[pass]
stage = "single"
vbe_v = 0.62
power_rating_w = 40
theta_jc = 1.5
theta_sa = 2.0
[limit]
clamp = "diode_string"
sense = { ohms = 1.0, tolerance_pct = 1 }
diodes = 2
diode_vf_v = 0.66
[load]
max_current_a = 0.5
"#,
    )
}

/// Diode string (3 diodes) across a Darlington: V_sense = 3 x 0.70 - 2 x 0.60 = 0.90 V,
/// I_lim = 0.90 / 0.5 = 1.8 A at 10 V, with an aux rail.
pub fn diode_darlington() -> Design {
    design(
        "diode string, Darlington",
        r#"
[input]
kind = "dc"
volts = 24.0
[reference]
volts = 5.0
[feedback]
top = { ohms = 10000, tolerance_pct = 1 }
bottom = { ohms = 10000, tolerance_pct = 1 }
[pass]
stage = "darlington"
vbe_v = 0.60
power_rating_w = 115
theta_jc = 1.5
theta_sa = 0.5
[limit]
clamp = "diode_string"
sense = { ohms = 0.5, tolerance_pct = 1 }
diodes = 3
diode_vf_v = 0.70
[load]
max_current_a = 1.5
[aux]
volts = 24.0
current_a = 0.02
transistor_rating_w = 0.8
"#,
    )
}

/// Transistor limiter, single pass: I_lim = 0.60 / 1.2 = 0.5 A at 5 V.
pub fn transistor_single() -> Design {
    design(
        "transistor limiter, single pass",
        r#"
[input]
kind = "dc"
volts = 12.0
[reference]
volts = 1.25
[feedback]
top = { ohms = 3750, tolerance_pct = 1 }
bottom = { ohms = 1250, tolerance_pct = 1 }
[pass]
stage = "single"
vbe_v = 0.68
power_rating_w = 40
theta_jc = 1.5
theta_sa = 2.0
[limit]
clamp = "transistor"
sense = { ohms = 1.2, tolerance_pct = 1 }
vbe_v = 0.60
[load]
max_current_a = 0.4
"#,
    )
}

/// Transistor limiter, Darlington: I_lim = 0.66 / 0.22 = 3.0 A at 15 V, full-wave input.
pub fn transistor_darlington() -> Design {
    design(
        "transistor limiter, Darlington",
        r#"
[input]
kind = "full_wave"
secondary_vrms = 18.0
reservoir_uf = 10000
[reference]
volts = 5.0
[feedback]
top = { ohms = 20000, tolerance_pct = 1 }
bottom = { ohms = 10000, tolerance_pct = 1 }
[pass]
stage = "darlington"
vbe_v = 0.65
power_rating_w = 150
theta_jc = 0.8
theta_sa = 0.4
[limit]
clamp = "transistor"
sense = { ohms = 0.22, tolerance_pct = 1 }
vbe_v = 0.66
[load]
max_current_a = 2.5
"#,
    )
}

/// Foldback, single pass, stiff divider (k = 2200 / 2300): at 5 V,
/// I_knee = (0.65 + (1 - k) 5) / (k 1.5) = 0.61 A, I_sc = 0.65 / (k 1.5) = 0.45 A.
pub fn foldback_single() -> Design {
    design(
        "foldback, single pass",
        r#"
[input]
kind = "dc"
volts = 12.0
[reference]
volts = 2.5
[feedback]
top = { ohms = 10000, tolerance_pct = 1 }
bottom = { ohms = 10000, tolerance_pct = 1 }
[pass]
stage = "single"
vbe_v = 0.65
power_rating_w = 40
theta_jc = 1.5
theta_sa = 2.0
[limit]
clamp = "foldback"
sense = { ohms = 1.5, tolerance_pct = 1 }
vbe_v = 0.65
divider_top = { ohms = 100, tolerance_pct = 1 }
divider_bottom = { ohms = 2200, tolerance_pct = 1 }
[load]
max_current_a = 0.4
"#,
    )
}

/// Load one of the repository's sample designs.
pub fn sample(file: &str) -> Design {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(file);
    match Design::load(&path) {
        Ok(d) => d,
        Err(e) => panic!("sample {} does not load: {e}", path.display()),
    }
}

/// The diode-string sample at 40 degC ambient: the model moves every junction by the textbook
/// -2 mV/degC, the simulator by its own junction temperature law.
pub fn sample_diode_hot() -> Design {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(SAMPLE_DIODE);
    let text = match std::fs::read_to_string(&path) {
        Ok(t) => t,
        Err(e) => panic!("{}: {e}", path.display()),
    };
    let text = text.replacen("ambient_c = 25", "ambient_c = 40", 1);
    match Design::parse(&text, "hot sample") {
        Ok(d) => d,
        Err(e) => panic!("{e}"),
    }
}

pub const SAMPLE_FOLDBACK: &str = "fixed-12v-3a-foldback.toml";
pub const SAMPLE_DIODE: &str = "teaching-lab-0-20v.toml";

/// Every design the simulator tests cover: (label, design).
pub fn all() -> Vec<(&'static str, Design)> {
    vec![
        ("diode string, single", diode_single()),
        ("diode string, Darlington", diode_darlington()),
        ("transistor limiter, single", transistor_single()),
        ("transistor limiter, Darlington", transistor_darlington()),
        ("foldback, single", foldback_single()),
        ("sample: foldback, Darlington", sample(SAMPLE_FOLDBACK)),
        (
            "sample: diode string, Darlington, wiper",
            sample(SAMPLE_DIODE),
        ),
        (
            "sample: diode string at 40 degC ambient",
            sample_diode_hot(),
        ),
    ]
}
