//! `oedolog-sim --line-timing` over a real socat pty pair: the reply's characters reach the master no
//! earlier than an RS-485 line at the configured baud rate and framing could carry them.
//!
//! Source of the timing: Modbus over Serial Line Specification and Implementation Guide V1.02, §2.5.1
//! (11-bit characters for 8E1 and 8N2) and §2.5.1.1 (t3.5, fixed 1.75 ms above 19 200 baud). The pty
//! moves bytes at once and socat adds its own delay, so only lower bounds are checked: a reply that comes
//! early is a failure, a late one is the scheduler's.

use std::io::ErrorKind;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, bail};
use oedolog_protocol::rtu::RtuMaster;
use oedolog_protocol::{Reply, Request, Response, UnitId};
use oedolog_sim::line::LineTiming;
use oedolog_tests::{Simulator, pty_pair, temp_dir};

/// Sends one FC 04 request for `quantity` registers and returns the reply's bytes with the instant each
/// arrived, measured from just before the request was written.
/// Each reply byte with when it arrived.
type Arrivals = Vec<(u8, Duration)>;

fn exchange(port: &mut dyn serialport::SerialPort, quantity: u16) -> Result<(Arrivals, Vec<u16>)> {
    let mut master = RtuMaster::new();
    let request = Request::ReadInputRegisters { address: 0, quantity };
    let frame = master.begin(UnitId(1), &request).context("request")?;
    let sent = Instant::now();
    port.write_all(&frame)?;
    port.flush()?;
    let mut arrivals = Vec::new();
    let mut buf = [0u8; 64];
    loop {
        if sent.elapsed() > Duration::from_secs(3) {
            bail!("no complete reply within 3 s; got {arrivals:?}");
        }
        let n = match port.read(&mut buf) {
            Ok(n) => n,
            Err(e) if e.kind() == ErrorKind::TimedOut => continue,
            Err(e) => return Err(e.into()),
        };
        let at = sent.elapsed();
        arrivals.extend(buf[..n].iter().map(|&b| (b, at)));
        master.push(&buf[..n]);
        match master.decode() {
            Ok(Some(Reply::Normal(Response::ReadInputRegisters(words)))) => return Ok((arrivals, words)),
            Ok(Some(other)) => bail!("unexpected reply {other:?}"),
            Ok(None) => {}
            Err(e) => bail!("reply refused: {e}"),
        }
    }
}

fn check_line(baud: u32, framing: &str, timing: LineTiming) -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let baud_arg = baud.to_string();
    let sim = Simulator::start_rtu(
        &line.device_end,
        &["--frames", "1", "--schedule", "manual", "--baud", &baud_arg, "--line-timing", "--line-framing", framing],
    )?;
    let mut port = serialport::new(line.master_end.to_string_lossy(), baud)
        .parity(serialport::Parity::None)
        .timeout(Duration::from_millis(50))
        .open()
        .with_context(|| format!("open {}", line.master_end.display()))?;
    for quantity in [5u16, 8, 2] {
        let (arrivals, words) = exchange(port.as_mut(), quantity).with_context(|| sim.process.output_log())?;
        assert_eq!(words.len(), usize::from(quantity));
        let reply_len = 5 + 2 * usize::from(quantity);
        assert_eq!(arrivals.len(), reply_len, "{framing} at {baud}: one whole reply, nothing more");
        // Character k (from 0) cannot have arrived before the request's 8 characters, t3.5 and k + 1
        // reply characters have crossed the wire.
        let reply_start = timing.wire_time(8) + timing.t3_5();
        for (k, &(byte, at)) in arrivals.iter().enumerate() {
            let earliest = reply_start + timing.wire_time(k + 1);
            assert!(
                at >= earliest,
                "{framing} at {baud} baud: reply byte {k} ({byte:#04x}) came after {at:?}, the wire allows {earliest:?} at the earliest"
            );
        }
        // And the whole exchange took at least the specification's time for it.
        let whole = arrivals.last().map(|a| a.1).unwrap_or_default();
        assert!(whole >= timing.exchange_time(8, reply_len), "{whole:?}");
        // The master keeps t3.5 before its next request, as the daemon does.
        std::thread::sleep(timing.t3_5());
    }
    Ok(())
}

// Spec: Modbus over Serial Line V1.02 §2.5.1.1; at 9 600 baud 8E1 a 15-byte reply alone is 17.2 ms.
#[test]
fn line_timed_rtu_replies_come_no_earlier_than_the_wire_allows_at_9600_8e1() -> Result<()> {
    check_line(9_600, "8E1", LineTiming::new(9_600, true, 1, Duration::ZERO))
}

// Above 19 200 baud t3.5 is fixed at 1.75 ms (same clause); 8N2 is 11 bits like 8E1.
#[test]
fn line_timed_rtu_replies_come_no_earlier_than_the_wire_allows_at_115200_8n2() -> Result<()> {
    check_line(115_200, "8N2", LineTiming::new(115_200, false, 2, Duration::ZERO))
}

// A frame starts only after t3.5 of silence (Modbus over Serial Line V1.02 §2.5.1.1): a request a master
// sends while the device's reply is still on the line (so less than t3.5 after its last character) is not a
// frame to the device and gets no answer; one sent after the silence does. At 9 600 baud 8E1 the reply takes
// 8.6 ms and t3.5 is 4.0 ms, room for a loaded machine's scheduling.
#[test]
fn a_request_sent_before_t3_5_of_silence_is_not_answered() -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let sim = Simulator::start_rtu(
        &line.device_end,
        &["--frames", "1", "--schedule", "manual", "--baud", "9600", "--line-timing", "--line-framing", "8E1"],
    )?;
    let timing = LineTiming::new(9_600, true, 1, Duration::ZERO);
    let mut port = serialport::new(line.master_end.to_string_lossy(), 9_600)
        .parity(serialport::Parity::None)
        .timeout(Duration::from_millis(20))
        .open()
        .with_context(|| format!("open {}", line.master_end.display()))?;
    exchange(port.as_mut(), 5).with_context(|| sim.process.output_log())?;
    std::thread::sleep(timing.t3_5());
    // Request A; at its reply's first byte, request B, which is on the line before A's reply has ended.
    let mut master = RtuMaster::new();
    let request = Request::ReadInputRegisters { address: 0, quantity: 5 };
    let frame = master.begin(UnitId(1), &request).context("request")?;
    port.write_all(&frame)?;
    let (mut got, mut sent_b, started) = (Vec::new(), false, Instant::now());
    let mut buf = [0u8; 64];
    while started.elapsed() < Duration::from_secs(1) {
        match port.read(&mut buf) {
            Ok(n) => got.extend_from_slice(&buf[..n]),
            Err(e) if e.kind() == ErrorKind::TimedOut => {}
            Err(e) => return Err(e.into()),
        }
        if !got.is_empty() && !sent_b {
            port.write_all(&frame)?;
            sent_b = true;
        }
    }
    // A's reply (5 registers: 15 bytes) and nothing for B.
    assert!(sent_b, "no reply to A: {}", sim.process.output_log());
    assert_eq!(got.len(), 15, "B, sent during A's reply, was answered: {got:02x?}");
    // After the silence the device answers again.
    std::thread::sleep(timing.t3_5() * 2);
    let (_, words) = exchange(port.as_mut(), 5).with_context(|| sim.process.output_log())?;
    assert_eq!(words.len(), 5);
    Ok(())
}
