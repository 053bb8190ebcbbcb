//! The `report` and `history` commands run as the built binary on SYNTHETIC records (see
//! `support::report`) in a temporary folder: files written, exit codes, drift flags.

use crate::support::report as sup;
use regulus::rng::Rng;
use std::path::Path;
use std::process::Command;

fn regulus(args: &[&str], cwd: &Path) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(args)
        .current_dir(cwd)
        .output()
        .expect("run regulus")
}

/// Three records of one unit; the sense resistor is swapped for 0.68 ohm before the third.
fn unit_records(root: &Path) -> Vec<std::path::PathBuf> {
    let mut rng = Rng::new(21);
    let unit = sup::Unit::draw(&mut rng);
    (0..3)
        .map(|d| {
            let u = if d == 2 { unit.with_sense(0.68) } else { unit };
            let rows = sup::run_rows(&u, &mut rng, sup::day(d), 30, 30, 20.0, 0.5);
            sup::write_record(&root.join("records"), "SN-0100", sup::day(d), &rows)
        })
        .collect()
}

#[test]
fn report_regenerates_summary_plots_and_page() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = unit_records(tmp.path());
    let out = regulus(
        &["report", "--no-design", "--png", recs[0].to_str().unwrap()],
        tmp.path(),
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for f in [
        "summary.json",
        "report.html",
        "plots/vi_curve.svg",
        "plots/vi_curve.png",
        "plots/regulation.svg",
        "plots/short_circuit.svg",
    ] {
        assert!(recs[0].join(f).is_file(), "{f} missing");
    }
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(recs[0].join("summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["schema_version"], 1);
    assert!(summary["metrics"]["knee"]["two_segment"]["current"].is_number());
    // Readings are never rewritten by a report.
    let before = std::fs::read(recs[0].join("readings.csv")).unwrap();
    regulus(
        &["report", "--no-design", recs[0].to_str().unwrap()],
        tmp.path(),
    );
    assert_eq!(before, std::fs::read(recs[0].join("readings.csv")).unwrap());
}

#[test]
fn report_flags_drift_against_the_units_earlier_records() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = unit_records(tmp.path());
    let out = regulus(
        &["report", "--no-design", recs[2].to_str().unwrap()],
        tmp.path(),
    );
    assert_eq!(out.status.code(), Some(0));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("DRIFT: limit_current changed"), "{stdout}");
    let out = regulus(
        &["report", "--no-design", recs[1].to_str().unwrap()],
        tmp.path(),
    );
    assert!(!String::from_utf8_lossy(&out.stdout).contains("DRIFT"));
}

#[test]
fn history_lists_runs_with_flags_and_draws_a_plot() {
    let tmp = tempfile::tempdir().unwrap();
    unit_records(tmp.path());
    let out = regulus(
        &["history", "SN-0100", "--csv", "--plot", "hist.png"],
        tmp.path(),
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let csv = String::from_utf8_lossy(&out.stdout);
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(lines.len(), 4, "{csv}");
    assert!(lines[1].ends_with(',') && lines[2].ends_with(','), "{csv}");
    assert!(lines[3].contains("limit_current"), "{csv}");
    let png = std::fs::read(tmp.path().join("hist.png")).unwrap();
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
    let out = regulus(&["history", "SN-0100", "--json"], tmp.path());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["entries"].as_array().unwrap().len(), 3);
}

#[test]
fn usage_errors_exit_2_with_a_hint() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = unit_records(tmp.path());
    let out = regulus(
        &[
            "report",
            "--no-design",
            "--knee-drop",
            "80",
            recs[0].to_str().unwrap(),
        ],
        tmp.path(),
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--knee-drop"));
    let out = regulus(&["report", "--no-design", "nowhere"], tmp.path());
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not a record folder"));
    let out = regulus(&["report", recs[0].to_str().unwrap()], tmp.path());
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no design.toml snapshot"));
    let out = regulus(&["history", "SN-9999"], tmp.path());
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--records"));
    let out = regulus(&["history", "SN-0100", "--plot", "x.gif"], tmp.path());
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn corrupt_readings_name_the_file_and_line() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = unit_records(tmp.path());
    let p = recs[0].join("readings.csv");
    let mut text = std::fs::read_to_string(&p).unwrap();
    text = text.replacen(",load_sweep,3,", ",load_swoop,3,", 1);
    std::fs::write(&p, text).unwrap();
    let out = regulus(
        &["report", "--no-design", recs[0].to_str().unwrap()],
        tmp.path(),
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("readings.csv: line 5") && err.contains("load_swoop"),
        "{err}"
    );
}

const DESIGN: &str = "tests/report_golden/bench12.toml";

fn design_path() -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(DESIGN)
}

/// Records of `n` good synthetic units (one record each), plus optionally one unit with a
/// 0.68 ohm sense resistor fitted instead of 0.47 ohm.
fn population_records(root: &Path, n: u64, with_bad: bool) -> Vec<String> {
    let mut out = Vec::new();
    for seed in 1..=n {
        let mut rng = Rng::new(seed);
        let u = sup::Unit::draw(&mut rng);
        let rows = sup::run_rows(&u, &mut rng, sup::day(0), 30, 30, 20.0, 0.5);
        let dir = sup::write_record(root, &format!("SYN-{seed:03}"), sup::day(0), &rows);
        out.push(dir.display().to_string());
    }
    if with_bad {
        let mut rng = Rng::new(99);
        let u = sup::Unit::draw(&mut rng).with_sense(0.68);
        let rows = sup::run_rows(&u, &mut rng, sup::day(0), 30, 30, 20.0, 0.5);
        let dir = sup::write_record(root, "SYN-BAD", sup::day(0), &rows);
        out.push(dir.display().to_string());
    }
    out
}

