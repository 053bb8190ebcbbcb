//! A test plan run by the `regulus` binary against the simulated bench: what the real bench
//! stack measures over pseudo-terminals and TCP agrees with the as-built unit's true values.

use crate::support::lock::serial;
use regulus::design::Design;
use regulus::sim::{SimBench, SimOptions};
use std::process::Command;

fn sample(name: &str) -> String {
    format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn col(header: &[&str], name: &str) -> usize {
    header
        .iter()
        .position(|h| *h == name)
        .unwrap_or_else(|| panic!("column {name} missing in {header:?}"))
}

#[test]
fn knee_located_through_the_bench_matches_the_true_knee() {
    let _g = serial();
    let design_path = sample("fixed-12v-3a-foldback.toml");
    let design = Design::load(std::path::Path::new(&design_path)).unwrap();
    let sim = SimBench::start(&design, SimOptions::default().seed(31)).unwrap();
    let truth = sim.truth().clone();
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    std::fs::write(&bench, sim.bench_toml()).unwrap();
    let plan = dir.path().join("plan.toml");
    std::fs::write(
        &plan,
        "name = \"knee-only\"\nsettle = \"200 ms\"\nsamples = 2\n\n[[step]]\n\
         kind = \"knee_search\"\nmode = \"cr\"\ndrop = \"2 %\"\nresolution = \"0.25 %\"\n",
    )
    .unwrap();
    let records = dir.path().join("records");
    let out = Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["run", "--unit", "SIM-0031", "--design", &design_path])
        .arg("--bench")
        .arg(&bench)
        .arg("--plan")
        .arg(&plan)
        .arg("--records")
        .arg(&records)
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    // The record layout is fixed by docs/ARCHITECTURE.md: records/<unit>/<stamp>_<plan>/.
    let unit_dir = records.join("SIM-0031");
    let run_dir = std::fs::read_dir(&unit_dir)
        .unwrap()
        .next()
        .unwrap()
        .unwrap()
        .path();
    let text = std::fs::read_to_string(run_dir.join("readings.csv")).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let (kc, sc, vc, ic) = (
        col(&header, "step_kind"),
        col(&header, "setpoint"),
        col(&header, "output_voltage [V]"),
        col(&header, "output_current [A]"),
    );
    // (load resistance, current, voltage) of each knee-search point.
    let mut pts: Vec<(f64, f64, f64)> = lines
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|f| f[kc] == "knee_search")
        .map(|f| {
            let p = |i: usize| f[i].parse::<f64>().unwrap();
            (p(sc), p(ic), p(vc))
        })
        .collect();
    assert!(pts.len() >= 4, "{pts:?}");
    let v_ref = pts[0].2;
    // Increasing load (falling resistance). With foldback, current is not monotone along the
    // curve, so the load setting orders the points.
    pts.sort_by(|a, b| b.0.total_cmp(&a.0));
    // Fixed-drop criterion (common practice): first point below 0.98 V_ref, interpolated
    // with the last point above it.
    let limit = 0.98 * v_ref;
    let k = pts
        .iter()
        .position(|p| p.2 < limit)
        .expect("a point below the knee");
    assert!(k > 0, "{pts:?}");
    let (a, b) = (pts[k - 1], pts[k]);
    let knee = a.1 + (limit - a.2) * (b.1 - a.1) / (b.2 - a.2);
    // The foldback limiter's junction barely heats, so the cold true knee holds to within the
    // search's resolution and the meters' noise.
    let err = (knee - truth.knee_current) / truth.knee_current;
    assert!(
        err.abs() < 0.01,
        "measured {knee} A, true {} A; {pts:?}",
        truth.knee_current
    );
    sim.shutdown();
}
