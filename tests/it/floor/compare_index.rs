//! `regulus compare --index` judges what the folders would: on runs of the simulated bench
//! (passing units, a run whose plan promised a metric it never measured, a run cut short),
//! the index gives the same outcome and reasons for every record as `compare` over the
//! folders, without reading the records' files for runs of the design compared against, and
//! falls back to the folders for runs of another design.

use crate::support::e2e::{sample, serial, show};
use crate::support::floor::{Floor, LAB};
use serde_json::Value;
use std::path::{Path, PathBuf};

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap().flatten() {
        let p = e.path();
        if p.is_dir() {
            copy_dir(&p, &to.join(e.file_name()));
        } else {
            std::fs::copy(&p, to.join(e.file_name())).unwrap();
        }
    }
}

/// The only record folder of a unit.
fn only_record(records: &Path, unit: &str) -> PathBuf {
    let mut dirs: Vec<PathBuf> = std::fs::read_dir(records.join(unit))
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.is_dir())
        .collect();
    assert_eq!(dirs.len(), 1, "{dirs:?}");
    dirs.pop().unwrap()
}

/// (record, unit, verdict, reasons) of every judged record, sorted by record.
fn judged(v: &Value) -> Vec<(String, String, Value, Value)> {
    let mut out: Vec<_> = v["records"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            (
                r["record"].as_str().unwrap().to_string(),
                r["unit"].as_str().unwrap().to_string(),
                r["verdict"].clone(),
                r["reasons"].clone(),
            )
        })
        .collect();
    out.sort_by(|a, b| a.0.cmp(&b.0));
    out
}

