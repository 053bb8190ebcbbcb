//! `regulus batch` driven over plain stdin, as a barcode scanner would type: serials are
//! checked against the station's pattern, a repeat needs `yes`, each unit gets a large
//! verdict, a certificate and a line of the tally, and end of input ends the batch cleanly.

use crate::support::e2e::{serial, show};
use crate::support::floor::Floor;
use regulus::index::{Index, RunFilter};
use regulus::sim::{Fault, SimOptions};
use std::io::Write;
use std::process::Stdio;

#[test]
fn a_batch_over_stdin_tests_checks_and_tallies() {
    let _g = serial();
    let f = Floor::start(43, "TLB-[0-9]{4}");
    let mut child = f
        .regulus()
        .args(["batch", "--yes", "--no-pdf", "--station"])
        .arg(&f.station)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    {
        let mut stdin = child.stdin.take().unwrap();
        // A good serial, a misread label, the same serial again declined, then confirmed.
        stdin
            .write_all(b"TLB-0101\nTLB-01\nTLB-0101\nno\nTLB-0101\nyes\n")
            .unwrap();
        // stdin closes here: end of input ends the batch.
    }
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("refused: 'TLB-01' does not match"),
        "{}",
        show(&out)
    );
    assert!(text.contains("already tested 1 time(s)"), "{}", show(&out));
    assert!(
        text.contains("not tested again: TLB-0101"),
        "{}",
        show(&out)
    );
    assert_eq!(
        text.matches("testing TLB-0101").count(),
        2,
        "{}",
        show(&out)
    );
    assert_eq!(text.matches("P A S S").count(), 2, "{}", show(&out));
    // The second test of TLB-0101 is the same unit, not another one: one unit, two tests.
    assert!(
        text.contains("tally: 1 unit(s): 1 passed, 0 marginal, 0 failed, 0 incomplete, 0 error; yield 100.0 %"),
        "{}",
        show(&out)
    );
    assert!(
        text.contains(
            "tally: 1 unit(s) (2 tests, 1 unit(s) tested again: latest result): 1 passed, \
             0 marginal, 0 failed, 0 incomplete, 0 error; yield 100.0 %; first-pass yield 100.0 %"
        ),
        "{}",
        show(&out)
    );
    assert!(text.contains("batch ended"), "{}", show(&out));
    let records = f.rig.dir.path().join("records");
    let runs = Index::open(&records)
        .unwrap()
        .runs(&RunFilter {
            unit: Some("TLB-0101".into()),
            ..RunFilter::default()
        })
        .unwrap();
    assert_eq!(runs.len(), 2);
    for r in &runs {
        assert!(r.dir(&records).join("certificate.html").is_file());
    }
}

#[test]
fn a_failing_unit_reads_fail_and_lowers_the_yield() {
    let _g = serial();
    // A 0.68 ohm sense resistor where the design has 0.39 ohm: the limit is about 40 % low,
    // outside the worst-case band (I_lim = V_sense / R_sense).
    let opts = SimOptions::default()
        .seed(44)
        .fault(Fault::parse("sense=0.68").unwrap());
    let f = Floor::start_with(44, "TLB-[0-9]{4}", opts);
    let mut child = f
        .regulus()
        .args(["batch", "--yes", "--no-pdf", "--station"])
        .arg(&f.station)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(b"TLB-0201\n")
        .unwrap();
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("F A I L"), "{}", show(&out));
    assert!(
        text.contains("0 passed, 0 marginal, 1 failed") && text.contains("yield 0.0 %"),
        "{}",
        show(&out)
    );
}

#[test]
fn ctrl_c_between_units_ends_the_batch_cleanly() {
    let _g = serial();
    let f = Floor::start(46, "TLB-[0-9]{4}");
    let child = f
        .regulus()
        .args(["batch", "--yes", "--no-pdf", "--station"])
        .arg(&f.station)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut guard = crate::support::e2e::ChildGuard(child);
    // stdin stays open: the batch waits for a serial. Wait for its prompt, then Ctrl-C.
    let mut stdout = guard.0.stdout.take().unwrap();
    let mut seen = String::new();
    let mut buf = [0u8; 4096];
    let t0 = std::time::Instant::now();
    while !seen.contains("next unit serial") {
        let n = std::io::Read::read(&mut stdout, &mut buf).unwrap();
        assert!(n > 0, "the batch ended before asking: {seen}");
        seen.push_str(&String::from_utf8_lossy(&buf[..n]));
        assert!(t0.elapsed() < std::time::Duration::from_secs(60), "{seen}");
    }
    guard.signal(libc::SIGINT);
    let mut rest = String::new();
    std::io::Read::read_to_string(&mut stdout, &mut rest).unwrap();
    let (code, _, err) = guard.finish();
    assert_eq!(code, Some(0), "{seen}{rest}{err}");
    assert!(
        rest.contains("batch ended: tally: 0 unit(s)"),
        "{seen}{rest}{err}"
    );
    // Nothing was tested: no unit folder was made.
    let records = f.rig.dir.path().join("records");
    let units = std::fs::read_dir(&records)
        .map(|d| {
            d.filter_map(|e| e.ok())
                .filter(|e| !e.file_name().to_string_lossy().starts_with('.'))
                .count()
        })
        .unwrap_or(0);
    assert_eq!(units, 0);
}
