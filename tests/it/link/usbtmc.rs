//! USB-TMC links. The Linux usbtmc kernel driver cannot run here, so the device is a
//! stand-in that behaves like its character device: a SOCK_SEQPACKET socket pair keeps
//! message boundaries (one write on our side is one message at the instrument, one reply is
//! one read), and a read with no reply coming blocks, as the driver's read blocks until its
//! timeout. The instrument side answers SCPI queries (IEEE 488.2: `*IDN?`, `*OPC?` answering
//! `1`) and records every message it gets.

use crate::support::link::runtime;
use regulus::bench::{Bench, BenchConfig, BenchError};
use regulus::control::BenchControl;
use regulus::measure::{LoadMode, Quantity};
use regulus::transport::{BoxTransport, UsbTmcCounters, UsbTmcLink};
use std::fs::File;
use std::io::{Read, Write};
use std::os::fd::FromRawFd;
use std::sync::atomic::Ordering;
use std::sync::{Arc, Mutex};

/// A message-preserving pair of sockets: (our end, the instrument's end).
fn seqpacket_pair() -> (File, File) {
    let mut fds = [0; 2];
    // SAFETY: socketpair(2) fills two descriptors that we then own, one File each.
    let r = unsafe {
        libc::socketpair(
            libc::AF_UNIX,
            libc::SOCK_SEQPACKET | libc::SOCK_CLOEXEC,
            0,
            fds.as_mut_ptr(),
        )
    };
    assert_eq!(r, 0, "socketpair: {}", std::io::Error::last_os_error());
    unsafe { (File::from_raw_fd(fds[0]), File::from_raw_fd(fds[1])) }
}

/// The instrument side: one reply message per query, nothing otherwise; every message kept.
/// The thread ends when our end is closed.
fn instrument(
    mut dev: File,
    answer: fn(&str) -> Option<String>,
) -> (Arc<Mutex<Vec<String>>>, std::thread::JoinHandle<()>) {
    let got = Arc::new(Mutex::new(Vec::new()));
    let got2 = Arc::clone(&got);
    let h = std::thread::spawn(move || {
        let mut buf = [0u8; 4096];
        loop {
            let n = match dev.read(&mut buf) {
                Ok(0) | Err(_) => return,
                Ok(n) => n,
            };
            let msg = String::from_utf8_lossy(&buf[..n]).to_string();
            got2.lock().unwrap().push(msg.clone());
            if let Some(reply) = answer(msg.trim_end()) {
                if dev.write_all(reply.as_bytes()).is_err() {
                    return;
                }
            }
        }
    });
    (got, h)
}

fn meter(msg: &str) -> Option<String> {
    match msg {
        "*IDN?" => Some("Regulus Simulated Bench,UT-1 meter,UT0001,1.0\n".into()),
        // One reply without a newline: the end of the message ends the reply.
        "MEAS:VOLT:DC?" => Some("+1.20034E+01".into()),
        _ => None,
    }
}

/// A SCPI load as the stand-in plays it: it keeps its mode, setpoint and input, and answers
/// the readback queries and the error queue (SCPI-1999 style replies, common practice).
fn load(msg: &str) -> Option<String> {
    use std::sync::atomic::{AtomicBool, AtomicU64, Ordering::SeqCst};
    static CURR: AtomicU64 = AtomicU64::new(0);
    static INP: AtomicBool = AtomicBool::new(false);
    if let Some(v) = msg.strip_prefix("CURR ") {
        CURR.store(v.trim().parse::<f64>().unwrap_or(0.0).to_bits(), SeqCst);
    }
    match msg {
        "INP ON" => INP.store(true, SeqCst),
        "INP OFF" => INP.store(false, SeqCst),
        _ => {}
    }
    match msg {
        "*IDN?" => Some("Regulus Simulated Bench,UT-2 load,UT0002,1.0\n".into()),
        "*OPC?" => Some("1\n".into()),
        "FUNC?" => Some("CURR\n".into()),
        "CURR?" => Some(format!("{:.4}\n", f64::from_bits(CURR.load(SeqCst)))),
        "INP?" => Some(if INP.load(SeqCst) { "1\n" } else { "0\n" }.into()),
        "SYST:ERR?" => Some("+0,\"No error\"\n".into()),
        "MEAS:VOLT?" => Some("+1.19000E+01\n".into()),
        "MEAS:CURR?" => Some("+1.50000E+00\n".into()),
        _ => None,
    }
}

const BENCH: &str = r#"
[[instrument]]
name = "dmm"
roles = ["output_voltmeter"]
preset = "scpi_meter"
usbtmc = { path = "/dev/usbtmc0" }

