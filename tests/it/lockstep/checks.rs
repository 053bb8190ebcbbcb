//! The bench file against the plan, before any port opens: a step needing a command the
//! instrument lacks, or a setpoint its template would lose, is a configuration error (exit 2)
//! naming the bench file's place, the instrument and the step.

use std::process::Command;

fn sample(name: &str) -> String {
    format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"))
}

/// A load on a port nothing listens on: opening it would fail (exit 3), so exit 2 proves the
/// check ran before any port opened.
fn bench(commands: &str) -> String {
    format!(
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\ntcp = {{ host = \"127.0.0.1\", port = 9 }}\n\n[[instrument]]\nname = \"cheap-load\"\nroles = [\"load\"]\ntcp = {{ host = \"127.0.0.1\", port = 9 }}\n[instrument.commands]\n{commands}load_input_on = \"INP 1\"\nload_input_off = \"INP 0\"\n"
    )
}

const CR_PLAN: &str = "name = \"cr\"\nsettle = \"50 ms\"\n\n[[step]]\nkind = \"load_sweep\"\nfrom = \"10 % of max_load\"\nto = \"95 % of max_load\"\npoints = 3\n\n[[step]]\nkind = \"limit_trace\"\nmode = \"cr\"\nfrom = \"100 ohm\"\nto = \"10 ohm\"\npoints = 4\n";

fn run(bench_text: &str, plan_text: &str) -> (Option<i32>, String) {
    let dir = tempfile::tempdir().unwrap();
    let b = dir.path().join("bench.toml");
    let p = dir.path().join("plan.toml");
    std::fs::write(&b, bench_text).unwrap();
    std::fs::write(&p, plan_text).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["run", "--yes", "--unit", "CK-1", "--design"])
        .arg(sample("teaching-lab-0-20v.toml"))
        .arg("--bench")
        .arg(&b)
        .arg("--plan")
        .arg(&p)
        .arg("--records")
        .arg(dir.path().join("records"))
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

// Regression: a plan with constant-resistance steps on a load without a resistance command
// passed the pre-run check and aborted at step 2 (exit 3).
#[test]
fn a_step_needing_a_missing_command_is_refused_before_the_run() {
    let (code, err) = run(&bench("load_set_current = \"CURR {value:.4}\"\n"), CR_PLAN);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("bench.toml:7:1"), "{err}");
    assert!(err.contains("'cheap-load'"), "{err}");
    assert!(err.contains("step 2"), "{err}");
    assert!(err.contains("load_set_resistance"), "{err}");
}

// Regression: `{value:d}` sent 0 for every fractional sweep point and the run passed;
// `{value*1e308:.4}` sent a 307-digit number.
#[test]
fn templates_that_lose_setpoints_are_refused_before_the_run() {
    let plan = "name = \"cc\"\nsettle = \"50 ms\"\n\n[[step]]\nkind = \"load_sweep\"\nfrom = \"10 % of max_load\"\nto = \"95 % of max_load\"\npoints = 3\n";
    let (code, err) = run(&bench("load_set_current = \"CURR {value:d}\"\n"), plan);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("loses it"), "{err}");
    assert!(err.contains("load_set_current"), "{err}");
    let (code, err) = run(
        &bench("load_set_current = \"CURR {value*1e308:.4}\"\n"),
        plan,
    );
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("load_set_current"), "{err}");
    // The same bench with a template that keeps the setpoints passes the check and fails
    // only when it tries to connect (nothing listens): exit 4, a station error.
    let (code, err) = run(&bench("load_set_current = \"CURR {value:.4}\"\n"), plan);
    assert_eq!(code, Some(4), "{err}");
}