#[test]
fn compare_through_the_index_decides_as_the_folders_do() {
    let _g = serial();
    let f = Floor::start(61, "TLB-[0-9]{4}");
    for unit in ["TLB-0161", "TLB-0162"] {
        let out = f
            .regulus()
            .args(["run", "--yes", "--unit", unit, "--station"])
            .arg(&f.station)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    }
    let records = f.rig.dir.path().join("records");
    let first = only_record(&records, "TLB-0161");
    let name = first.file_name().unwrap().to_string_lossy().into_owned();

    // A later run of the same unit whose plan snapshot also promises line regulation, which
    // its readings never measured: it cannot pass (a promised metric is missing).
    let promised = records.join("TLB-0161").join(format!("{name}-promised"));
    copy_dir(&first, &promised);
    let plan = promised.join("plan.toml");
    let mut text = std::fs::read_to_string(&plan).unwrap();
    text.push_str(
        "\n[[step]]\nkind = \"line_sweep\"\nfrom = \"85 % of vin\"\nto = \"110 % of vin\"\n\
         step = \"1 V\"\nload = \"50 % of max_load\"\n",
    );
    std::fs::write(&plan, text).unwrap();
    // A run of the other unit cut short: run.json still says running, no writer is alive.
    let second = only_record(&records, "TLB-0162");
    let cut = records.join("TLB-0162").join(format!(
        "{}-cut",
        second.file_name().unwrap().to_string_lossy()
    ));
    copy_dir(&second, &cut);
    let run_json = cut.join("run.json");
    let mut info: Value =
        serde_json::from_str(&std::fs::read_to_string(&run_json).unwrap()).unwrap();
    info["outcome"] = Value::from("running");
    std::fs::write(&run_json, serde_json::to_string_pretty(&info).unwrap()).unwrap();

    let out = f
        .regulus()
        .args(["index", "--rebuild", "--records"])
        .arg(&records)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("indexed 4 run(s)"),
        "{}",
        show(&out)
    );

    let compare = |design: &str, extra: &[&str]| -> (Option<i32>, Value) {
        let out = f
            .regulus()
            .args(["compare", "--json", "--every-record", "--design", design])
            .args(extra)
            .output()
            .unwrap();
        let v =
            serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", show(&out)));
        (out.status.code(), v)
    };
    let rec = records.display().to_string();
    let lab = sample(LAB);
    let (code_folders, folders) = compare(&lab, &[&rec]);
    let (code_index, indexed) = compare(&lab, &["--index", &rec]);
    assert_eq!(judged(&folders).len(), 4, "{folders:#}");
    assert_eq!(
        judged(&folders),
        judged(&indexed),
        "{folders:#}\n{indexed:#}"
    );
    assert_eq!(code_folders, code_index);
    // The outcome contract (README): a run cut short or missing a promised metric is
    // INCOMPLETE, exit 3, whatever the other runs did.
    assert_eq!(code_index, Some(3));
    let by_record = |v: &Value, dir: &Path| -> Value {
        v["records"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["record"] == dir.display().to_string())
            .cloned()
            .unwrap_or_else(|| panic!("{} not judged: {v:#}", dir.display()))
    };
    // The shared store judges the same runs alike: from their summaries and plan snapshots.
    if let Some(pg) = crate::support::pg::Pg::system_or_private("compare --store") {
        let out = f
            .regulus()
            .args(["sync", "--store", &pg.url, "--records"])
            .arg(&records)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0), "{}", show(&out));
        let (code_store, stored) = compare(&lab, &["--store", &pg.url]);
        assert_eq!(code_store, code_index);
        // Run ids are <station>/<unit>/<folder>; the index names folders by path.
        let strip = |v: &Value| -> Vec<(String, Value)> {
            let mut out: Vec<_> = judged(v)
                .into_iter()
                .map(|(r, u, verdict, _)| {
                    let folder = r.rsplit('/').next().unwrap().to_string();
                    (format!("{u}/{folder}"), verdict)
                })
                .collect();
            out.sort_by(|a, b| a.0.cmp(&b.0));
            out
        };
        assert_eq!(strip(&stored), strip(&indexed), "{stored:#}\n{indexed:#}");
    }
    let p = by_record(&indexed, &promised);
    assert_eq!(p["verdict"], "incomplete", "{p:#}");
    assert!(
        p["reasons"].to_string().contains("line_regulation"),
        "{p:#}"
    );
    assert_eq!(by_record(&indexed, &cut)["verdict"], "incomplete");
    assert_eq!(by_record(&indexed, &first)["verdict"], "pass");

    // The index judges runs of this design without their files: with the readings of a
    // passing run gone, compare over the folders can no longer read it, the index still
    // judges it as before.
    std::fs::remove_file(second.join("readings.csv")).unwrap();
    let out = f
        .regulus()
        .args([
            "compare",
            "--json",
            "--every-record",
            "--design",
            &lab,
            &rec,
        ])
        .output()
        .unwrap();
    assert_ne!(out.status.code(), Some(0), "{}", show(&out));
    let (_, again) = compare(&lab, &["--index", &rec]);
    assert_eq!(judged(&again), judged(&indexed));

    // Against another design the index's metrics do not apply: those runs are judged from
    // their folders, alike on both paths.
    std::fs::copy(cut.join("readings.csv"), second.join("readings.csv")).unwrap();
    let other = sample("fixed-12v-3a-foldback.toml");
    let (_, folders) = compare(&other, &[&rec]);
    let (_, indexed) = compare(&other, &["--index", &rec]);
    assert_eq!(
        judged(&folders),
        judged(&indexed),
        "{folders:#}\n{indexed:#}"
    );
}

/// `compare --index` against the design the runs ran with, as printed (table or JSON).
fn printed(design: &Path, records: &Path, json: bool) -> String {
    let mut argv: Vec<std::ffi::OsString> = vec!["regulus".into(), "compare".into()];
    if json {
        argv.push("--json".into());
    }
    argv.extend([
        "--design".into(),
        design.into(),
        "--index".into(),
        records.into(),
    ]);
    let cli = <regulus::cli::Cli as clap::Parser>::try_parse_from(argv).unwrap();
    let regulus::cli::Command::Compare(args) = cli.command else {
        panic!("not a compare command");
    };
    let out = regulus::cli::compare::evaluate(&args).unwrap();
    let mut buf = Vec::new();
    regulus::cli::compare::write_output(&mut buf, &out, json).unwrap();
    String::from_utf8(buf).unwrap()
}

