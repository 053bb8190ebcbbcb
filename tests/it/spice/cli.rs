//! `regulus design FILE --netlist/--simulate/--simulated-csv`, run as the built binary in a
//! temporary folder.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn sample(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("samples")
        .join(name)
}

fn regulus(args: &[&str], path_env: Option<&Path>) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_regulus"));
    c.args(args);
    if let Some(p) = path_env {
        c.env("PATH", p);
    }
    match c.output() {
        Ok(o) => o,
        Err(e) => panic!("running regulus: {e}"),
    }
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).to_string()
}

const FOLDBACK: &str = "fixed-12v-3a-foldback.toml";

#[test]
fn netlist_flag_writes_a_netlist_and_keeps_the_exit_code() {
    let dir = tempfile::tempdir().expect("tempdir");
    let out = dir.path().join("unit.cir");
    let f = sample(FOLDBACK);
    let f = f.to_str().expect("path");
    let plain = regulus(&["design", f, "--samples", "200"], None);
    let o = regulus(
        &[
            "design",
            f,
            "--samples",
            "200",
            "--netlist",
            out.to_str().expect("path"),
        ],
        None,
    );
    assert_eq!(o.status.code(), plain.status.code(), "{}", text(&o.stderr));
    // The design table is printed unchanged before anything else.
    assert_eq!(text(&o.stdout), text(&plain.stdout));
    let n = std::fs::read_to_string(&out).expect("netlist written");
    assert!(n.starts_with("* regulus: DC load sweep of \"Fixture rail 12 V / 3 A"));
    assert!(n.ends_with(".end\n"));
    assert!(text(&o.stderr).contains("netlist written to"));
}

#[test]
fn simulate_without_ngspice_says_how_to_install_and_keeps_the_exit_code() {
    let empty = tempfile::tempdir().expect("tempdir");
    let f = sample(FOLDBACK);
    let f = f.to_str().expect("path");
    let plain = regulus(&["design", f, "--samples", "200"], Some(empty.path()));
    let o = regulus(
        &["design", f, "--samples", "200", "--simulate"],
        Some(empty.path()),
    );
    assert_eq!(o.status.code(), plain.status.code());
    let err = text(&o.stderr);
    assert!(err.contains("simulator check skipped"), "{err}");
    assert!(err.contains("apt-get install ngspice"), "{err}");
    assert_eq!(text(&o.stdout), text(&plain.stdout));
}

fn have_ngspice() -> bool {
    match Command::new("ngspice").arg("-v").output() {
        Ok(_) => true,
        Err(e) => {
            if std::env::var_os("CI").is_some() {
                panic!("CI is set but ngspice cannot be started: {e}");
            }
            eprintln!("simulator check skipped: ngspice not found ({e})");
            false
        }
    }
}

#[test]
fn simulate_prints_the_comparison_and_saves_the_curve() {
    if !have_ngspice() {
        return;
    }
    let dir = tempfile::tempdir().expect("tempdir");
    let csv = dir.path().join("curve.csv");
    let f = sample(FOLDBACK);
    let o = regulus(
        &[
            "design",
            f.to_str().expect("path"),
            "--samples",
            "200",
            "--simulate",
            "--simulated-csv",
            csv.to_str().expect("path"),
        ],
        None,
    );
    let out = text(&o.stdout);
    assert!(out.contains("simulated with ngspice-"), "{out}");
    for row in [
        "output",
        "limit knee (2 % drop)",
        "limit knee (two-line fit)",
        "short-circuit current",
    ] {
        assert!(out.contains(row), "{row}: {out}");
    }
    let pts = regulus::spice::read_curve_csv(&csv).expect("curve csv");
    assert_eq!(pts.len(), 2001);
    let first = std::fs::read_to_string(&csv).expect("csv");
    assert!(first.starts_with("current [A],voltage [V]\n"));
}

#[test]
fn json_output_stays_one_json_object_with_simulate() {
    if !have_ngspice() {
        return;
    }
    let f = sample(FOLDBACK);
    let o = regulus(
        &[
            "design",
            f.to_str().expect("path"),
            "--samples",
            "200",
            "--json",
            "--simulate",
        ],
        None,
    );
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("stdout is JSON");
    assert!(v.get("limit_current").is_some());
    assert!(text(&o.stderr).contains("simulated with ngspice-"));
}

#[test]
fn a_design_without_a_positive_output_cannot_be_exported_and_says_why() {
    // A wiper supply evaluated at 0 V has no knee to sweep through: usage error (exit 2).
    let dir = tempfile::tempdir().expect("tempdir");
    let f = dir.path().join("zero.toml");
    let toml = r#"
[design]
name = "zero setting"
[input]
kind = "dc"
volts = 20.0
[reference]
volts = 5.0
adjust = "wiper"
[feedback]
top = { ohms = 10000 }
bottom = { ohms = 10000 }
[pass]
stage = "darlington"
power_rating_w = 100
theta_jc = 1
[limit]
clamp = "transistor"
sense = { ohms = 0.5 }
[load]
max_current_a = 1.0
output_setting_v = 0.0
"#;
    std::fs::write(&f, toml).expect("write");
    let out = dir.path().join("z.cir");
    let o = regulus(
        &[
            "design",
            f.to_str().expect("path"),
            "--samples",
            "100",
            "--netlist",
            out.to_str().expect("path"),
        ],
        None,
    );
    assert_eq!(o.status.code(), Some(2));
    let err = text(&o.stderr);
    assert!(
        err.contains("output at the evaluated setting is 0"),
        "{err}"
    );
    assert!(!out.exists());
}
