//! `regulus demo`: no hardware, no arguments. Starts the built-in simulated bench in-process on
//! pseudo-terminals and loopback TCP, runs the standard plan on two simulated units of the
//! teaching-lab demo design (one built right, one with a wrong sense resistor), writes their
//! records and reports, and says where they are. Uses the same pipeline as `regulus run`.

use super::present;
use super::usage;
use crate::bench::Bench;
use crate::design::Design;
use crate::pipeline::{self, RunRequest};
use crate::sim::{Fault, SimBench, SimOptions};
use anyhow::Context;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The demo design (invented) and plan, built into the binary so the demo runs anywhere.
const DESIGN: &str = include_str!("../../samples/teaching-lab-0-20v.toml");
const PLAN: &str = include_str!("../../samples/plans/standard.toml");

/// Options of `regulus demo` (none are needed).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Folder for the demo's inputs, records and reports (created when missing).
    #[arg(long, value_name = "DIR", default_value = "regulus-demo")]
    pub records: PathBuf,
    /// Seed of the simulated units' part tolerances and meter noise.
    #[arg(long, value_name = "N", default_value_t = 2026)]
    pub seed: u64,
}

/// One simulated unit of the demo.
struct DemoUnit {
    serial: &'static str,
    what: &'static str,
    fault: Option<&'static str>,
}

const UNITS: [DemoUnit; 2] = [
    DemoUnit {
        serial: "TLB-0001",
        what: "built as designed",
        fault: None,
    },
    DemoUnit {
        serial: "TLB-0002",
        what: "a 0.68 ohm sense resistor fitted where the design has 0.39 ohm",
        fault: Some("sense=0.68"),
    },
];

fn write_input(dir: &Path, name: &str, text: &str) -> anyhow::Result<PathBuf> {
    let path = dir.join(name);
    std::fs::write(&path, text).with_context(|| format!("writing {}", path.display()))?;
    Ok(path)
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let inputs = args.records.join("inputs");
    std::fs::create_dir_all(&inputs)
        .map_err(|e| usage(format!("cannot create {}: {e}", inputs.display())))?;
    let design_path = write_input(&inputs, "teaching-lab-0-20v.toml", DESIGN)?;
    let plan_path = write_input(&inputs, "standard.toml", PLAN)?;
    let design = Design::parse(DESIGN, &design_path.display().to_string())?;

    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    writeln!(out, "regulus demo: a simulated bench, no hardware needed.")?;
    writeln!(
        out,
        "design: {} ({})",
        design.design.name,
        design_path.display()
    )?;
    writeln!(out, "plan:   standard ({})", plan_path.display())?;
    writeln!(
        out,
        "On a real bench this plan shorts the unit's output: the pass device then dissipates about\n\
         V_in x I_sc and its heatsink gets hot. Follow local codes and licensed practice.\n"
    )?;
    drop(out);

    let (cancel, rt) = present::interruptible_runtime()?;

    let mut results = Vec::new();
    for (k, unit) in UNITS.iter().enumerate() {
        let mut opts = SimOptions::default().seed(args.seed.wrapping_add(k as u64));
        if let Some(spec) = unit.fault {
            opts = opts.fault(Fault::parse(spec).map_err(usage)?);
        }
        let sim = SimBench::start(&design, opts).context("starting the simulated bench")?;
        let bench_path = write_input(
            &inputs,
            &format!("bench-{}.toml", unit.serial),
            &sim.bench_toml(),
        )?;
        println!(
            "unit {} ({}): simulated instruments on",
            unit.serial, unit.what
        );
        for p in sim.ports() {
            println!("  {:<8} {}", p.name, p.link);
        }
        let request = RunRequest {
            bench: bench_path.clone(),
            design: design_path.clone(),
            plan: plan_path.clone(),
            unit: unit.serial.to_string(),
            records: args.records.clone(),
            operator: Some("demo".to_string()),
            note: Some(format!("simulated unit: {}", unit.what)),
        };
        let prep = pipeline::prepare(&request)?;
        let code = rt.block_on(async {
            let mut bench = Bench::open(&prep.bench).await?;
            present::run_and_show(
                &mut bench,
                &prep,
                &request,
                &cancel,
                present::ResultFormat::Text,
            )
            .await
        })?;
        sim.shutdown();
        println!();
        results.push((unit, code));
        if cancel.is_cancelled() {
            break;
        }
    }
    println!(
        "demo finished: records, plots and reports are under {}",
        args.records.display()
    );
    for (unit, _) in &results {
        let (verdict, causes, report) = recap(&args.records, unit.serial);
        println!("  {:<9} {:<5} {}", unit.serial, verdict, unit.what);
        for c in causes {
            println!("  {:<9} {:<5} likely cause: {c}", "", "");
        }
        println!("  {:<9} {:<5} report: {report}", "", "");
    }
    println!(
        "next: open a report.html in a browser, or try `regulus history TLB-0002 --records {}` \
         and `regulus design {}`",
        args.records.display(),
        design_path.display()
    );
    // The demo's own exit code: 0 when it ran through (one unit is meant to fail).
    Ok(super::for_batch(results.iter().map(|(_, c)| *c)))
}

/// Verdict, the likely causes worth showing, and the report path of a unit's newest record.
fn recap(records: &Path, serial: &str) -> (String, Vec<String>, String) {
    let Some(dir) = crate::record::list_runs(records, serial)
        .ok()
        .and_then(|runs| runs.last().map(|r| r.dir.clone()))
    else {
        return ("?".into(), Vec::new(), "(no record)".into());
    };
    let summary: Option<serde_json::Value> = std::fs::read(dir.join("summary.json"))
        .ok()
        .and_then(|b| serde_json::from_slice(&b).ok());
    let verdict = summary
        .as_ref()
        .and_then(|s| s["verdict"].as_str())
        .unwrap_or("none")
        .to_uppercase();
    let all: Vec<String> = summary
        .as_ref()
        .map(super::present::likely_causes_in)
        .unwrap_or_default();
    // The causes are ranked: the first is the best fit.
    let causes: Vec<String> = all.into_iter().take(1).collect();
    (
        verdict,
        causes,
        dir.join("report.html").display().to_string(),
    )
}
