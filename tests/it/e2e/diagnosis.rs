//! End to end, simulated bench: the diagnosis matrix. Units of both sample designs, each
//! built with one wrong part (every element the design names and the simulator can alter),
//! run through the standard plan by the built binary over pseudo-terminals and loopback TCP;
//! the first "likely cause" line must name the wrong part in at least 9 of 10 cases, and a
//! unit with no wrong part gets no part named. The bench is left safe after every run.
//!
//! Which faults are in the matrix. Only faults that take the unit outside its design's
//! worst-case band: a part off by less than the design's own tolerances leaves a unit that
//! passes, and a passing unit is not diagnosed (a 0.47 ohm sense resistor on the teaching-lab
//! design, 0.39 ohm +-5 % with a diode-string clamp whose band spans 1.15 .. 2.21 A, is such
//! a part). The other pass stage on the foldback sample is left out too: its limiter
//! transistor senses the current on its own, so the design model predicts the same output,
//! limit and short-circuit current for either stage (the diagnosis does not offer it there,
//! and no measurement of the standard plan could tell).
//!
//! What counts as naming the part. The output setting depends on the reference and on both
//! feedback resistors through V = V_ref (1 + R_t / R_b) (the non-inverting amplifier's gain;
//! textbook), so one output measurement cannot tell them apart: the diagnosis names them in
//! one line with the value each would need, and that line names the part. Likewise one clamp
//! diode more and a single pass transistor in place of a Darlington both raise the diode
//! string's threshold n V_F - m V_BE by one junction (the clamp relation; common practice).

use crate::support::e2e::{design, sample, serial, Rig};
use crate::support::lock;
use regulus::sim::{Fault, SimOptions};
use std::sync::Mutex;

const PLAN: &str = include_str!("../../../samples/plans/standard.toml");
const LAB: &str = "teaching-lab-0-20v.toml";
const FIXTURE: &str = "fixed-12v-3a-foldback.toml";

/// One seeded unit: design, seed, the fault spec (none for a good unit) and the words the
/// first likely cause must contain.
struct Case {
    design: &'static str,
    seed: u64,
    fault: Option<&'static str>,
    expect: &'static str,
}

const fn case(design: &'static str, seed: u64, fault: &'static str, expect: &'static str) -> Case {
    Case {
        design,
        seed,
        fault: Some(fault),
        expect,
    }
}

const fn good(design: &'static str, seed: u64) -> Case {
    Case {
        design,
        seed,
        fault: None,
        expect: "",
    }
}

fn matrix() -> Vec<Case> {
    let out = "the output setting";
    vec![
        // Teaching-lab sample: 0.39 ohm sense, three clamp diodes, Darlington, 5.1 V
        // reference, 30 k / 10 k feedback.
        case(LAB, 401, "sense=0.33", "a 0.33 ohm sense resistor"),
        case(LAB, 402, "sense=0.56", "a 0.56 ohm sense resistor"),
        case(LAB, 403, "sense=0.68", "a 0.68 ohm sense resistor"),
        case(LAB, 404, "diodes=+1", "one clamp diode more"),
        case(LAB, 405, "diodes=-1", "one clamp diode fewer"),
        case(
            LAB,
            406,
            "pass_stage",
            "a single pass transistor fitted instead of a Darlington",
        ),
        case(LAB, 407, "vref=5.3", out),
        case(LAB, 408, "fb_top=33000", out),
        case(LAB, 409, "fb_bottom=8200", out),
        case(LAB, 410, "fb_swap", "the feedback resistors swapped"),
        // Foldback sample: 0.33 ohm sense, 390 / 10 k foldback divider, 5.0 V reference,
        // 14 k / 10 k feedback.
        case(FIXTURE, 421, "sense=0.39", "a 0.39 ohm sense resistor"),
        case(FIXTURE, 422, "sense=0.27", "a 0.27 ohm sense resistor"),
        case(FIXTURE, 423, "fold_bottom=8200", "the foldback divider off"),
        case(FIXTURE, 424, "fold_top=470", "the foldback divider off"),
        case(FIXTURE, 425, "fold_top=330", "the foldback divider off"),
        case(FIXTURE, 426, "vref=5.3", out),
        case(FIXTURE, 427, "vref=2.6", out),
        case(FIXTURE, 428, "fb_top=15000", out),
        case(FIXTURE, 429, "fb_bottom=8200", out),
        case(FIXTURE, 430, "fb_swap", "the feedback resistors swapped"),
        // No wrong part.
        good(LAB, 441),
        good(LAB, 442),
        good(FIXTURE, 443),
        good(FIXTURE, 444),
    ]
}

