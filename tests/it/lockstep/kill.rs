//! `kill -9` of `regulus run` at 20 seeded moments spread over every step kind: the guardian
//! process sends the safe state, so the simulated load input and source output are off within
//! 250 ms of regulus ending, stay off (no command regulus queued is applied afterwards), and
//! the record says the guardian acted.

use crate::support::e2e::{complete_rows, serial, Rig};
use crate::support::lock::{cloexec_ptys, pty};
use regulus::guardian::NOTE_FILE;
use regulus::record::{read_run, Outcome};
use regulus::rng::Rng;
use regulus::sim::SimOptions;
use std::collections::BTreeSet;
use std::time::{Duration, Instant};

const LAB: &str = "teaching-lab-0-20v.toml";

/// Every step kind, each lasting about a second on the simulated bench.
const EVERY_KIND: &str = r#"
name = "kill-every-kind"
source = "100 % of vin"
settle = "100 ms"
samples = 1

[interlocks]
max_short_dwell = "3 s"

[[step]]
kind = "load_sweep"
from = "10 % of max_load"
to = "95 % of max_load"
points = 6

[[step]]
kind = "limit_trace"
mode = "cv"
from = "95 % of vout"
to = "10 % of vout"
points = 6

[[step]]
kind = "knee_search"
drop = "2 %"
resolution = "1 %"

[[step]]
kind = "short_circuit"
dwell = "1 s"
interval = "200 ms"
recovery_time = "400 ms"

[[step]]
kind = "line_sweep"
from = "90 % of vin"
to = "110 % of vin"
points = 6
load = "50 % of max_load"

[[step]]
kind = "soak"
duration = "1 s"
interval = "200 ms"
load = "50 % of max_load"
"#;

#[test]
fn kill_9_at_twenty_moments_leaves_the_load_and_source_off() {
    let _g = serial();
    let rig = Rig::start(LAB, SimOptions::default().seed(401));
    cloexec_ptys(&pty());
    // How long the plan takes here, unkilled (the moments are spread over it).
    let t0 = Instant::now();
    let out = rig.run("KILL-0000", EVERY_KIND);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        crate::support::e2e::show(&out)
    );
    let full = t0.elapsed();
    let mut rng = Rng::new(20261202);
    let mut kinds = BTreeSet::new();
    for k in 0..20u32 {
        let at = full.mul_f64((f64::from(k) + rng.uniform()) / 20.0);
        let unit = format!("KILL-{:04}", k + 1);
        let child = rig.spawn(&unit, EVERY_KIND);
        std::thread::sleep(at);
        child.signal(libc::SIGKILL);
        let mut child = child;
        let _ = child.0.wait();
        std::thread::sleep(Duration::from_millis(250));
        let (_, _, c) = rig.sim.state();
        let dir = rig.records.join(&unit);
        let last = std::fs::read_dir(&dir)
            .ok()
            .and_then(|mut d| d.next())
            .and_then(|e| e.ok())
            .map(|e| e.path());
        let step = last
            .as_ref()
            .and_then(|d| complete_rows(d).last().cloned())
            .and_then(|r| r.split(',').nth(3).map(str::to_string))
            .unwrap_or_else(|| "before the first row".into());
        kinds.insert(step.clone());
        assert!(
            !c.load.input_on,
            "kill {k} at {at:?} ({step}): load left on"
        );
        assert!(
            !c.source.output_on,
            "kill {k} at {at:?} ({step}): source left on"
        );
        std::thread::sleep(Duration::from_millis(750));
        let (_, _, later) = rig.sim.state();
        assert!(
            !later.load.input_on,
            "kill {k} ({step}): a queued command switched the load on"
        );
        assert!(
            !later.source.output_on,
            "kill {k} ({step}): a queued command switched the source on"
        );
        // A run killed before it finished (its record still "running"): the guardian acted
        // and said so.
        if let Some(d) = &last {
            let running = read_run(d).is_ok_and(|r| r.info.outcome == Outcome::Running);
            if running && !complete_rows(d).is_empty() {
                let note = std::fs::read_to_string(d.join(NOTE_FILE)).unwrap_or_default();
                assert!(
                    note.contains("the guardian sent the safe state"),
                    "kill {k}: {note:?}"
                );
            }
        }
    }
    // The moments fell in every kind of step.
    for kind in [
        "load_sweep",
        "limit_trace",
        "knee_search",
        "short_circuit",
        "line_sweep",
        "soak",
    ] {
        assert!(kinds.contains(kind), "no kill during {kind}: {kinds:?}");
    }
}
