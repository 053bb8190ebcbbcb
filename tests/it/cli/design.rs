//! Runs the built `regulus` binary on the sample designs and on broken design files, checking
//! exit codes, JSON keys and that errors name the file, line and column.

use std::path::{Path, PathBuf};
use std::process::Command;

fn regulus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
}

fn sample(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(name)
}

fn get<'a>(v: &'a serde_json::Value, path: &str) -> &'a serde_json::Value {
    path.split('.').fold(v, |acc, k| &acc[k])
}

#[test]
fn json_has_the_documented_keys_in_si_units() {
    for name in ["teaching-lab-0-20v.toml", "fixed-12v-3a-foldback.toml"] {
        let out = regulus()
            .args(["design", "--json", "--samples", "2000"])
            .arg(sample(name))
            .output()
            .unwrap();
        // The teaching-lab sample fails its checks (self-heated short above T_j max, aux rail
        // dropout at the lowest input): exit 1; the foldback sample passes: exit 0.
        let want = if name.starts_with("teaching") { 1 } else { 0 };
        assert_eq!(
            out.status.code(),
            Some(want),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        for key in [
            "thermal.self_heated.short_nominal.pass_junction_c",
            "thermal.self_heated.short_worst.current_a",
            "thermal.self_heated.knee_current.max",
            "thermal.max_theta_sa",
            "vout.min",
            "vout.max",
            "limit_current.nominal",
            "limit_current.worst_case.min",
            "limit_current.worst_case.max",
            "limit_current.monte_carlo.p_low",
            "limit_current.monte_carlo.p_high",
            "short_circuit_current.nominal",
            "dissipation.pass_device.watts",
            "dissipation.pass_device.rating_watts",
            "dissipation.sense_resistor.watts",
            "dissipation.sense_resistor.rating_watts",
            "headroom_volts",
            "junction_temp_c",
        ] {
            assert!(
                get(&v, key).is_number(),
                "{name}: {key} missing or not a number"
            );
        }
    }
    // The 12 V foldback sample: 5.0 V x (1 + 14k / 10k) = 12.0 V (non-inverting gain).
    let out = regulus()
        .args(["design", "--json", "--samples", "500"])
        .arg(sample("fixed-12v-3a-foldback.toml"))
        .output()
        .unwrap();
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!((get(&v, "vout.max").as_f64().unwrap() - 12.0).abs() < 1e-9);
}

#[test]
fn table_shows_engineering_units_and_verdicts() {
    let out = regulus()
        .args(["design", "--samples", "1000"])
        .arg(sample("fixed-12v-3a-foldback.toml"))
        .output()
        .unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("limit knee"));
    assert!(text.contains("12.0 V"));
    assert!(text.contains(" A "));
    assert!(text.contains("overall: "));
    assert!(text.lines().any(|l| l.trim_start().starts_with("ok ")));
}

