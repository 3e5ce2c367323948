//! The oedolog simulator read and written by mbpoll (Debian 1.4.11, built on libmodbus), an
//! independent Modbus master, over TCP and over RTU on a socat pty pair.
//!
//! mbpoll's own 32-bit decode (`-t 3:int -B`, big-endian word order) checks the simulator's
//! high-word-first layout without our decoding helpers. It must not drive oedolog-protocol.
//!
//! mbpoll quirks (not the Modbus specification's): `-r` is 1-based unless `-0` is given, so `-r 1` is
//! register address 0; its default RTU parity is even (`-P none` needed on a pty); errors go to stderr.

use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

use anyhow::{Result, bail};
use oedolog_tests::{
    Finished, READY_TIMEOUT, Simulator, Stream, i32_high_word_first, peer_program, pty_pair, run_to_end, temp_dir,
};

use crate::peers_pymodbus::plausible;

/// Where mbpoll reaches the simulator.
enum Endpoint<'a> {
    Tcp { port: u16 },
    Rtu { path: &'a Path },
}

fn mbpoll(endpoint: &Endpoint<'_>, args: &[&str], write_values: &[&str]) -> Result<Finished> {
    let mut command = Command::new(peer_program("mbpoll"));
    // -1: poll once; -o 3: a 3 s reply timeout for a loaded CI machine.
    command.args(["-1", "-o", "3"]);
    match endpoint {
        Endpoint::Tcp { port } => {
            command.args(["-m", "tcp", "-p", &port.to_string()]).args(args).arg("127.0.0.1");
        }
        Endpoint::Rtu { path } => {
            command.args(["-m", "rtu", "-b", "19200", "-P", "none"]).args(args).arg(path);
        }
    }
    command.args(write_values);
    run_to_end("mbpoll", command)
}

/// The `[ref]: value` lines of an mbpoll poll, in order.
fn parse_values(output: &str) -> Vec<(u32, i64)> {
    output
        .lines()
        .filter_map(|line| {
            let rest = line.trim().strip_prefix('[')?;
            let (reference, value) = rest.split_once("]:")?;
            Some((reference.trim().parse().ok()?, value.trim().parse().ok()?))
        })
        .collect()
}

fn poll(endpoint: &Endpoint<'_>, args: &[&str]) -> Result<Vec<(u32, i64)>> {
    let finished = mbpoll(endpoint, args, &[])?;
    if !finished.status.success() {
        bail!("mbpoll {args:?} failed ({}):\n{}\n{}", finished.status, finished.stdout, finished.stderr);
    }
    Ok(parse_values(&finished.stdout))
}

fn as_u16(value: i64) -> u16 {
    u16::try_from(value).unwrap_or_else(|_| panic!("{value} is not a 16-bit register"))
}

/// The checks both transports share.
fn exercise_simulator(endpoint: &Endpoint<'_>) -> Result<()> {
    for unit in ["1", "2"] {
        // -t 3: input registers; -r 1 -c 8: addresses 0..8 (1-based references 1..=8).
        let words = poll(endpoint, &["-a", unit, "-t", "3", "-r", "1", "-c", "8"])?;
        let references: Vec<u32> = words.iter().map(|(reference, _)| *reference).collect();
        assert_eq!(references, (1..=8).collect::<Vec<_>>(), "unit {unit}: mbpoll references");
        let word = |i: usize| as_u16(words[i].1);
        let load_0p1n = i32_high_word_first(word(2), word(3));
        assert!(plausible::LOAD_0P1N.contains(&load_0p1n), "unit {unit}: load {load_0p1n} × 0.1 N");

        // mbpoll's own i32 decode, high word first (-B): displacement at ref 1, load at ref 3.
        let pairs = poll(endpoint, &["-a", unit, "-t", "3:int", "-B", "-r", "1", "-c", "2"])?;
        assert_eq!(pairs.len(), 2, "unit {unit}: two 32-bit values from {pairs:?}");
        let (displacement_0p1um, load_0p1n) = (pairs[0].1, pairs[1].1);
        assert!(
            plausible::DISPLACEMENT_0P1UM.contains(&i32::try_from(displacement_0p1um)?),
            "unit {unit}: mbpoll's displacement {displacement_0p1um} × 0.1 µm"
        );
        assert!(
            plausible::LOAD_0P1N.contains(&i32::try_from(load_0p1n)?),
            "unit {unit}: mbpoll's load {load_0p1n} × 0.1 N"
        );
    }

    // Write the averaging count of unit 2 (holding 0, reference 1), read it back with the tag, and
    // check unit 1's count did not change.
    let unit_one_before = poll(endpoint, &["-a", "1", "-t", "4", "-r", "1", "-c", "1"])?;
    assert_eq!(unit_one_before.len(), 1, "unit 1 averaging count: {unit_one_before:?}");
    let averaging: i64 = if unit_one_before[0].1 == 17 { 18 } else { 17 };
    let written = mbpoll(endpoint, &["-a", "2", "-t", "4", "-r", "1"], &[&averaging.to_string()])?;
    assert!(written.status.success(), "mbpoll write failed:\n{}\n{}", written.stdout, written.stderr);
    assert!(written.stdout.contains("Written 1 references"), "mbpoll write output:\n{}", written.stdout);
    let holding = poll(endpoint, &["-a", "2", "-t", "4", "-r", "1", "-c", "9"])?;
    assert_eq!(holding.len(), 9, "unit 2 holding 0..9: {holding:?}");
    assert_eq!(holding[0], (1, averaging), "unit 2 averaging count read back");
    let unit_one_after = poll(endpoint, &["-a", "1", "-t", "4", "-r", "1", "-c", "1"])?;
    assert_eq!(unit_one_after, unit_one_before, "unit 1 averaging count after writing unit 2");

    // Holding 50 is outside the map: exception 02, which libmodbus names "Illegal data address".
    let refused = mbpoll(endpoint, &["-a", "1", "-t", "4", "-r", "51", "-c", "1"], &[])?;
    assert!(!refused.status.success(), "mbpoll read of holding 50 succeeded:\n{}", refused.stdout);
    assert!(refused.stderr.contains("Illegal data address"), "mbpoll stderr:\n{}", refused.stderr);

    // An averaging count of 0 is outside 1..=64: exception 03, "Illegal data value".
    let refused = mbpoll(endpoint, &["-a", "1", "-t", "4", "-r", "1"], &["0"])?;
    assert!(!refused.status.success(), "mbpoll write of 0 succeeded:\n{}", refused.stdout);
    assert!(refused.stderr.contains("Illegal data value"), "mbpoll stderr:\n{}", refused.stderr);
    Ok(())
}

