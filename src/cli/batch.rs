//! `regulus batch`: test units one after another at a station. Asks for the next serial on
//! stdin (a barcode scanner types it and presses Enter), checks it (the station's pattern;
//! a serial already tested in this batch needs a `yes`), tests the unit, shows a large
//! verdict and where its certificate is, and keeps a running tally (passed, marginal, failed,
//! incomplete, error, yield, Cpk once enough units exist). End of input or Ctrl-C between
//! units ends the batch cleanly; Ctrl-C during a unit aborts it to the safe state, then the
//! batch ends. Thin: the logic lives in `station` and the station runs of `cli::station`.

use super::station::{self as st_run, PdfMode};
use super::{present, EXIT_ABORTED, EXIT_OK};
use crate::bench::Bench;
use crate::runner::CancelToken;
use crate::station::{FloorResult, SerialCheck, SerialGate, Tally};
use std::io::{BufRead, Write};
use std::path::PathBuf;
use std::sync::mpsc;
use std::time::Duration;

/// Options of `regulus batch`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Station file (default: REGULUS_STATION, then the configuration folder).
    #[arg(long, value_name = "FILE")]
    pub station: Option<PathBuf>,
    /// Who runs the batch (default: the station file's operator).
    #[arg(long, value_name = "NAME")]
    pub operator: Option<String>,
    /// Confirm the short-circuit cautions once for the whole batch (needed when stdin is not
    /// a terminal: the serials come on stdin).
    #[arg(long)]
    pub yes: bool,
    /// Do not print certificates to PDF (by default they are, when Chromium is installed).
    #[arg(long)]
    pub no_pdf: bool,
}

/// Lines of stdin, read on their own thread so that Ctrl-C can end the wait for a serial.
fn stdin_lines() -> mpsc::Receiver<String> {
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        let stdin = std::io::stdin();
        let mut lock = stdin.lock();
        loop {
            let mut line = String::new();
            match lock.read_line(&mut line) {
                Ok(0) | Err(_) => break,
                Ok(_) => {
                    if tx.send(line).is_err() {
                        break;
                    }
                }
            }
        }
    });
    rx
}

/// The next line, or `None` at end of input or on Ctrl-C.
fn next_line(rx: &mpsc::Receiver<String>, cancel: &CancelToken) -> Option<String> {
    loop {
        if cancel.is_cancelled() {
            return None;
        }
        match rx.recv_timeout(Duration::from_millis(100)) {
            Ok(l) => return Some(l.trim().to_string()),
            Err(mpsc::RecvTimeoutError::Timeout) => continue,
            Err(mpsc::RecvTimeoutError::Disconnected) => return None,
        }
    }
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let st = st_run::require(args.station.as_deref())?;
    // Read and check every input once, before any port opens; each unit reuses them.
    let mut req = st_run::request(&st, "batch", args.operator.clone(), None);
    let prep = crate::pipeline::prepare(&req)?;
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    writeln!(
        out,
        "batch at station {}: design {}, plan {}, records {}",
        st.id,
        prep.design.design.name,
        prep.plan.name,
        st.records.display()
    )?;
    // The serials come on stdin, so the cautions are confirmed with --yes, never on stdin.
    super::run::confirm_short_circuit(
        &prep.plan,
        prep.targets.input_voltage_v,
        args.yes,
        false,
        &mut &b""[..],
        &mut out,
    )?;
    let pdf = if args.no_pdf {
        PdfMode::Skip
    } else {
        PdfMode::Print
    };
    if pdf == PdfMode::Print && crate::report::pdf::find_chromium().is_none() {
        writeln!(
            out,
            "note: Chromium is not installed: certificates are written as HTML only"
        )?;
    }
    let (cancel, rt) = present::interruptible_runtime()?;
    let lines = stdin_lines();
    let mut gate = SerialGate::new();
    let mut tally = Tally::new();
    let mut code = EXIT_OK;
    let mut bench: Option<Bench> = None;
    loop {
        write!(
            out,
            "\nnext unit serial (end of input or Ctrl-C ends the batch): "
        )?;
        out.flush()?;
        let Some(serial) = next_line(&lines, &cancel) else {
            writeln!(out)?;
            break;
        };
        if serial.is_empty() {
            continue;
        }
        match gate.check(&st, &serial) {
            SerialCheck::Refuse(why) => {
                writeln!(out, "refused: {why}")?;
                continue;
            }
            SerialCheck::Repeat { times } => {
                write!(
                    out,
                    "{serial} was already tested {times} time(s) in this batch: type yes to test it again: "
                )?;
                out.flush()?;
                match next_line(&lines, &cancel) {
                    Some(a) if a.eq_ignore_ascii_case("yes") => {}
                    Some(_) => {
                        writeln!(out, "not tested again: {serial}")?;
                        continue;
                    }
                    None => break,
                }
            }
            SerialCheck::Accept => {}
        }
        writeln!(out, "testing {serial}")?;
        req.unit = serial.clone();
        // The bench stays open from unit to unit (its streaming readers keep their ports);
        // after a unit that did not finish it is opened afresh.
        let done = rt.block_on(async {
            if bench.is_none() {
                match Bench::open(&prep.bench).await {
                    Ok(b) => bench = Some(b),
                    Err(e) => {
                        writeln!(
                            out,
                            "error: the bench did not open: {}",
                            present::chain_text(&e)
                        )?;
                        st_run::big_verdict(&mut out, FloorResult::Error, &serial)?;
                        return Ok::<_, anyhow::Error>(st_run::UnitDone {
                            result: FloorResult::Error,
                            dir: None,
                            certificate: None,
                            values: Vec::new(),
                            code: super::exit_code_for(&e.into()),
                        });
                    }
                }
            }
            let Some(b) = bench.as_mut() else {
                return Err(anyhow::anyhow!("the bench is not open"));
            };
            st_run::test_unit(b, &prep, &req, &st, &cancel, pdf, &mut out).await
        })?;
        if !done.result.judged() {
            bench = None;
        }
        gate.tested(&serial);
        tally.add(&serial, done.result, &done.values);
        writeln!(out, "{}", tally.line())?;
        if cancel.is_cancelled() {
            writeln!(
                out,
                "interrupted during {serial}: the bench was left in its safe state; batch ended"
            )?;
            code = EXIT_ABORTED;
            break;
        }
    }
    writeln!(out, "batch ended: {}", tally.line())?;
    Ok(code)
}
