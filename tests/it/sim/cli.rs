//! `regulus sim` as a user runs it: ports and true values printed, a bench file written,
//! configuration errors exit 2.

use crate::support::lock::serial;
use std::process::Command;

fn regulus() -> Command {
    Command::new(env!("CARGO_BIN_EXE_regulus"))
}

fn sample(name: &str) -> String {
    format!("{}/samples/{name}", env!("CARGO_MANIFEST_DIR"))
}

#[test]
fn sim_prints_ports_truth_and_writes_the_bench_file() {
    let _g = serial();
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    let out = regulus()
        .args(["sim", "--design", &sample("fixed-12v-3a-foldback.toml")])
        .args(["--seed", "3", "--run-for", "0.3", "--fault", "sense=0.39"])
        .args(["--without", "psu"])
        .arg("--write-bench")
        .arg(&bench)
        .arg("--write-truth")
        .arg(dir.path().join("truth.json"))
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{text}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for word in [
        "dmm",
        "ammeter",
        "eload",
        "thermo",
        "pseudo-terminal /dev/",
        "tcp 127.0.0.1:",
    ] {
        assert!(text.contains(word), "{word} missing in:\n{text}");
    }
    assert!(!text.contains("psu "), "{text}");
    assert!(text.contains("short-circuit current"), "{text}");
    assert!(text.contains("sense resistor fitted: 0.39 ohm"), "{text}");
    assert!(text.contains("ports closed"), "{text}");
    // The foldback sample states no thermal masses: the network cannot run, and the output
    // says so and what the unit uses instead.
    assert!(
        text.contains("thermal network not used: the design has no [pass.thermal_mass]"),
        "{text}"
    );
    assert!(text.contains("simple: one stage"), "{text}");
    let written = std::fs::read_to_string(&bench).unwrap();
    let truth: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("truth.json")).unwrap())
            .unwrap();
    // The fault is in the element values: the fitted sense resistor.
    assert_eq!(truth["params"]["r_sense"].as_f64(), Some(0.39));
    assert_eq!(truth["heat"]["model"].as_str(), Some("simple"), "{truth}");
    assert!(truth["heat"]["note"]
        .as_str()
        .unwrap()
        .contains("[pass.thermal_mass]"));
    assert!(truth["short_circuit_current"].as_f64().unwrap() > 0.0);
    assert_eq!(written.matches("[[instrument]]").count(), 4);
    assert!(!written.contains("input_source"));
}

#[test]
fn sim_config_errors_exit_2() {
    let _g = serial();
    let design = sample("teaching-lab-0-20v.toml");
    for bad in [
        vec!["--fault", "sense=-1"],
        vec!["--fault", "dmm:explode=1"],
        vec!["--transport", "carrier-pigeon"],
        vec!["--noise", "-1"],
        vec!["--without", "scope"],
        vec!["--ambient", "300"],
        vec!["--heat", "lumpy"],
    ] {
        let out = regulus()
            .args(["sim", "--design", &design, "--run-for", "0"])
            .args(&bad)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{bad:?}");
        assert!(!out.stderr.is_empty());
    }
    // A diode fault on a design without a diode string is a configuration error too.
    let out = regulus()
        .args([
            "sim",
            "--design",
            &sample("fixed-12v-3a-foldback.toml"),
            "--run-for",
            "0",
        ])
        .args(["--fault", "diodes=+1"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not a diode string"));
    let out = regulus()
        .args([
            "sim",
            "--design",
            "/nonexistent/design.toml",
            "--run-for",
            "0",
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn sim_runs_until_interrupted_then_closes_its_ports() {
    let _g = serial();
    use std::io::{BufRead, BufReader};
    use std::process::Stdio;
    /// Ends the simulator if the test fails before interrupting it.
    struct Guard(std::process::Child);
    impl Drop for Guard {
        fn drop(&mut self) {
            let _ = self.0.kill();
            let _ = self.0.wait();
        }
    }
    let mut child = Guard(
        regulus()
            .args(["sim", "--design", &sample("teaching-lab-0-20v.toml")])
            .args(["--transport", "tcp"])
            .stdout(Stdio::piped())
            .spawn()
            .unwrap(),
    );
    let mut out = BufReader::new(child.0.stdout.take().unwrap());
    let mut port = None;
    let mut line = String::new();
    while out.read_line(&mut line).unwrap() > 0 {
        if line.trim_start().starts_with("dmm") {
            port = line.split("tcp ").nth(1).map(|s| s.trim().to_string());
        }
        if line.contains("Ctrl-C") {
            break;
        }
        line.clear();
    }
    let addr = port.expect("the meter's address is printed");
    assert!(std::net::TcpStream::connect(&addr).is_ok());
    // SIGINT, as Ctrl-C sends it.
    let status = Command::new("kill")
        .args(["-INT", &child.0.id().to_string()])
        .status()
        .unwrap();
    assert!(status.success());
    let code = child.0.wait().unwrap().code();
    let mut rest = String::new();
    std::io::Read::read_to_string(&mut out, &mut rest).unwrap();
    assert_eq!(code, Some(0), "{rest}");
    assert!(rest.contains("ports closed"), "{rest}");
    assert!(
        std::net::TcpStream::connect(&addr).is_err(),
        "port still open"
    );
}

// Regression: `sim --write-bench` replaced an existing bench file without a word.
#[test]
fn write_bench_keeps_an_existing_file_unless_told() {
    let _g = serial();
    let dir = tempfile::tempdir().unwrap();
    let bench = dir.path().join("bench.toml");
    std::fs::write(&bench, "# my real bench\n").unwrap();
    let design = sample("teaching-lab-0-20v.toml");
    let out = regulus()
        .args(["sim", "--design", &design, "--run-for", "0"])
        .arg("--write-bench")
        .arg(&bench)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--overwrite-bench"));
    assert_eq!(
        std::fs::read_to_string(&bench).unwrap(),
        "# my real bench\n"
    );
    let out = regulus()
        .args([
            "sim",
            "--design",
            &design,
            "--run-for",
            "0",
            "--overwrite-bench",
        ])
        .arg("--write-bench")
        .arg(&bench)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
    assert!(std::fs::read_to_string(&bench)
        .unwrap()
        .contains("[[instrument]]"));
}

#[test]
fn sim_heats_through_the_designs_network_unless_asked_for_the_simple_model() {
    let _g = serial();
    let design = sample("teaching-lab-0-20v.toml");
    let run = |extra: &[&str]| {
        let out = regulus()
            .args(["sim", "--design", &design, "--run-for", "0"])
            .args(extra)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(0));
        String::from_utf8_lossy(&out.stdout).into_owned()
    };
    // The teaching-lab sample states its thermal masses: junction tau 0.5 s, case 10 J/degC
    // through theta_cs 0.2 degC/W (tau = theta C = 2 s), heatsink 900 J/degC through
    // 0.35 degC/W (315 s).
    let text = run(&[]);
    assert!(
        text.contains("network (time constants: junction 500 ms, case 2.00 s, heatsink 315 s)"),
        "{text}"
    );
    assert!(!text.contains("thermal network not used"), "{text}");
    // Three diodes set the threshold: the knee is 3 kT/q wide, 77.1 mV at 25 degC
    // (k T / q = 25.69 mV at 298.15 K, SI 2019 constants).
    assert!(text.contains("knee width               77.1 mV"), "{text}");
    let text = run(&["--heat", "simple"]);
    assert!(
        text.contains("simple: one stage, time constant 8.00 s"),
        "{text}"
    );
    assert!(!text.contains("network ("), "{text}");
}
