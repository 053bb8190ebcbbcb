//! Shipped plans (template and samples) parse against the shipped demo designs, and
//! `regulus run` rejects bad input with exit code 2 before any port opens.

use regulus::design::{self, Design};
use regulus::plan::{Action, DesignTargets, Plan};
use std::path::Path;
use std::process::Command;

fn targets(design: &str) -> DesignTargets {
    let d = Design::load(Path::new(design)).expect("demo design loads");
    let e = design::expect_with(&d, 200, 1);
    DesignTargets::from_design(&d, &e)
}

#[test]
fn shipped_plans_parse_against_shipped_designs() {
    let plans = [
        "config/plan-template.toml",
        "samples/plans/bring-up.toml",
        "samples/plans/production.toml",
        "samples/plans/line-and-soak.toml",
    ];
    for design in [
        "samples/fixed-12v-3a-foldback.toml",
        "samples/teaching-lab-0-20v.toml",
    ] {
        let t = targets(design);
        for p in plans {
            let plan =
                Plan::load(Path::new(p), &t).unwrap_or_else(|e| panic!("{p} with {design}: {e}"));
            assert!(!plan.steps.is_empty());
        }
    }
}

#[test]
fn knee_search_defaults_follow_the_designs_limit() {
    let t = targets("samples/fixed-12v-3a-foldback.toml");
    let plan = Plan::load(Path::new("samples/plans/bring-up.toml"), &t).unwrap();
    let knee = plan
        .steps
        .iter()
        .find_map(|s| match &s.action {
            Action::KneeSearch(k) => Some(*k),
            _ => None,
        })
        .expect("bring-up has a knee search");
    assert_eq!(knee.expected_a, t.limit_current_a);
    assert!((knee.reference_a - 0.1 * t.limit_current_a).abs() < 1e-12);
    // The foldback demo's output is 5.0 V * (1 + 14 k / 10 k) = 12.0 V (textbook non-inverting amplifier gain 1 + R_top / R_bottom).
    assert!((t.vout_v - 12.0).abs() < 1e-9, "{}", t.vout_v);
}

fn regulus(args: &[&str]) -> (i32, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(args)
        .output()
        .expect("binary runs");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).to_string(),
    )
}

#[test]
fn bad_plan_exits_2_with_file_line_and_column() {
    let tmp = tempfile::tempdir().unwrap();
    let plan = tmp.path().join("bad.toml");
    std::fs::write(
        &plan,
        "name = \"x\"\n[[step]]\nkind = \"load_sweep\"\nfrom = 0\nto = \"120 % of vout\"\npoints = 3\n",
    )
    .unwrap();
    let bench = tmp.path().join("bench.toml");
    std::fs::write(&bench, "").unwrap();
    let (code, err) = regulus(&[
        "run",
        "--bench",
        bench.to_str().unwrap(),
        "--design",
        "samples/fixed-12v-3a-foldback.toml",
        "--plan",
        plan.to_str().unwrap(),
        "--unit",
        "SN-1",
        "--records",
        tmp.path().join("rec").to_str().unwrap(),
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("bad.toml:5:6"), "{err}");
    assert!(
        !tmp.path().join("rec").exists(),
        "no record for an invalid plan"
    );
}

#[test]
fn short_circuit_plan_without_terminal_or_yes_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let (code, err) = regulus(&[
        "run",
        "--bench",
        "config/bench-loopback-example.toml",
        "--design",
        "samples/fixed-12v-3a-foldback.toml",
        "--plan",
        "samples/plans/production.toml",
        "--records",
        tmp.path().to_str().unwrap(),
        "--unit",
        "SN-1",
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("CAUTION"), "{err}");
    assert!(err.contains("--yes"), "{err}");
}

#[test]
fn bench_without_the_plans_roles_exits_2_before_opening_ports() {
    let tmp = tempfile::tempdir().unwrap();
    let bench = tmp.path().join("bench.toml");
    // Only a voltmeter: the plan needs a load. The port does not exist; it must not be opened.
    std::fs::write(
        &bench,
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\ntcp = { host = \"127.0.0.1\", port = 1 }\n",
    )
    .unwrap();
    let (code, err) = regulus(&[
        "run",
        "--bench",
        bench.to_str().unwrap(),
        "--design",
        "samples/fixed-12v-3a-foldback.toml",
        "--plan",
        "samples/plans/production.toml",
        "--unit",
        "SN-1",
        "--yes",
        "--records",
        tmp.path().join("rec").to_str().unwrap(),
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("load"), "{err}");
    assert!(!tmp.path().join("rec").exists());
}