[[instrument]]
name = "eload"
roles = ["load"]
preset = "scpi_load"
usbtmc = { path = "/dev/usbtmc1" }
"#;

fn link(dev: File) -> (BoxTransport, Arc<UsbTmcCounters>) {
    let l = UsbTmcLink::from_file(dev, std::time::Duration::from_secs(1)).unwrap();
    let c = l.counters();
    (Box::new(l), c)
}

#[test]
fn presets_work_over_usbtmc_with_one_read_per_query() {
    let cfg = BenchConfig::parse(BENCH, "usbtmc.toml").unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(cfg.instruments[0].link.describe(), "usbtmc /dev/usbtmc0");
    let (ours_m, dev_m) = seqpacket_pair();
    let (ours_l, dev_l) = seqpacket_pair();
    let (got_m, th_m) = instrument(dev_m, meter);
    let (got_l, th_l) = instrument(dev_l, load);
    let (lm, cm) = link(ours_m);
    let (ll, cl) = link(ours_l);
    let rt = runtime();
    rt.block_on(async {
        let mut bench = Bench::with_transports(&cfg, vec![lm, ll])
            .await
            .unwrap_or_else(|e| panic!("{e}"));
        let ids = bench.identities();
        assert_eq!(
            ids[0].identity.as_deref(),
            Some("Regulus Simulated Bench,UT-1 meter,UT0001,1.0")
        );
        bench
            .set_load(LoadMode::ConstantCurrent, 1.5)
            .await
            .unwrap();
        bench.set_load_input(true).await.unwrap();
        for _ in 0..3 {
            let m = bench.measure().await.unwrap();
            assert_eq!(m.get(Quantity::OutputVoltage), Some(12.0034));
        }
        assert!(bench.safe_state().await.is_empty());
    });
    // Our ends close with the bench and the runtime: the instrument has seen every message.
    drop(rt);
    th_m.join().unwrap();
    th_l.join().unwrap();
    let m = got_m.lock().unwrap().clone();
    let l = got_l.lock().unwrap().clone();
    // Every message is one whole line.
    for msg in m.iter().chain(l.iter()) {
        assert!(
            msg.ends_with('\n') && msg.matches('\n').count() == 1,
            "{msg:?}"
        );
    }
    assert_eq!(
        m,
        vec![
            "*IDN?\n",
            "MEAS:VOLT:DC?\n",
            "MEAS:VOLT:DC?\n",
            "MEAS:VOLT:DC?\n"
        ]
    );
    assert_eq!(
        l,
        // Each setting in lockstep: the commands, the confirm query, the error queue, then the
        // readback of what was set; the safe state goes out unconfirmed.
        vec![
            "*IDN?\n",
            "FUNC CURR\n",
            "CURR 1.5000\n",
            "*OPC?\n",
            "SYST:ERR?\n",
            "FUNC?\n",
            "CURR?\n",
            "INP ON\n",
            "*OPC?\n",
            "SYST:ERR?\n",
            "INP?\n",
            "INP OFF\n"
        ]
    );
    // No speculative reads: exactly one device read per query sent.
    let queries = |v: &[String]| v.iter().filter(|s| s.contains('?')).count();
    assert_eq!(cm.reads.load(Ordering::SeqCst), queries(&m));
    assert_eq!(cl.reads.load(Ordering::SeqCst), queries(&l));
    assert_eq!(cl.messages_written.load(Ordering::SeqCst), l.len());
}

#[test]
fn streaming_instruments_and_usbtmc_nodes_as_serial_ports_are_refused() {
    let text = "[[instrument]]\nname = \"amm\"\nroles = [\"output_ammeter\"]\npreset = \"tagged_stream_meter\"\nusbtmc = { path = \"/dev/usbtmc0\" }\n";
    let e = BenchConfig::parse(text, "b.toml").unwrap_err().to_string();
    assert!(e.starts_with("b.toml:4:10:"), "{e}");
    assert!(
        e.contains("a streaming instrument cannot work over USB-TMC"),
        "{e}"
    );
    let text = "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\nserial = { port = \"/dev/usbtmc0\" }\n";
    let e = BenchConfig::parse(text, "b.toml").unwrap_err().to_string();
    assert!(e.starts_with("b.toml:5:10:"), "{e}");
    assert!(e.contains("usbtmc = { path"), "{e}");
}

