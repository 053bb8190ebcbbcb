//! `regulus sync` uploads every run once with every reading row, a rerun uploads nothing, a
//! lost local list only finds the runs already there, and `history --store` reads them back.

use crate::support::e2e::show;
use crate::support::pg::Pg;
use crate::support::report as sup;
use regulus::rng::Rng;
use regulus::station::{write_station_stamp, StationStamp};
use std::process::Command;

fn regulus() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_regulus"));
    c.env_remove("REGULUS_STATION")
        .env("XDG_CONFIG_HOME", "/nonexistent");
    c
}

#[test]
fn sync_uploads_once_and_reruns_change_nothing() {
    let Some(pg) = Pg::system_or_private("the store round trip") else {
        return;
    };
    let tmp = tempfile::tempdir().unwrap();
    let records = tmp.path().join("records");
    let mut rng = Rng::new(9);
    let unit = sup::Unit::draw(&mut rng);
    let mut total_rows = 0;
    for d in 0..3 {
        let rows = sup::run_rows(&unit, &mut rng, sup::day(d), 25, 25, 4.0, 0.5);
        total_rows += rows.len() as i64;
        let dir = sup::write_record(&records, "SN-0300", sup::day(d), &rows);
        write_station_stamp(
            &dir,
            &StationStamp {
                station: "ST-A".into(),
                station_file: "station.toml".into(),
                operator: None,
            },
        )
        .unwrap();
    }
    let sync = || {
        regulus()
            .args(["sync", "--store", &pg.url, "--records"])
            .arg(&records)
            .output()
            .unwrap()
    };
    let out = sync();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(&format!("synced 3 run(s) ({total_rows} reading rows)")),
        "{}",
        show(&out)
    );
    assert_eq!(pg.query_i64("SELECT count(*) FROM run"), 3);
    assert_eq!(pg.query_i64("SELECT count(*) FROM reading"), total_rows);
    assert_eq!(
        pg.query_i64("SELECT count(DISTINCT design_sha256) FROM run"),
        1
    );
    assert_eq!(
        pg.query_i64("SELECT count(*) FROM artifact WHERE name = 'run.json'"),
        3
    );
    // Values survive bit for bit: every output voltage of the files is in the store.
    let mut files: Vec<f64> = Vec::new();
    for unit_dir in std::fs::read_dir(records.join("SN-0300")).unwrap() {
        let rows =
            regulus::record::read_rows(&unit_dir.unwrap().path().join("readings.csv")).unwrap();
        files.extend(
            rows.iter()
                .filter_map(|r| r.value(regulus::measure::Quantity::OutputVoltage)),
        );
    }
    let mut stored =
        pg.query_f64s("SELECT output_voltage FROM reading WHERE output_voltage IS NOT NULL");
    files.sort_by(f64::total_cmp);
    stored.sort_by(f64::total_cmp);
    assert_eq!(files, stored);

    // A rerun finds nothing queued.
    let out = sync();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("synced 0 run(s)"),
        "{}",
        show(&out)
    );
    // With the local list lost, the store already holds every run: nothing is doubled.
    std::fs::remove_file(records.join(regulus::store::SYNCED_FILE)).unwrap();
    let out = sync();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("3 already there"),
        "{}",
        show(&out)
    );
    assert_eq!(pg.query_i64("SELECT count(*) FROM run"), 3);
    assert_eq!(pg.query_i64("SELECT count(*) FROM reading"), total_rows);
    // Migrations ran once.
    assert_eq!(pg.query_i64("SELECT count(*) FROM regulus_migration"), 1);

    let out = regulus()
        .args(["history", "SN-0300", "--store", &pg.url])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("unit SN-0300: 3 record(s)") && text.contains(" standard "),
        "{text}"
    );

    // An unreachable store keeps the runs queued and says so.
    drop(pg);
    let rows = sup::run_rows(&unit, &mut rng, sup::day(9), 5, 5, 1.0, 0.5);
    sup::write_record(&records, "SN-0300", sup::day(9), &rows);
    let out = regulus()
        .args([
            "sync",
            "--store",
            "postgresql://regulus@127.0.0.1:1/postgres",
            "--station",
        ])
        .arg(tmp.path().join("none.toml"))
        .arg("--records")
        .arg(&records)
        .output()
        .unwrap();
    // The station file does not exist: a usage error naming it.
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    let out = regulus()
        .args([
            "sync",
            "--store",
            "postgresql://regulus@127.0.0.1:1/postgres",
            "--records",
        ])
        .arg(&records)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(4), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("store unreachable")
            && String::from_utf8_lossy(&out.stdout).contains("1 run(s) stay queued"),
        "{}",
        show(&out)
    );
}