// Peer: mbpoll 1.4.11 (libmodbus 3.1) as Modbus TCP master; spec: Modbus Messaging on TCP/IP V1.0b.
#[test]
fn mbpoll_reads_and_writes_the_simulator_over_tcp() -> Result<()> {
    let simulator = Simulator::start_tcp(&[])?;
    exercise_simulator(&Endpoint::Tcp { port: simulator.tcp_addr()?.port() })
}

// Peer: mbpoll 1.4.11 (libmodbus 3.1) as RTU master on a socat pty; spec: Modbus over Serial Line V1.02.
#[test]
fn mbpoll_reads_and_writes_the_simulator_over_rtu() -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let _simulator = Simulator::start_rtu(&line.device_end, &[])?;
    exercise_simulator(&Endpoint::Rtu { path: &line.master_end })
}

/// Polls unit 1's load (input 2–3, decoded by mbpoll as a high-word-first i32) until three readings in
/// a row agree within 0.5 %, and returns the last. Fails after `deadline`.
fn steady_load_0p1n(endpoint: &Endpoint<'_>, deadline: Duration) -> Result<i64> {
    let started = Instant::now();
    let mut recent: Vec<i64> = Vec::new();
    while started.elapsed() < deadline {
        let load = poll(endpoint, &["-a", "1", "-t", "3:int", "-B", "-r", "3", "-c", "1"])?;
        let [(3, load_0p1n)] = load[..] else { bail!("mbpoll load read gave {load:?}") };
        recent.push(load_0p1n);
        if let [.., a, b, c] = recent[..] {
            let (low, high) = (a.min(b).min(c), a.max(b).max(c));
            if low > 0 && (high - low) * 200 <= low {
                return Ok(c);
            }
        }
        // A polling interval while the frame settles, not a wait for a start.
        std::thread::sleep(Duration::from_millis(50));
    }
    bail!("load did not settle within {deadline:?}: last readings {recent:?}")
}

// Peer: mbpoll 1.4.11 reads the load after `apply` control lines; load = σ·A for the frame's fixed ring
// area (definition of stress), so the load ratio must equal the stress ratio whatever the area.
#[test]
fn mbpoll_sees_the_load_follow_applied_stress_in_proportion() -> Result<()> {
    let mut simulator = Simulator::start_tcp(&["--schedule", "manual", "--speed", "10"])?;
    let endpoint = Endpoint::Tcp { port: simulator.tcp_addr()?.port() };
    let settle = Duration::from_secs(20);
    let mut loads_0p1n = Vec::new();
    for stress_kpa in [100, 400] {
        simulator.process.send_line(&format!("apply 1 {stress_kpa}"))?;
        let answer =
            simulator.process.wait_for_line(Stream::Stdout, READY_TIMEOUT, |line| line.starts_with("ok apply"))?;
        assert!(answer.contains(&format!("stress_kpa={stress_kpa}")), "control answer {answer:?}");
        loads_0p1n.push(steady_load_0p1n(&endpoint, settle)?);
    }
    let ratio = loads_0p1n[1] as f64 / loads_0p1n[0] as f64;
    // 400 / 100 kPa; 2 % covers the load cell's noise and resolution.
    assert!((ratio - 4.0).abs() <= 0.08, "load ratio {ratio:.4} from {loads_0p1n:?} for 400/100 kPa");
    Ok(())
}

#[test]
fn parse_values_reads_mbpoll_reference_lines_only() {
    // The shape of mbpoll 1.4.11 output, seen on this machine's Debian package.
    let output = "-- Polling slave 1...\n[1]: \t10\n[2]: \t-65535\n\nWritten 1 references.\n";
    assert_eq!(parse_values(output), vec![(1, 10), (2, -65535)]);
}