#[test]
fn a_missing_node_says_what_to_check() {
    let cfg = BenchConfig::parse(
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\nusbtmc = { path = \"/dev/usbtmc-none-97\" }\n",
        "b.toml",
    )
    .unwrap();
    let rt = runtime();
    let e = rt.block_on(Bench::open(&cfg)).err().expect("no such node");
    assert!(matches!(e, BenchError::Open { .. }), "{e:?}");
    let text = e.to_string();
    assert!(
        text.contains("no such device node /dev/usbtmc-none-97"),
        "{text}"
    );
    assert!(text.contains("usbtmc driver"), "{text}");
}

/// A node the user may not open (root-only, as the driver's nodes are without a udev rule):
/// `regulus probe` says so and gives the rule. As root, the binary runs as `nobody` so the
/// permission check is real.
#[test]
fn permission_denied_gives_the_udev_rule() {
    // A child process must not inherit another test's pseudo-terminal (support::lock).
    let _g = crate::support::lock::serial();
    use std::os::unix::fs::PermissionsExt;
    use std::os::unix::process::CommandExt;
    let t = tempfile::tempdir().unwrap();
    std::fs::set_permissions(t.path(), std::fs::Permissions::from_mode(0o755)).unwrap();
    let node = t.path().join("usbtmc0");
    std::fs::write(&node, b"").unwrap();
    std::fs::set_permissions(&node, std::fs::Permissions::from_mode(0o000)).unwrap();
    let bench = t.path().join("bench.toml");
    std::fs::write(
        &bench,
        format!(
            "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\nusbtmc = {{ path = {:?} }}\n",
            node.display().to_string()
        ),
    )
    .unwrap();
    std::fs::set_permissions(&bench, std::fs::Permissions::from_mode(0o644)).unwrap();
    let mut cmd = std::process::Command::new(env!("CARGO_BIN_EXE_regulus"));
    cmd.arg("probe").arg("--bench").arg(&bench);
    // SAFETY: geteuid(2) has no preconditions.
    if unsafe { libc::geteuid() } == 0 {
        cmd.uid(65534).gid(65534);
    }
    let out = cmd.output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(4), "{text}");
    assert!(text.contains("permission denied opening"), "{text}");
    assert!(text.contains(regulus::transport::UDEV_RULE), "{text}");
}

/// A USB-TMC link is guarded: the guardian (the `regulus` binary's hidden guardian, started
/// here by hand with the link's descriptor, as `Bench::guard` starts it) is handed each
/// safe-state line as a frame of its own, and when its pipe closes (regulus gone) the
/// instrument gets each as one whole message, as the usbtmc driver takes one write as one
/// message; the note names the instrument.
#[test]
fn the_guardian_writes_each_safe_state_line_as_one_message() {
    // A child process must not inherit another test's pseudo-terminal (support::lock).
    let _g = crate::support::lock::serial();
    use regulus::guardian::{GuardPayload, GuardSpec, GUARDIAN_ARG, NOTE_FILE};
    use std::io::{BufRead, BufReader};
    use std::os::fd::AsRawFd;
    use std::os::unix::process::CommandExt;
    let cfg = BenchConfig::parse(BENCH, "usbtmc.toml").unwrap_or_else(|e| panic!("{e}"));
    let (ours_m, dev_m) = seqpacket_pair();
    let (ours_l, dev_l) = seqpacket_pair();
    let (_, th_m) = instrument(dev_m, meter);
    // A load that answers only its identity: it keeps no state another test could see.
    let (got_l, th_l) = instrument(dev_l, |msg| {
        (msg == "*IDN?").then(|| "Regulus Simulated Bench,UT-2 load,UT0002,1.0\n".to_string())
    });
    let fd = ours_l.as_raw_fd();
    let rt = runtime();
    // The bench lives on while the guardian runs (regulus holds its links until it dies).
    let bench = rt.block_on(async {
        Bench::with_transports(
            &cfg,
            vec![
                Box::new(UsbTmcLink::from_file(ours_m, std::time::Duration::from_secs(1)).unwrap()),
                Box::new(UsbTmcLink::from_file(ours_l, std::time::Duration::from_secs(1)).unwrap()),
            ],
        )
        .await
        .unwrap_or_else(|e| panic!("{e}"))
    });
    let links = bench.guard_links();
    // The meter has no safe state; the load's is its input-off line, as one message.
    assert_eq!(links.len(), 1, "{links:?}");
    assert_eq!((links[0].name.as_str(), links[0].fd), ("eload", fd));
    let GuardPayload::Frames { frames, .. } = &links[0].safe_state else {
        panic!("{:?}", links[0].safe_state);
    };
    assert_eq!(frames.len(), 1, "{frames:?}");
    assert_eq!(frames[0].bytes, b"INP OFF\n");

    let record = tempfile::tempdir().unwrap();
    let spec = GuardSpec {
        record: Some(record.path().to_path_buf()),
        links,
    };
    let mut cmd = std::process::Command::new(env!("CARGO_BIN_EXE_regulus"));
    cmd.arg(GUARDIAN_ARG)
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped());
    // SAFETY: between fork and exec only fcntl (async-signal-safe) clears the close-on-exec
    // mark of the link's descriptor in the child, so the guardian inherits it.
    unsafe {
        cmd.pre_exec(move || {
            let flags = libc::fcntl(fd, libc::F_GETFD);
            libc::fcntl(fd, libc::F_SETFD, flags & !libc::FD_CLOEXEC);
            Ok(())
        });
    }
    let mut guardian = cmd.spawn().unwrap();
    let mut stdin = guardian.stdin.take().unwrap();
    writeln!(stdin, "{}", serde_json::to_string(&spec).unwrap()).unwrap();
    let mut ready = String::new();
    BufReader::new(guardian.stdout.take().unwrap())
        .read_line(&mut ready)
        .unwrap();
    assert_eq!(ready.trim(), "guardian ready");
    let before = got_l.lock().unwrap().len();
    // Regulus is gone: the pipe closes, the guardian acts.
    drop(stdin);
    let status = guardian.wait().unwrap();
    assert!(status.success(), "{status:?}");
    // Our ends close with the bench and the runtime; the guardian's copy closed when it
    // exited.
    drop(bench);
    drop(rt);
    th_m.join().unwrap();
    th_l.join().unwrap();
    let l = got_l.lock().unwrap().clone();
    assert_eq!(l[before..], ["INP OFF\n".to_string()], "{l:?}");
    let note = std::fs::read_to_string(record.path().join(NOTE_FILE)).unwrap();
    assert!(note.contains("eload: INP OFF (sent)"), "{note:?}");
}

