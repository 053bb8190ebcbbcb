//! `regulus sim`: build a simulated as-built unit from a design, serve its instruments on
//! pseudo-terminals and loopback TCP, print the ports and the unit's true values, write a bench
//! file for those ports, and run until interrupted (or for a set time).

use super::{CodedError, EXIT_OK, EXIT_USAGE};
use crate::design::{ClampMount, Design};
use crate::quantity::eng;
use crate::sim::instruments::InstrumentKind;
use crate::sim::{Fault, HeatModel, KneeModel, Link, SimBench, SimOptions, TransportMix, Truth};
use anyhow::Context;
use std::io::Write;
use std::path::PathBuf;
use std::time::Duration;

/// Options of `regulus sim`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Design file of the unit to simulate.
    #[arg(long, value_name = "FILE")]
    pub design: PathBuf,
    /// Seed of the as-built unit (element values drawn within tolerance) and of the noise.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Write a bench file for the simulated instruments' ports here.
    #[arg(long, value_name = "FILE")]
    pub write_bench: Option<PathBuf>,
    /// Let --write-bench replace an existing file (without it, an existing file is kept and
    /// the command stops before starting the bench).
    #[arg(long)]
    pub overwrite_bench: bool,
    /// Write the as-built unit's true values (and element values) here as JSON.
    #[arg(long, value_name = "FILE")]
    pub write_truth: Option<PathBuf>,
    /// Inject a fault (repeatable). Unit: sense=0.56, diodes=+1, diodes=-1, theta_sa=12,
    /// vref=5.3. Port (dmm, ammeter, eload, psu, thermo): dmm:garbage=5, dmm:drop=3,
    /// eload:slow=800, psu:close-after=20, thermo:close-at=5, eload:lag=300 (settings applied
    /// late, in order), eload:ack=on (settings answered OK / ERR), eload:refuse=3 (the third
    /// setting refused), dmm:late=3 (every third reply 1.5 s late); on Modbus devices also
    /// eload:exception=4 (every 4th request answered with an exception).
    #[arg(long = "fault", value_name = "SPEC")]
    pub faults: Vec<String>,
    /// Reply latency of every instrument in milliseconds (0 allowed).
    #[arg(long, default_value_t = 3, value_name = "N")]
    pub latency_ms: u64,
    /// Port kinds: mixed (meters and thermometer on pseudo-terminals, load and source on
    /// TCP), pty (all pseudo-terminals), tcp (all loopback TCP), modbus (load and source as
    /// Modbus RTU devices, all on pseudo-terminals) or modbus-tcp (load and source as Modbus
    /// TCP devices, all on loopback TCP).
    #[arg(long, default_value = "mixed", value_name = "KIND")]
    pub transport: String,
    /// Noise multiplier of the instruments (1 = realistic, 0 = noiseless).
    #[arg(long, default_value_t = 1.0, value_name = "X")]
    pub noise: f64,
    /// Room temperature in degC (default: the design's nominal ambient).
    #[arg(long, value_name = "DEGC")]
    pub ambient: Option<f64>,
    /// Leave an instrument off the bench (repeatable): dmm, ammeter, eload, psu, thermo.
    /// Without psu the unit always runs from its own input.
    #[arg(long, value_name = "NAME")]
    pub without: Vec<String>,
    /// How the pass device heats: network (the default: the design's three-stage network,
    /// junction, case and heatsink, from its [pass.thermal_mass]; a design without thermal
    /// masses falls back to simple, and the output says why) or simple (one lumped
    /// first-order stage, junction to ambient).
    #[arg(long, default_value = "network", value_name = "MODEL")]
    pub heat: String,
    /// Stop after this many seconds instead of waiting for Ctrl-C.
    #[arg(long, value_name = "SECONDS")]
    pub run_for: Option<f64>,
}