#[test]
fn compare_against_a_design_file_passes_good_units_with_cpk() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = population_records(tmp.path(), 20, false);
    let design = design_path();
    let mut args = vec![
        "compare",
        "--design",
        design.to_str().unwrap(),
        "--plot-dir",
        "hist",
    ];
    args.extend(recs.iter().map(String::as_str));
    let out = regulus(&args, tmp.path());
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(!stdout.contains("OUTLIER"), "{stdout}");
    assert!(
        stdout.contains("limit_current") && stdout.contains("Cpk "),
        "{stdout}"
    );
    assert!(tmp.path().join("hist/limit_current.svg").is_file());
}

#[test]
fn compare_fails_and_names_a_wrong_sense_resistor() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = population_records(tmp.path(), 20, true);
    let design = design_path();
    let mut args = vec!["compare", "--design", design.to_str().unwrap()];
    args.extend(recs.iter().map(String::as_str));
    let out = regulus(&args, tmp.path());
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout}");
    assert!(stdout.contains("FAIL       SYN-BAD"), "{stdout}");
    assert!(
        stdout.contains("0.68 ohm sense resistor fitted instead of 0.47 ohm"),
        "{stdout}"
    );
    assert!(
        stdout.contains("OUTLIER SYN-BAD: limit_current"),
        "{stdout}"
    );
    assert!(!stdout.contains("OUTLIER SYN-0"), "{stdout}");
}

#[test]
fn report_uses_the_records_design_snapshot_and_exits_1_on_fail() {
    let tmp = tempfile::tempdir().unwrap();
    let recs = population_records(tmp.path(), 1, true);
    for r in &recs {
        std::fs::copy(design_path(), Path::new(r).join("design.toml")).unwrap();
    }
    let good = regulus(&["report", &recs[0]], tmp.path());
    assert_eq!(
        good.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&good.stdout)
    );
    let bad = regulus(&["report", &recs[1]], tmp.path());
    assert_eq!(bad.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&bad.stdout).contains("verdict: FAIL"));
    // A broken design file is a configuration error.
    std::fs::write(
        Path::new(&recs[0]).join("design.toml"),
        "[design]\nname = 3\n",
    )
    .unwrap();
    let broken = regulus(&["report", &recs[0]], tmp.path());
    assert_eq!(broken.status.code(), Some(2));
}

#[test]
fn a_record_left_running_by_a_dead_process_reads_as_incomplete() {
    // ARCHITECTURE.md: outcome still `running` and no live writer reads as incomplete.
    let tmp = tempfile::tempdir().unwrap();
    let recs = unit_records(tmp.path());
    let run = recs[1].join("run.json");
    let text = std::fs::read_to_string(&run).unwrap();
    std::fs::write(&run, text.replace("\"completed\"", "\"running\"")).unwrap();
    let out = regulus(
        &["report", "--no-design", recs[1].to_str().unwrap()],
        tmp.path(),
    );
    // A record that never finished is INCOMPLETE (exit 3), even with metrics only.
    assert_eq!(out.status.code(), Some(3));
    assert!(String::from_utf8_lossy(&out.stdout).contains("verdict: INCOMPLETE"));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(recs[1].join("summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["record_state"], "incomplete");
    let html = std::fs::read_to_string(recs[1].join("report.html")).unwrap();
    assert!(html.contains("Incomplete record"));
    let out = regulus(&["history", "SN-0100", "--csv"], tmp.path());
    let csv = String::from_utf8_lossy(&out.stdout);
    assert!(
        csv.lines().nth(2).unwrap().contains(",incomplete,"),
        "{csv}"
    );
}

#[test]
fn a_record_cut_short_cannot_pass_against_its_design() {
    // ARCHITECTURE.md: a run that did not finish cannot pass (compare::judge). The same good
    // record passes while finished and is INCOMPLETE (exit 3) once run.json says it never
    // finished. Judged against a design file given with --design, the re-evaluation goes
    // beside the record's own files, which stay as they were.
    let tmp = tempfile::tempdir().unwrap();
    let recs = population_records(tmp.path(), 1, false);
    let design = design_path();
    let report = |dir: &str| {
        regulus(
            &["report", "--design", design.to_str().unwrap(), dir],
            tmp.path(),
        )
    };
    let own = Path::new(&recs[0]).join("summary.json");
    let _ = std::fs::remove_file(&own);
    let finished = report(&recs[0]);
    let stdout = String::from_utf8_lossy(&finished.stdout);
    assert_eq!(finished.status.code(), Some(0), "{stdout}");
    assert!(stdout.contains("verdict: PASS"), "{stdout}");
    let again = Path::new(&recs[0]).join(format!(
        "against-{}",
        design.file_stem().unwrap().to_string_lossy()
    ));
    assert!(stdout.contains(&again.display().to_string()), "{stdout}");
    assert!(stdout.contains("unchanged"), "{stdout}");
    assert!(again.join("summary.json").is_file());
    assert!(again.join("report.html").is_file());
    assert!(!own.exists(), "the record's own summary was written");
    let run = Path::new(&recs[0]).join("run.json");
    let text = std::fs::read_to_string(&run).unwrap();
    std::fs::write(&run, text.replace("\"completed\"", "\"running\"")).unwrap();
    let cut = report(&recs[0]);
    let stdout = String::from_utf8_lossy(&cut.stdout);
    assert_eq!(cut.status.code(), Some(3), "{stdout}");
    assert!(stdout.contains("verdict: INCOMPLETE"), "{stdout}");
    assert!(stdout.contains("never finished"), "{stdout}");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(again.join("summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["record_state"], "incomplete");
    assert_eq!(summary["verdict"], "incomplete");
}