fn broken(dir: &Path, name: &str, text: &str) -> (Option<i32>, String) {
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    let out = regulus().arg("design").arg(&path).output().unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn teaching() -> String {
    std::fs::read_to_string(sample("teaching-lab-0-20v.toml")).unwrap()
}

#[test]
fn bad_files_name_file_line_and_column_and_exit_2() {
    let dir = tempfile::tempdir().unwrap();
    let cases: Vec<(&str, String, &str)> = vec![
        // (file name, content, expected words in the message)
        (
            "unknown_key.toml",
            teaching().replace("[load]\n", "[load]\nmaximum_amps = 3\n"),
            "unknown field",
        ),
        (
            "zero_sense.toml",
            teaching().replace("ohms = 0.39", "ohms = 0.0"),
            "greater than zero",
        ),
        (
            "negative.toml",
            teaching().replace("ohms = 30000", "ohms = -30000"),
            "greater than zero",
        ),
        (
            "tolerance.toml",
            teaching().replace(
                "sense = { ohms = 0.39, tolerance_pct = 5",
                "sense = { ohms = 0.39, tolerance_pct = 100",
            ),
            "below 100 %",
        ),
        (
            "no_conduct.toml",
            teaching().replace("diodes = 3", "diodes = 2"),
            "cannot conduct",
        ),
        (
            "unreachable.toml",
            std::fs::read_to_string(sample("fixed-12v-3a-foldback.toml"))
                .unwrap()
                .replace(
                    "[load]\nmax_current_a = 3.0",
                    "[load]\nmax_current_a = 3.0\noutput_setting_v = 3.0",
                )
                .replace(
                    "[reference]\nvolts = 5.0",
                    "[reference]\nvolts = 5.0\nadjust = \"fixed\"",
                ),
            "cannot reach 3 V",
        ),
        (
            "missing.toml",
            teaching().replace("max_current_a = 1.2\n", ""),
            "missing field",
        ),
        ("syntax.toml", "[design\nname = 1".to_string(), "invalid"),
        (
            "minus_inf_ambient.toml",
            teaching().replace("ambient_min_c = 15", "ambient_min_c = -inf"),
            "write, for example",
        ),
        (
            "huge_reference.toml",
            teaching().replace("volts = 5.1", "volts = -1e308"),
            "reference voltage must be a number from",
        ),
    ];
    for (name, text, want) in cases {
        let (code, err) = broken(dir.path(), name, &text);
        assert_eq!(code, Some(2), "{name}: {err}");
        assert!(
            err.contains(name),
            "{name}: message must name the file: {err}"
        );
        // file:line:column
        let after = err.split(name).nth(1).unwrap_or("");
        let mut parts = after.trim_start_matches(':').splitn(3, ':');
        let line: Option<usize> = parts.next().and_then(|s| s.trim().parse().ok());
        let col: Option<usize> = parts.next().and_then(|s| s.trim().parse().ok());
        assert!(
            line.is_some() && col.is_some(),
            "{name}: no line/column in: {err}"
        );
        assert!(err.contains(want), "{name}: expected '{want}' in: {err}");
        assert!(!err.contains("panicked"), "{name}: {err}");
    }
}

#[test]
fn zero_sense_points_at_the_sense_line() {
    let dir = tempfile::tempdir().unwrap();
    let text = teaching().replace("ohms = 0.39", "ohms = 0.0");
    let line_no = text.lines().position(|l| l.starts_with("sense =")).unwrap() + 1;
    let (code, err) = broken(dir.path(), "z.toml", &text);
    assert_eq!(code, Some(2));
    assert!(err.contains(&format!("z.toml:{line_no}:")), "{err}");
}

#[test]
fn missing_file_is_a_usage_error() {
    let out = regulus()
        .args(["design", "/nonexistent/design.toml"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("/nonexistent/design.toml"), "{err}");
}

#[test]
fn size_writes_a_design_that_meets_its_target() {
    // Transistor limiter I = V_BE / R_s (textbook): 2 A + 25 % = 2.5 A from 0.65 V calls for
    // 0.26 ohm; the next E24 value down is 0.24 ohm (2.71 A nominal).
    let dir = tempfile::tempdir().unwrap();
    let out_path = dir.path().join("sized.toml");
    let out = regulus()
        .args([
            "size",
            "--current",
            "2",
            "--clamp",
            "transistor",
            "--samples",
            "1000",
            "--write",
        ])
        .arg(&out_path)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("240 mohm"), "{text}");
    let d = regulus::design::Design::load(&out_path).unwrap();
    assert_eq!(d.limit.sense.ohms, 0.24);
    let e = regulus::design::expect_with(&d, 1000, 1);
    assert!(e.limit_current.nominal >= 2.5);
    // Never overwrites.
    let again = regulus()
        .args(["size", "--current", "2", "--write"])
        .arg(&out_path)
        .output()
        .unwrap();
    assert_eq!(again.status.code(), Some(2));
}

fn size(args: &[&str]) -> (Option<i32>, String) {
    let out = regulus()
        .arg("size")
        .args(args)
        .args(["--samples", "500"])
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stdout).into_owned() + &String::from_utf8_lossy(&out.stderr),
    )
}