/// Check the arguments and turn them into simulator options (no port is opened here).
pub fn options(args: &Args) -> Result<SimOptions, CodedError> {
    let usage = |m: String| CodedError::new(EXIT_USAGE, m);
    let transport = TransportMix::parse(&args.transport).ok_or_else(|| {
        usage(format!(
            "--transport '{}': use mixed, pty, tcp, modbus or modbus-tcp",
            args.transport
        ))
    })?;
    if !(args.noise.is_finite() && args.noise >= 0.0) {
        return Err(usage(format!(
            "--noise {}: use a number of 0 or more",
            args.noise
        )));
    }
    if let Some(s) = args.run_for {
        if !(s.is_finite() && (0.0..=1e9).contains(&s)) {
            return Err(usage(format!("--run-for {s}: use seconds, from 0 to 1e9")));
        }
    }
    if let Some(t) = args.ambient {
        if !(t.is_finite() && (-40.0..=85.0).contains(&t)) {
            return Err(usage(format!(
                "--ambient {t}: use a room temperature from -40 to 85 degC"
            )));
        }
    }
    let heat = crate::sim::HeatModel::parse(&args.heat).ok_or_else(|| {
        usage(format!(
            "--heat '{}': use network (the design's thermal network) or simple (one lumped stage)",
            args.heat
        ))
    })?;
    let model = crate::sim::UnitModel {
        ambient_c: args.ambient,
        heat,
        ..Default::default()
    };
    let mut opts = SimOptions::default()
        .model(model)
        .seed(args.seed)
        .latency(Duration::from_millis(args.latency_ms))
        .transport(transport)
        .noise(args.noise);
    for name in &args.without {
        let kind = InstrumentKind::parse(name).ok_or_else(|| {
            usage(format!(
                "--without '{name}': use dmm, ammeter, eload, psu or thermo"
            ))
        })?;
        opts = opts.without(kind);
    }
    for spec in &args.faults {
        opts = opts.fault(Fault::parse(spec).map_err(|e| usage(format!("--{e}")))?);
    }
    opts.check_faults().map_err(|e| usage(format!("--{e}")))?;
    Ok(opts)
}

/// Print the ports and the as-built unit's true values.
pub fn write_summary<W: Write>(w: &mut W, design: &Design, sim: &SimBench) -> std::io::Result<()> {
    writeln!(w, "Simulated bench for '{}'", design.design.name)?;
    writeln!(w, "(simulation: no hardware is driven)")?;
    writeln!(w)?;
    writeln!(w, "Instruments:")?;
    for p in sim.ports() {
        let mut link = match &p.link {
            Link::Pty(path) => format!("pseudo-terminal {path}"),
            Link::Tcp(a) => format!("tcp {a}"),
        };
        if p.protocol == crate::sim::PortProtocol::Modbus {
            link = format!(
                "modbus unit {}, {link}",
                crate::sim::modbus_map::unit_id(p.kind)
            );
        }
        writeln!(w, "  {:<8} {:<26} {}", p.name, p.kind.model(), link)?;
    }
    writeln!(w)?;
    write_truth(w, sim.truth())
}