/// How the stand-in meter treats its first measuring query.
#[derive(Clone, Copy, Debug)]
enum FirstReply {
    /// Answers it only after the deadline (and after its own wait, `LATE_MS`).
    Late,
    /// Never answers it.
    Never,
}

const DEADLINE_MS: u64 = 300;
const LATE_MS: u64 = 450;
/// A query's deadline may run over by the scheduler's slack, never by a device timeout.
const SLACK_MS: u64 = 200;

/// A meter that answers its first `MEAS:VOLT:DC?` late or never (with a reading of its own,
/// 9.999 V, so a late reply taken as an answer is seen), and every later one at once (12.0034
/// V); it answers `*IDN?` (IEEE 488.2). Every message it gets is kept.
fn slow_meter(mut dev: File, first: FirstReply) -> Arc<Mutex<Vec<String>>> {
    let got = Arc::new(Mutex::new(Vec::new()));
    let got2 = Arc::clone(&got);
    std::thread::spawn(move || {
        let mut buf = [0u8; 4096];
        let mut measured = 0;
        loop {
            let n = match dev.read(&mut buf) {
                Ok(0) | Err(_) => return,
                Ok(n) => n,
            };
            let msg = String::from_utf8_lossy(&buf[..n]).to_string();
            got2.lock().unwrap().push(msg.clone());
            let reply = match msg.trim_end() {
                "*IDN?" => "Regulus Simulated Bench,UT-1 meter,UT0001,1.0\n".to_string(),
                "MEAS:VOLT:DC?" => {
                    measured += 1;
                    if measured > 1 {
                        "+1.20034E+01\n".to_string()
                    } else {
                        match first {
                            FirstReply::Never => continue,
                            FirstReply::Late => {
                                std::thread::sleep(std::time::Duration::from_millis(LATE_MS));
                                "+9.99900E+00\n".to_string()
                            }
                        }
                    }
                }
                _ => continue,
            };
            if dev.write_all(reply.as_bytes()).is_err() {
                return;
            }
        }
    });
    got
}