#[test]
fn size_evaluates_at_the_asked_output_and_states_its_rounding() {
    let (code, text) = size(&[
        "--current",
        "2",
        "--clamp",
        "foldback",
        "--short-circuit",
        "1",
        "--vout",
        "15",
        "--series",
        "E12",
    ]);
    assert_eq!(code, Some(0), "{text}");
    // Foldback knee (textbook): I_knee = (V_BE + (1 - k) V_out) / (k R_s) with the chosen
    // 680 mohm and 680 ohm / 10 kohm divider, at 15 V (not the template's 12 V).
    assert!(
        text.contains("680 mohm") && text.contains("top 680 ohm"),
        "{text}"
    );
    let k: f64 = 10_000.0 / 10_680.0;
    let knee = (0.65 + (1.0 - k) * 15.0) / (k * 0.68);
    assert!((knee - 2.52).abs() < 0.005, "{knee}");
    assert!(text.contains("2.52 A nominal"), "{text}");
    assert!(text.contains("(at 15.0 V)"), "{text}");
    assert!(!text.contains("below the rated current"), "{text}");
    // E12 parts are +-10 % parts (IEC 60063 usage), and the rounding is stated.
    assert!(text.contains("+-10 %"), "{text}");
    assert!(text.contains("rounding          nearest"), "{text}");
}

#[test]
fn size_rounds_as_asked() {
    // Transistor limiter 0.65 V / 2.5 A = 0.26 ohm: E24 next down 0.24, next up 0.27,
    // nearest 0.27 (IEC 60063 E24 table: ... 0.24, 0.27 ...; nearest on a log scale).
    for (round, want) in [
        ("down", "240 mohm"),
        ("up", "270 mohm"),
        ("nearest", "270 mohm"),
    ] {
        let (code, text) = size(&["--current", "2", "--clamp", "transistor", "--round", round]);
        assert_eq!(code, Some(0), "{text}");
        assert!(text.contains(&format!("-> {want}")), "{round}: {text}");
        assert!(text.contains("(--round)"), "{text}");
    }
}

#[test]
fn size_gives_no_advice_to_use_what_the_design_has() {
    let (_, text) = size(&["--current", "2", "--clamp", "transistor", "--margin", "0"]);
    assert!(text.contains("below the rated current"), "{text}");
    assert!(!text.contains("transistor limiter"), "{text}");
    let (_, text) = size(&[
        "--current",
        "1.2",
        "--margin",
        "0",
        "--base",
        sample("teaching-lab-0-20v.toml").to_str().unwrap(),
    ]);
    assert!(text.contains("--clamp transistor"), "{text}");
}

#[test]
fn size_write_keeps_the_base_files_comments_and_picks_a_preferred_collector_resistor() {
    let dir = tempfile::tempdir().unwrap();
    let out_path = dir.path().join("lab-sized.toml");
    let base = sample("teaching-lab-0-20v.toml");
    let out = regulus()
        .args(["size", "--current", "1.2", "--samples", "500", "--base"])
        .arg(&base)
        .arg("--write")
        .arg(&out_path)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8_lossy(&out.stdout);
    // R_c = share (V_in,nom - V_aux) / I_aux (Ohm's law): 0.5 x (26 sqrt 2 - 1.4 - 26) / 0.02
    // = 234 ohm; next down in E24 is 220 ohm, which takes 220 x 0.02 / 9.37 = 47.0 % and
    // dissipates 0.02^2 x 220 = 88 mW.
    assert!(text.contains("ideal 234 ohm -> 220 ohm"), "{text}");
    assert!(
        text.contains("47.0 %") && text.contains("88.0 mW"),
        "{text}"
    );
    let written = std::fs::read_to_string(&out_path).unwrap();
    let original = std::fs::read_to_string(&base).unwrap();
    for l in original.lines().filter(|l| l.contains('#')) {
        assert!(written.contains(l), "comment lost: {l}\n{written}");
    }
    let d = regulus::design::Design::load(&out_path).unwrap();
    assert_eq!(d.aux.as_ref().unwrap().collector_ohms, Some(220.0));
    // Diode string (3 - 2) x 0.65 V over 1.2 A + 25 % = 0.433 ohm; E24 next down: 0.43 ohm.
    assert_eq!(d.limit.sense.ohms, 0.43);
}
