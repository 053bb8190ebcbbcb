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