/// A query that is not answered within the instrument's deadline ends at the deadline (plus
/// scheduling slack) with a timeout naming the instrument and the command, however long the
/// device read goes on (the stand-in, like a node whose driver timeout is longer, keeps
/// blocking); the next query gets its own reply, never the late one.
/// `driver_timeout`: our end of the stand-in gets a receive timeout of the deadline, as the
/// driver's read ends with ETIMEDOUT once its timeout (set to the deadline) passes; the read
/// then ends on its own instead of waiting on.
fn unanswered_query_times_out_and_the_next_gets_its_own_reply(
    first: FirstReply,
    driver_timeout: bool,
) {
    use regulus::measure::Role;
    use std::time::{Duration, Instant};
    let text = format!(
        "[[instrument]]\nname = \"dmm\"\nroles = [\"output_voltmeter\"]\npreset = \"scpi_meter\"\nusbtmc = {{ path = \"/dev/usbtmc0\" }}\nreply_timeout_ms = {DEADLINE_MS}\nretries = 0\n"
    );
    let cfg = BenchConfig::parse(&text, "b.toml").unwrap_or_else(|e| panic!("{e}"));
    let (ours, dev) = seqpacket_pair();
    let got = slow_meter(dev, first);
    let rt = runtime();
    rt.block_on(async {
        if driver_timeout {
            use std::os::fd::AsRawFd;
            let tv = libc::timeval {
                tv_sec: 0,
                tv_usec: (DEADLINE_MS * 1000) as libc::suseconds_t,
            };
            // SAFETY: setsockopt(2) reads a timeval of the size given from a live value.
            let r = unsafe {
                libc::setsockopt(
                    ours.as_raw_fd(),
                    libc::SOL_SOCKET,
                    libc::SO_RCVTIMEO,
                    &tv as *const libc::timeval as *const libc::c_void,
                    std::mem::size_of::<libc::timeval>() as libc::socklen_t,
                )
            };
            assert_eq!(r, 0, "{}", std::io::Error::last_os_error());
        }
        let link = UsbTmcLink::from_file(ours, Duration::from_millis(DEADLINE_MS)).unwrap();
        let counters = link.counters();
        let bench = Bench::with_transports(&cfg, vec![Box::new(link)])
            .await
            .unwrap_or_else(|e| panic!("{e}"));
        let t0 = Instant::now();
        let e = bench
            .read_role(Role::OutputVoltmeter)
            .await
            .expect_err("the first query is not answered in time");
        let took = t0.elapsed();
        assert!(
            took >= Duration::from_millis(DEADLINE_MS)
                && took < Duration::from_millis(DEADLINE_MS + SLACK_MS),
            "{first:?}: {took:?}"
        );
        match &e {
            BenchError::NoReply {
                instrument,
                command,
                ms,
            } => {
                assert_eq!(instrument, "dmm");
                assert_eq!(command, "MEAS:VOLT:DC?");
                assert_eq!(*ms, DEADLINE_MS as u128);
            }
            other => panic!("{first:?}: {other:?}"),
        }
        // The late reply (if any) has come by now.
        tokio::time::sleep(Duration::from_millis(LATE_MS - DEADLINE_MS + 100)).await;
        let t1 = Instant::now();
        let (r, _) = bench
            .read_role(Role::OutputVoltmeter)
            .await
            .unwrap_or_else(|e| panic!("{first:?}: {e}"));
        assert_eq!(r.value(), Some(12.0034), "{first:?}: {r:?}");
        assert!(
            t1.elapsed() < Duration::from_millis(DEADLINE_MS),
            "{first:?}"
        );
        // The device read of the unanswered query ended by the device's timeout, or not.
        let timeouts = counters.device_timeouts.load(Ordering::SeqCst);
        assert_eq!(timeouts > 0, driver_timeout, "{first:?}: {timeouts}");
    });
    let m = got.lock().unwrap().clone();
    assert_eq!(m.first().map(String::as_str), Some("*IDN?\n"), "{m:?}");
    assert_eq!(
        m.get(1).map(String::as_str),
        Some("MEAS:VOLT:DC?\n"),
        "{m:?}"
    );
    assert_eq!(
        m.last().map(String::as_str),
        Some("MEAS:VOLT:DC?\n"),
        "{m:?}"
    );
}

#[test]
fn a_late_reply_is_never_the_next_answer() {
    unanswered_query_times_out_and_the_next_gets_its_own_reply(FirstReply::Late, false);
}

#[test]
fn a_late_reply_after_the_driver_timeout_is_never_the_next_answer() {
    unanswered_query_times_out_and_the_next_gets_its_own_reply(FirstReply::Late, true);
}

#[test]
fn a_query_never_answered_ends_with_the_driver_timeout() {
    unanswered_query_times_out_and_the_next_gets_its_own_reply(FirstReply::Never, true);
}

#[test]
fn a_query_never_answered_does_not_block_the_next() {
    unanswered_query_times_out_and_the_next_gets_its_own_reply(FirstReply::Never, false);
}