/// The true values of the as-built unit, for comparing with what a run measures.
pub fn write_truth<W: Write>(w: &mut W, t: &Truth) -> std::io::Result<()> {
    writeln!(w, "As-built unit (true values, junctions at ambient):")?;
    let rows = [
        ("regulated output", eng(t.regulated_v, "V")),
        ("no-load output", eng(t.no_load_v, "V")),
        ("output resistance", eng(t.output_resistance, "ohm")),
        ("knee (2 % drop)", eng(t.knee_current, "A")),
        ("limit line at setting", eng(t.limit_line_current, "A")),
        ("short-circuit current", eng(t.short_circuit_current, "A")),
        ("clamp sense voltage", eng(t.sense_v, "V")),
        ("sense resistor", eng(t.params.r_sense, "ohm")),
        ("ambient", eng(t.ambient_c, "degC")),
        (
            "pass device thermal",
            match t.heat.model {
                HeatModel::Network => {
                    let tau = t.pass_stage_tau_s.unwrap_or_default();
                    // Without a heatsink (the theta_sa fault) its stage keeps no mass.
                    let sink = if tau[2] < 1e-3 * tau[1] {
                        "none fitted".to_string()
                    } else {
                        eng(tau[2], "s")
                    };
                    format!(
                        "{} junction to ambient, network (time constants: junction {}, case {}, \
                         heatsink {sink})",
                        eng(t.pass_theta, "degC/W"),
                        eng(tau[0], "s"),
                        eng(tau[1], "s"),
                    )
                }
                HeatModel::Lumped => format!(
                    "{} junction to ambient, simple: one stage, time constant {}",
                    eng(t.pass_theta, "degC/W"),
                    eng(t.pass_tau_s, "s")
                ),
            },
        ),
        (
            "clamp junctions",
            match t.clamp_mount {
                ClampMount::Ambient => "at ambient (the design's clamp_mount)".to_string(),
                ClampMount::Heatsink => {
                    "on the pass device's heatsink (the design's clamp_mount)".to_string()
                }
            },
        ),
        (
            "knee width",
            format!(
                "{} across the sense resistor ({})",
                eng(t.knee_width_v, "V"),
                match t.knee_model {
                    KneeModel::PerJunction => "N kT/q per junction that sets the threshold",
                    KneeModel::OneJunction => "one junction's N kT/q",
                }
            ),
        ),
    ];
    for (k, v) in rows {
        writeln!(w, "  {k:<24} {v}")?;
    }
    if let Some(note) = &t.heat.note {
        writeln!(w, "  note                     {note}")?;
    }
    if t.faults.is_empty() {
        writeln!(w, "  faults                   none")?;
    } else {
        for f in &t.faults {
            writeln!(w, "  fault                    {f}")?;
        }
    }
    Ok(())
}

pub fn run(args: Args) -> anyhow::Result<u8> {
    let opts = options(&args)?;
    if let Some(path) = &args.write_bench {
        if path.exists() && !args.overwrite_bench {
            return Err(CodedError::new(
                EXIT_USAGE,
                format!(
                    "--write-bench {}: the file exists; choose another path or add --overwrite-bench",
                    path.display()
                ),
            )
            .into());
        }
    }
    let design = Design::load(&args.design)?;
    let sim = SimBench::start(&design, opts).map_err(|e| match e {
        crate::sim::SimError::Unit(u) => {
            anyhow::Error::new(CodedError::new(EXIT_USAGE, format!("--fault: {u}")))
        }
        other => anyhow::Error::new(other).context("starting the simulated bench"),
    })?;
    let mut out = std::io::stdout().lock();
    write_summary(&mut out, &design, &sim)?;
    if let Some(path) = &args.write_bench {
        std::fs::write(path, sim.bench_toml())
            .with_context(|| format!("writing the bench file {}", path.display()))?;
        writeln!(out, "\nBench file written: {}", path.display())?;
    }
    if let Some(path) = &args.write_truth {
        let json = serde_json::to_string_pretty(sim.truth())?;
        std::fs::write(path, json + "\n")
            .with_context(|| format!("writing the true values to {}", path.display()))?;
        writeln!(out, "True values written: {}", path.display())?;
    }
    let (tx, rx) = std::sync::mpsc::channel::<()>();
    // Kept alive so that waiting blocks even when no handler could be set.
    let _keep = tx.clone();
    // A handler may already exist in this process (an embedding program): then rely on
    // --run-for or the process ending.
    let _ = ctrlc::set_handler(move || {
        let _ = tx.send(());
    });
    match args.run_for {
        Some(s) => {
            writeln!(out, "\nRunning for {s} s.")?;
            out.flush()?;
            let _ = rx.recv_timeout(Duration::from_secs_f64(s));
        }
        None => {
            writeln!(out, "\nRunning; press Ctrl-C to stop.")?;
            out.flush()?;
            let _ = rx.recv();
        }
    }
    sim.shutdown();
    writeln!(out, "Simulated bench stopped; ports closed.")?;
    Ok(EXIT_OK)
}
