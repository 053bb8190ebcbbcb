//! The records index: `regulus index --rebuild` makes it from the folders, `regulus history`
//! reads it and sees records added or removed behind its back (the folders stay the source
//! of truth), and what it says matches what the folders say.

use crate::support::e2e::show;
use crate::support::report as sup;
use regulus::analysis::AnalysisOptions;
use regulus::index::{Index, RunFilter, INDEX_FILE};
use regulus::rng::Rng;
use std::process::Command;

fn regulus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
}

#[test]
fn rebuild_history_and_folder_changes() {
    let tmp = tempfile::tempdir().unwrap();
    let records = tmp.path();
    let mut rng = Rng::new(7);
    let unit = sup::Unit::draw(&mut rng);
    let mut dirs = Vec::new();
    for d in 0..3 {
        let rows = sup::run_rows(&unit, &mut rng, sup::day(d), 20, 20, 5.0, 0.5);
        dirs.push(sup::write_record(records, "SN-0100", sup::day(d), &rows));
    }
    let out = regulus()
        .args(["index", "--rebuild", "--records"])
        .arg(records)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("indexed 3 run(s)"),
        "{}",
        show(&out)
    );
    assert!(records.join(INDEX_FILE).is_file());

    // What the index says equals what the folders say.
    let from_folders =
        regulus::report::history(records, "SN-0100", &AnalysisOptions::default()).unwrap();
    let idx = Index::open(records).unwrap();
    let runs = idx
        .runs(&RunFilter {
            unit: Some("SN-0100".into()),
            ..RunFilter::default()
        })
        .unwrap();
    let entries: Vec<_> = runs.iter().map(|r| r.history_entry()).collect();
    assert_eq!(entries, from_folders.entries);
    assert!(runs.iter().all(|r| r.plan_name == "standard"));

    // A record added and one removed behind the index's back: history sees both.
    let rows = sup::run_rows(&unit, &mut rng, sup::day(5), 20, 20, 5.0, 0.5);
    sup::write_record(records, "SN-0100", sup::day(5), &rows);
    std::fs::remove_dir_all(&dirs[0]).unwrap();
    let out = regulus()
        .args(["history", "SN-0100", "--records"])
        .arg(records)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("unit SN-0100: 3 record(s)"), "{text}");
    assert!(
        text.contains(" plan ") && text.contains(" standard "),
        "{text}"
    );
    assert!(!text.contains("2026-11-02T09"), "{text}");
    assert!(text.contains("2026-11-07T09"), "{text}");
    assert_eq!(Index::open(records).unwrap().len().unwrap(), 3);
}
