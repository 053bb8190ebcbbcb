//! Pre-flight: before any stress, power the unit unloaded, take one reading and compare the
//! output with the design's band. A unit that does not look like the design (the wrong design
//! file, the wrong unit, a dead or miswired one) stops there, with the bench in its safe
//! state; the stop carries the reading as a record row (kind `preflight`) for the record that
//! `execute` writes of it. `Preflight::Skip` (the command line's `--no-preflight`)
//! overrides. Talks to the bench only through `BenchControl`; prints nothing.

use super::{PipelineError, Prepared};
use crate::control::BenchControl;
use crate::measure::{Measurement, Quantity, Reading, Role};
use crate::quantity::eng;
use crate::record::{Cell, Cells, Flags, LoadState, Row, StepKind};
use crate::runner::CancelToken;
use std::time::Duration;

/// Whether the pre-flight reading is taken and judged.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Preflight {
    /// Take the no-load reading and stop when it lies outside the design's band.
    #[default]
    Check,
    /// Go straight to the plan (the operator has overridden the check).
    Skip,
}

/// How far outside the design's worst-case output band the first reading may lie, as a
/// fraction of the nominal output, before the unit is said not to look like the design
/// (10 %: a unit a little outside its tolerances is measured and judged, a unit built to
/// another design is stopped; project choice).
pub const PREFLIGHT_MARGIN: f64 = 0.10;

/// The band the no-load reading must fall in: the design's worst-case output widened by
/// [`PREFLIGHT_MARGIN`] of the nominal output.
pub fn preflight_band(prep: &Prepared) -> (f64, f64) {
    let band = prep.expectation.vout.setting_band;
    let slack = PREFLIGHT_MARGIN * band.nominal.abs();
    (band.worst_case.min - slack, band.worst_case.max + slack)
}

/// Judge one no-load output reading against the design (pure).
pub fn judge_preflight(prep: &Prepared, volts: f64) -> Result<(), PipelineError> {
    let (lo, hi) = preflight_band(prep);
    if volts.is_finite() && volts >= lo && volts <= hi {
        return Ok(());
    }
    let wc = prep.expectation.vout.setting_band.worst_case;
    Err(PipelineError::PreFlight {
        message: format!(
            "pre-flight: the unloaded output reads {} where design '{}' gives {} .. {} \
             (worst case): this unit does not look like the design, so nothing was stressed; \
             check the --design file, the unit and its wiring, or run with --no-preflight to \
             go ahead anyway",
            eng(volts, "V"),
            prep.design.design.name,
            eng(wc.min, "V"),
            eng(wc.max, "V"),
        ),
        measured_v: volts,
        row: None,
        record: None,
    })
}

/// The pre-flight reading as a record row: kind `preflight`, step 0, load off, the source
/// voltage programmed for it (if any), one sample.
pub fn preflight_row(m: &Measurement, elapsed_s: f64, source_volts: Option<f64>) -> Row {
    let cells: Cells = m
        .values
        .iter()
        .map(|(q, r)| {
            let cell = match r {
                Reading::Value(v) => Some(Cell::Value {
                    mean: *v,
                    spread: 0.0,
                }),
                Reading::Overrange => Some(Cell::Overrange),
            };
            (*q, cell)
        })
        .collect();
    let mut flags = Flags::new();
    if cells.any_overrange() {
        flags.insert(crate::record::Flag::Overrange);
    }
    Row {
        utc: crate::record::utc_string(chrono::Utc::now()),
        elapsed_s: (elapsed_s * 1000.0).round() / 1000.0,
        step: 0,
        step_kind: StepKind::Preflight,
        point: 0,
        load_mode: LoadState::Off,
        setpoint: None,
        source_volts,
        samples: 1,
        cells,
        flags,
    }
}

/// Take the pre-flight reading and judge it. On a stop (or an instrument failure) the bench
/// is put in its safe state before returning.
pub async fn preflight<B: BenchControl>(
    bench: &mut B,
    prep: &Prepared,
    cancel: &CancelToken,
) -> Result<(), PipelineError> {
    if prep.preflight == Preflight::Skip || !bench.has_role(Role::OutputVoltmeter) {
        return Ok(());
    }
    let t0 = std::time::Instant::now();
    let mut source_v = None;
    let reading = async {
        bench.set_load_input(false).await?;
        if bench.has_role(Role::InputSource) {
            if let Some(v) = prep.plan.source_volts {
                bench.set_source_voltage(v).await?;
                bench.set_source_output(true).await?;
                source_v = Some(v);
            }
        }
        let settle = prep
            .plan
            .steps
            .first()
            .map(|s| s.settle)
            .unwrap_or(Duration::from_millis(500));
        tokio::time::sleep(settle).await;
        bench.measure().await
    }
    .await;
    let verdict = match reading {
        Ok(_) if cancel.is_cancelled() => Err(PipelineError::PreFlightCancelled),
        Ok(m) => {
            let v = m.get(Quantity::OutputVoltage).unwrap_or(f64::NAN);
            judge_preflight(prep, v).map_err(|e| match e {
                PipelineError::PreFlight {
                    message,
                    measured_v,
                    record,
                    ..
                } => PipelineError::PreFlight {
                    message,
                    measured_v,
                    row: Some(Box::new(preflight_row(
                        &m,
                        t0.elapsed().as_secs_f64(),
                        source_v,
                    ))),
                    record,
                },
                other => other,
            })
        }
        Err(error) => Err(PipelineError::PreFlightInstrument { error }),
    };
    if verdict.is_err() {
        if bench.has_role(Role::Load) {
            let _ = bench.set_load_input(false).await;
        }
        if bench.has_role(Role::InputSource) {
            let _ = bench.set_source_output(false).await;
        }
        let _ = bench.safe_state().await;
    }
    verdict
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pipeline::{prepare, RunRequest};

    fn prep() -> Prepared {
        let root = env!("CARGO_MANIFEST_DIR");
        let dir = tempfile::tempdir().unwrap();
        let plan = dir.path().join("p.toml");
        std::fs::write(&plan, "name = \"p\"\n[[step]]\nkind = \"knee_search\"\n").unwrap();
        prepare(&RunRequest {
            bench: format!("{root}/config/bench-loopback-example.toml").into(),
            design: format!("{root}/samples/teaching-lab-0-20v.toml").into(),
            plan,
            unit: "U1".into(),
            records: dir.path().join("r"),
            operator: None,
            note: None,
        })
        .unwrap()
    }

    #[test]
    fn the_unloaded_output_must_look_like_the_design() {
        let p = prep();
        let (lo, hi) = preflight_band(&p);
        let wc = p.expectation.vout.setting_band.worst_case;
        assert!(lo < wc.min && hi > wc.max);
        // Inside the worst case, and a little outside it: measured and judged by the plan.
        assert!(judge_preflight(&p, p.expectation.vout.setting_band.nominal).is_ok());
        assert!(judge_preflight(&p, wc.max + 0.5).is_ok());
        // A 12 V unit on a 20 V design, a dead output, no reading: stopped.
        for v in [12.0, 0.0, f64::NAN] {
            let e = judge_preflight(&p, v).unwrap_err();
            assert!(e.is_stopped_before_stress(), "{e}");
            assert!(
                e.to_string().contains("does not look like the design"),
                "{e}"
            );
        }
    }
}
