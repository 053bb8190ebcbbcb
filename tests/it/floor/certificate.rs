//! A unit's certificate, rendered in headless Chromium: the DOM must hold the large verdict,
//! the unit, design and revision, plan, station, operator, date, the instruments with their
//! identities and calibration due date, the key metrics against their limits and the
//! signature line; the screenshot must be a real picture; the PDF must be one page.
//! Skips with a notice when chromium is absent, except when `CI` is set (then it fails).

use crate::support::e2e::{serial, show};
use crate::support::floor::{chromium_or_skip, render, Floor};

#[test]
fn the_certificate_is_one_printable_page_with_what_must_be_on_it() {
    let _g = serial();
    let f = Floor::start(45, "TLB-[0-9]{4}");
    let out = f
        .regulus()
        .args(["run", "--yes", "--unit", "TLB-0045", "--station"])
        .arg(&f.station)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", show(&out));
    let dir = std::fs::read_dir(f.rig.dir.path().join("records/TLB-0045"))
        .unwrap()
        .next()
        .unwrap()
        .unwrap()
        .path();
    let page = dir.join("certificate.html");
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(html.contains("@media print") && html.contains("@page{size:A4"));
    let Some(exe) = chromium_or_skip("the certificate test") else {
        return;
    };
    let shot = f.rig.dir.path().join("certificate.png");
    let dom = render(&exe, &page, &shot, "900,1270");
    for must in [
        "id=\"verdict-banner\"",
        ">PASS<",
        "TLB-0045",
        "Teaching-lab bench supply 0-20 V / 1.2 A (demo) (revision B)",
        "floor-quick",
        "ST-07",
        "Operator One",
        "Started (UTC)",
        "2027-06-30",
        "Regulus Simulated Bench,Gnomon query voltmeter",
        "limit_current",
        "short_circuit_current",
        "lower limit",
        "Tested by (name, signature)",
    ] {
        assert!(dom.contains(must), "certificate DOM lacks {must:?}");
    }
    // The PDF was printed beside it (Chromium is installed) and is one page.
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("certificate PDF: "), "{}", show(&out));
    let pdf = std::fs::read(dir.join("certificate.pdf")).expect("certificate.pdf");
    assert_eq!(&pdf[..5], b"%PDF-");
    let text = String::from_utf8_lossy(&pdf);
    let pages = text.matches("/Type /Page").count() - text.matches("/Type /Pages").count();
    assert_eq!(pages, 1, "the certificate prints on {pages} pages");

    // The report carries the same banner, and its print stylesheet keeps it to two pages
    // (it printed on five before the stylesheet).
    let report = dir.join("report.html");
    let dom = render(
        &exe,
        &report,
        &f.rig.dir.path().join("report.png"),
        "1100,1400",
    );
    assert!(dom.contains("id=\"verdict-banner\"") && dom.contains(">PASS<"));
    let printed = f.rig.dir.path().join("report.pdf");
    regulus::report::pdf::print_to_pdf(&report, &printed).unwrap();
    let text = String::from_utf8_lossy(&std::fs::read(&printed).unwrap()).into_owned();
    let pages = text.matches("/Type /Page").count() - text.matches("/Type /Pages").count();
    assert!(pages <= 2, "the report prints on {pages} pages");
}
