//! `regulus run --station S --unit X` needs nothing else; the station file is also found
//! through `REGULUS_STATION` and the XDG configuration folder; its mistakes are located.

use crate::support::e2e::{serial, show};
use crate::support::floor::Floor;
use regulus::index::{Index, RunFilter};
use regulus::station::FloorResult;

#[test]
fn run_with_a_station_file_needs_only_the_unit() {
    let _g = serial();
    let f = Floor::start(41, "TLB-[0-9]{4}");
    let out = f
        .regulus()
        .args(["run", "--yes", "--unit", "TLB-0041", "--station"])
        .arg(&f.station)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("P A S S"), "{}", show(&out));
    assert!(stdout.contains("certificate: "), "{}", show(&out));
    // The records folder is the station's (relative to the station file).
    let records = f.rig.dir.path().join("records");
    let dir = std::fs::read_dir(records.join("TLB-0041"))
        .unwrap()
        .next()
        .unwrap()
        .unwrap()
        .path();
    let stamp = regulus::station::read_station_stamp(&dir).expect("station.json");
    assert_eq!(stamp.station, "ST-07");
    assert_eq!(stamp.operator.as_deref(), Some("Operator One"));
    let info = regulus::record::read_info(&dir).unwrap();
    assert_eq!(info.operator.as_deref(), Some("Operator One"));
    assert!(dir.join("certificate.html").is_file());
    // The run was indexed when it finished, with its station.
    let idx = Index::open(&records).unwrap();
    let runs = idx.runs(&RunFilter::default()).unwrap();
    assert_eq!(runs.len(), 1);
    assert_eq!(runs[0].station.as_deref(), Some("ST-07"));
    assert_eq!(runs[0].result, FloorResult::Pass);
    assert!(runs[0]
        .values
        .get(regulus::compare::KeyMetric::LimitCurrent)
        .is_some());
}

#[test]
fn the_station_file_is_found_through_the_environment_and_checked() {
    let _g = serial();
    let f = Floor::start(42, "TLB-[0-9]{4}");
    // REGULUS_STATION: found, and the serial is checked against its pattern before anything
    // is opened (exit 2, the usage/configuration code).
    let out = f
        .regulus()
        .env("REGULUS_STATION", &f.station)
        .args(["run", "--yes", "--unit", "XYZ-1"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("unit pattern"),
        "{}",
        show(&out)
    );
    assert!(!f.rig.dir.path().join("records").exists());

    // The XDG configuration folder: $XDG_CONFIG_HOME/regulus/station.toml.
    let xdg = f.rig.dir.path().join("xdg");
    std::fs::create_dir_all(xdg.join("regulus")).unwrap();
    let text = std::fs::read_to_string(&f.station).unwrap().replace(
        "bench = \"bench.toml\"",
        &format!("bench = \"{}\"", f.rig.bench.display()),
    );
    std::fs::write(xdg.join("regulus/station.toml"), &text).unwrap();
    let out = f
        .regulus()
        .env("XDG_CONFIG_HOME", &xdg)
        .args(["run", "--yes", "--unit", "XYZ-2"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("unit pattern") && err.contains("xdg"),
        "{}",
        show(&out)
    );

    // No station anywhere and no files: say what is missing.
    let out = f.regulus().args(["run", "--unit", "U-1"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--bench, --design, --plan") && err.contains("REGULUS_STATION"),
        "{err}"
    );

    // A mistake in the station file is reported at its line and column.
    std::fs::write(
        &f.station,
        text.replace("unit_pattern = \"", "unit_pattern = \"("),
    )
    .unwrap();
    let out = f
        .regulus()
        .args(["run", "--yes", "--unit", "TLB-0001", "--station"])
        .arg(&f.station)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", show(&out));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("station.toml:7:16:") && err.contains("unit_pattern"),
        "{err}"
    );
}
