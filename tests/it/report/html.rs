//! The HTML report opened in headless Chromium: the page must render its tables and inline
//! SVG plots. Skips with a notice when chromium is absent, except when `CI` is set (then it
//! fails). Set `REGULUS_KEEP_REPORT=DIR` to keep the record, plots and screenshot in DIR, and
//! `REGULUS_CHROMIUM=PATH` to choose the browser.

use crate::support::report as sup;
use regulus::report::{self, ReportOptions};
use regulus::rng::Rng;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The browser: `REGULUS_CHROMIUM` when set (a missing path counts as absent), otherwise the
/// first of the usual names on PATH.
fn chromium() -> Option<PathBuf> {
    if let Some(p) = std::env::var_os("REGULUS_CHROMIUM") {
        let p = PathBuf::from(p);
        return p.is_file().then_some(p);
    }
    ["chromium", "chromium-browser", "google-chrome"]
        .iter()
        .find_map(|name| {
            let out = Command::new("sh")
                .arg("-c")
                .arg(format!("command -v {name}"))
                .output()
                .ok()?;
            let p = String::from_utf8_lossy(&out.stdout).trim().to_string();
            (!p.is_empty()).then(|| PathBuf::from(p))
        })
}

fn chromium_run(exe: &Path, extra: &[&str], page: &Path) -> std::process::Output {
    let profile = tempfile::tempdir().expect("profile dir");
    let mut cmd = Command::new(exe);
    cmd.args([
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
    ])
    .arg(format!("--user-data-dir={}", profile.path().display()))
    .args(extra)
    .arg(format!("file://{}", page.display()));
    cmd.output().expect("run chromium")
}

fn make_record(root: &Path) -> PathBuf {
    let mut rng = Rng::new(11);
    let unit = sup::Unit::draw(&mut rng).with_sense(0.68);
    let rows = sup::run_rows(&unit, &mut rng, sup::day(0), 40, 40, 30.0, 0.5);
    sup::write_record(root, "SN-0042", sup::day(0), &rows)
}

#[test]
fn html_report_renders_tables_and_plots_in_chromium() {
    let keep = std::env::var_os("REGULUS_KEEP_REPORT").map(PathBuf::from);
    let tmp = tempfile::tempdir().expect("tempdir");
    let root = keep.clone().unwrap_or_else(|| tmp.path().to_path_buf());
    let dir = make_record(&root);
    let exp = sup::expectation();
    let opts = ReportOptions {
        png: true,
        ..ReportOptions::default()
    };
    let written = report::write_report(&dir, Some(&exp), &opts).expect("report");
    // A unit built with a 0.68 ohm sense resistor instead of 0.47 ohm fails on the limit.
    assert_eq!(
        written.summary.verdict,
        Some(regulus::compare::Verdict::Fail)
    );
    let page = dir.join("report.html");
    let html = std::fs::read_to_string(&page).expect("read report.html");
    assert!(html.contains("<svg") && html.contains("id=\"verdicts\""));
    assert!(html.contains("0.68 ohm sense resistor fitted instead of 0.47 ohm"));
    // PNG files start with the PNG signature.
    let png = std::fs::read(dir.join("plots/vi_curve.png")).expect("png");
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");

    let Some(exe) = chromium() else {
        if std::env::var_os("CI").is_some() {
            panic!(
                "chromium is not installed and CI is set: the HTML report test cannot be skipped"
            );
        }
        eprintln!("NOTICE: chromium not found; skipping the browser part of the HTML report test");
        return;
    };
    let dom = chromium_run(&exe, &["--dump-dom"], &page);
    assert!(
        dom.status.success(),
        "chromium --dump-dom failed: {}",
        String::from_utf8_lossy(&dom.stderr)
    );
    let dom = String::from_utf8_lossy(&dom.stdout);
    assert!(
        dom.contains("<table id=\"verdicts\""),
        "verdict table missing from the DOM"
    );
    assert!(dom.contains("<table id=\"metrics\""));
    assert!(dom.contains("<table id=\"instruments\""));
    assert!(
        dom.matches("<svg").count() >= 3,
        "expected three inline SVG plots"
    );
    assert!(dom.contains("FAIL"));
    assert!(dom.contains("Cautions"));

    let shot = root.join("report-screenshot.png");
    let out = chromium_run(
        &exe,
        &[
            &format!("--screenshot={}", shot.display()),
            "--window-size=1200,1600",
        ],
        &page,
    );
    assert!(
        out.status.success(),
        "chromium --screenshot failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let bytes = std::fs::read(&shot).expect("screenshot written");
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n");
    assert!(
        bytes.len() > 20_000,
        "screenshot suspiciously small: {} bytes",
        bytes.len()
    );
}