/// The judgement the index makes when it indexes a run (the run compared with its own design
/// snapshot: checks, plan limits, the diagnosis of a failing unit, the promised metrics it
/// lacks) decides by the one rule exactly what judging the indexed metrics decides: on the
/// two records of `regulus demo` (one unit fails and is diagnosed) and rows that make one
/// unit's earlier run and the other's unfinished later run, the table and the JSON are the
/// same byte for byte whether the index holds only its judgements or only the metrics, and a
/// judgement kept under another design's hash is not used.
#[test]
fn judgements_made_when_indexing_print_what_the_metrics_give() {
    use regulus::index::{prejudged_key, Index};
    let _g = serial();
    let tmp = tempfile::tempdir().unwrap();
    let records = tmp.path().join("records");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_regulus"))
        .args(["demo", "--records"])
        .arg(&records)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let design = records.join("inputs").join("teaching-lab-0-20v.toml");
    let mut idx = Index::open(&records).unwrap();
    idx.rebuild().unwrap();
    let demo = idx.runs(&Default::default()).unwrap();
    assert_eq!(demo.len(), 2, "{demo:#?}");
    let sha = format!(
        "{:x}",
        <sha2::Sha256 as sha2::Digest>::digest(std::fs::read(&design).unwrap())
    );
    for r in &demo {
        assert_eq!(
            r.design_sha256,
            sha,
            "the demo's runs ran with {}",
            design.display()
        );
        assert_eq!(
            r.prejudged_key.as_deref(),
            Some(prejudged_key(&sha).as_str())
        );
        assert!(r.prejudged_bin.is_some() && r.metrics_bin.is_some());
    }
    // Rows only (no folders): an earlier run of the passing unit and a later run of the
    // failing unit that never finished.
    let mut rows = demo.clone();
    let mut earlier = demo.iter().find(|r| r.unit == "TLB-0001").unwrap().clone();
    earlier.folder = "20200101T000000Z_standard".into();
    earlier.started_utc = "2020-01-01T00:00:00.000Z".into();
    let mut unfinished = demo.iter().find(|r| r.unit == "TLB-0002").unwrap().clone();
    unfinished.folder = "29990101T000000Z_standard".into();
    unfinished.started_utc = "2999-01-01T00:00:00.000Z".into();
    unfinished.state = "running".into();
    unfinished.outcome = "running".into();
    rows.extend([earlier, unfinished]);

    // Only the metrics (and what the plans promised): judged from them, as before.
    let metrics_only: Vec<_> = rows
        .iter()
        .cloned()
        .map(|mut r| {
            r.prejudged_key = None;
            r.prejudged_bin = None;
            r
        })
        .collect();
    idx.upsert(&metrics_only).unwrap();
    let table = printed(&design, &records, false);
    let json = printed(&design, &records, true);
    let v: Value = serde_json::from_str(&json).unwrap();
    assert_eq!(v["offered"], 4, "{v:#}");
    assert_eq!(v["units"], 2, "{v:#}");
    assert_eq!(v["left_out"].as_array().unwrap().len(), 2, "{v:#}");
    assert!(table.contains("did not finish"), "{table}");
    assert!(table.contains("an earlier run of TLB-0001"), "{table}");
    // The demo's failing unit has a wrong sense resistor: the diagnosis names it.
    assert!(
        table.contains("likely cause:") && table.contains("sense resistor"),
        "{table}"
    );
    assert!(table.contains("FAIL"), "{table}");

    // Only the judgements made when indexing: the metrics are not there to read.
    let judged_only: Vec<_> = rows
        .iter()
        .cloned()
        .map(|mut r| {
            r.metrics_bin = None;
            r.metrics_json = None;
            r.judging_json = None;
            r
        })
        .collect();
    idx.upsert(&judged_only).unwrap();
    assert_eq!(printed(&design, &records, false), table);
    assert_eq!(printed(&design, &records, true), json);

    // A judgement kept under another design's hash is not used: the metrics decide (every
    // row here holds the failing unit's judgement, which would fail them all).
    let failing = demo.iter().find(|r| r.unit == "TLB-0002").unwrap();
    let other_key: Vec<_> = rows
        .iter()
        .cloned()
        .map(|mut r| {
            r.prejudged_key = Some(prejudged_key(&"0".repeat(64)));
            r.prejudged_bin = failing.prejudged_bin.clone();
            r
        })
        .collect();
    idx.upsert(&other_key).unwrap();
    assert_eq!(printed(&design, &records, false), table);
    assert_eq!(printed(&design, &records, true), json);
}
