//! A station file that names a store uploads each unit's run as soon as it finishes; with the
//! store away the unit is still tested and judged, its run stays queued, and the next unit
//! uploads both.

use crate::support::e2e::{serial, show};
use crate::support::floor::Floor;
use crate::support::pg::Pg;

fn set_store(f: &Floor, url: &str) {
    let text = std::fs::read_to_string(&f.station).unwrap();
    let kept: String = text
        .lines()
        .filter(|l| !l.starts_with("store ="))
        .map(|l| format!("{l}\n"))
        .collect();
    std::fs::write(&f.station, format!("{kept}store = \"{url}\"\n")).unwrap();
}

#[test]
fn each_unit_is_uploaded_when_it_finishes_and_queued_while_the_store_is_away() {
    let _g = serial();
    let Some(pg) = Pg::system_or_private("the station's automatic upload") else {
        return;
    };
    let f = Floor::start(71, "TLB-[0-9]{4}");
    // A loopback port with nothing listening: the store is away.
    let dead = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    set_store(&f, &format!("postgresql://nobody@127.0.0.1:{dead}/none"));
    let run = |unit: &str| {
        f.regulus()
            .args(["run", "--yes", "--unit", unit, "--station"])
            .arg(&f.station)
            .output()
            .unwrap()
    };
    let out = run("TLB-0171");
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    // The unit's own outcome decides the exit code (README: 0 PASS), not the store.
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(text.contains("P A S S"), "{}", show(&out));
    assert!(
        text.contains("store unreachable") && text.contains("1 run(s) stay queued"),
        "{}",
        show(&out)
    );

    set_store(&f, &pg.url);
    let out = run("TLB-0172");
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("store: 2 run(s) uploaded"),
        "{}",
        show(&out)
    );
    assert_eq!(pg.query_i64("SELECT count(*) FROM run"), 2);
    assert_eq!(
        pg.query_i64("SELECT count(DISTINCT unit_serial) FROM run WHERE station_id = 'ST-07'"),
        2
    );
    // Every reading row of both records reached the store.
    let local: i64 = ["TLB-0171", "TLB-0172"]
        .iter()
        .map(|u| {
            let dir = std::fs::read_dir(f.rig.dir.path().join("records").join(u))
                .unwrap()
                .flatten()
                .find(|e| e.path().is_dir())
                .unwrap()
                .path();
            regulus::record::read_info(&dir).unwrap().rows as i64
        })
        .sum();
    assert_eq!(pg.query_i64("SELECT count(*) FROM reading"), local);
}