/// What one run of the standard plan showed.
struct Seen {
    code: Option<i32>,
    causes: Vec<String>,
    stdout: String,
    stderr: String,
    load_on: bool,
    source_on: bool,
}

fn run_case(c: &Case) -> Seen {
    let mut opts = SimOptions::default().seed(c.seed);
    if let Some(f) = c.fault {
        opts = opts.fault(Fault::parse(f).unwrap());
    }
    // The simulated bench takes the pseudo-terminal lock while it creates its ports; then
    // they are marked close-on-exec so the other case's child does not inherit them.
    let rig = Rig::start(c.design, opts);
    lock::cloexec_ptys(&lock::pty());
    let out = rig.run(&format!("DX-{}", c.seed), PLAN);
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    let causes = stdout
        .lines()
        .filter_map(|l| l.trim().split_once("likely cause: ").map(|(_, c)| c))
        .map(String::from)
        .collect();
    let (_, _, controls) = rig.sim.state();
    Seen {
        code: out.status.code(),
        causes,
        stdout,
        stderr: String::from_utf8_lossy(&out.stderr).to_string(),
        load_on: controls.load.input_on,
        source_on: controls.source.output_on,
    }
}

/// Run every case, two at a time (each with its own simulated bench and child process).
fn run_all(cases: &[Case]) -> Vec<Seen> {
    let next = Mutex::new(0usize);
    let seen: Mutex<Vec<Option<Seen>>> = Mutex::new((0..cases.len()).map(|_| None).collect());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let k = {
                    let mut n = next.lock().unwrap();
                    let k = *n;
                    *n += 1;
                    k
                };
                let Some(c) = cases.get(k) else { break };
                let r = run_case(c);
                seen.lock().unwrap()[k] = Some(r);
            });
        }
    });
    seen.into_inner()
        .unwrap()
        .into_iter()
        .map(|s| s.expect("every case ran"))
        .collect()
}

#[test]
fn the_matrix_names_the_wrong_part_first_in_nine_of_ten_and_nothing_for_good_units() {
    let _g = serial();
    // The samples exist and parse (the cases name them by file).
    let _ = (design(LAB), design(FIXTURE), sample(LAB));
    let cases = matrix();
    let seen = run_all(&cases);
    let mut faulty = 0;
    let mut right = 0;
    let mut misses = Vec::new();
    for (c, s) in cases.iter().zip(&seen) {
        let what = format!(
            "{} seed {} fault {:?}: exit {:?}\nstdout:\n{}\nstderr:\n{}",
            c.design, c.seed, c.fault, s.code, s.stdout, s.stderr
        );
        // Safe on every path: the load input and the source output are off afterwards.
        assert!(!s.load_on && !s.source_on, "bench left live: {what}");
        match c.fault {
            Some(_) => {
                faulty += 1;
                // A unit with a wrong part never passes here (the matrix holds only faults
                // outside the design's band).
                assert_ne!(s.code, Some(0), "a faulty unit passed: {what}");
                if s.causes.first().is_some_and(|f| f.contains(c.expect)) {
                    right += 1;
                } else {
                    misses.push(format!(
                        "{} {:?}: first cause {:?}",
                        c.design,
                        c.fault,
                        s.causes.first()
                    ));
                }
            }
            None => {
                assert!(s.causes.is_empty(), "a part named for a good unit: {what}");
                assert!(
                    matches!(s.code, Some(0) | Some(5)),
                    "a good unit neither passed nor was marginal: {what}"
                );
            }
        }
    }
    eprintln!("diagnosis matrix: {right} of {faulty} right first; misses: {misses:#?}");
    assert!(
        right * 10 >= faulty * 9,
        "only {right} of {faulty} faulty units had the wrong part ranked first: {misses:#?}"
    );
}
