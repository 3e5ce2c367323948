//! A Modbus bus task (RTU or TCP): one outstanding request at a time, a deadline on each, the input queue
//! cleared before each request, the inter-frame gap kept, retries, per-device counters, and reconnection
//! with doubling back-off when the link fails.

use std::io;
use std::time::Duration;

use oedolog_protocol::rtu::{RtuError, RtuMaster};
use oedolog_protocol::tcp::{TcpError, TcpMaster};
use oedolog_protocol::{Reply, Request, Response, UnitId};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::time::Instant;

use super::link::{Connector, Link, Reconnect};
use super::{Counters, MIN_REAL_POLL, PolledFrame, Sinks};
use crate::store::ReadingSet;
use oedolog_protocol::registers::decode_raw;

/// Timing and retry settings of a link.
#[derive(Clone, Copy, Debug)]
pub struct LinkSettings {
    /// Reply deadline.
    pub timeout: Duration,
    /// Retries after a failed attempt.
    pub retries: u32,
    /// Silence kept before each request (RTU t3.5).
    pub gap: Duration,
    /// RTU framing (else MBAP).
    pub rtu: bool,
}

/// Consecutive timeouts after which a TCP link is reopened (a half-dead connection, or a gateway that
/// lost track of transaction ids).
const TCP_TIMEOUTS_BEFORE_RECONNECT: u32 = 3;

/// How one attempt ended, when it did not give a reply.
#[derive(Debug)]
pub enum Failure {
    /// Nothing usable came before the deadline.
    Timeout {
        /// CRC failures seen while waiting (a corrupted reply rather than silence).
        crc: bool,
    },
    /// The device answered with something the protocol forbids.
    Refused(String),
    /// The link broke or the stream is out of step: reconnect.
    Link(io::Error),
}

enum Master {
    Rtu(RtuMaster),
    Tcp(TcpMaster),
}

enum Step {
    More,
    Reply(Reply),
    /// A frame refused that does not end the exchange (another unit, an old transaction).
    Stray(String),
    /// A frame refused that ends it.
    Refused(String),
    Fatal(String),
}

impl Master {
    fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, String> {
        match self {
            Master::Rtu(m) => m.begin(unit, request).map_err(|e| e.to_string()),
            Master::Tcp(m) => m.begin(unit, request).map_err(|e| e.to_string()),
        }
    }

    fn push(&mut self, bytes: &[u8]) {
        match self {
            Master::Rtu(m) => m.push(bytes),
            Master::Tcp(m) => m.push(bytes),
        }
    }

    fn step(&mut self) -> Step {
        match self {
            Master::Rtu(m) => match m.decode() {
                Ok(None) => Step::More,
                Ok(Some(reply)) => Step::Reply(reply),
                Err(e @ RtuError::UnexpectedUnit { .. }) => Step::Stray(e.to_string()),
                Err(e) => Step::Refused(e.to_string()),
            },
            Master::Tcp(m) => match m.decode() {
                Ok(None) => Step::More,
                Ok(Some(reply)) => Step::Reply(reply),
                Err(e @ TcpError::TransactionMismatch { .. }) => Step::Stray(e.to_string()),
                Err(e) if e.is_fatal() => Step::Fatal(e.to_string()),
                Err(e) => Step::Refused(e.to_string()),
            },
        }
    }

    fn cancel(&mut self) {
        match self {
            Master::Rtu(m) => m.cancel(),
            Master::Tcp(m) => m.cancel(),
        }
    }

    fn crc_failures(&self) -> u64 {
        match self {
            Master::Rtu(m) => m.counters().crc_failures,
            Master::Tcp(_) => 0,
        }
    }
}

/// Waits until `until`, to well under a millisecond. tokio's timer has 1 ms ticks and rounds a deadline up,
/// which turns a 2.005 ms t3.5 into about 3 ms (6 % of a 5-register cycle at 19 200 baud, computed): the
/// last [`SILENCE_BY_THREAD_SLEEP`] is a thread sleep instead, precise to the kernel's timer slack and
/// without spinning. An RTU bus runs on a thread of its own (see [`super::spawn_buses`]), so the thread
/// sleep holds up nothing else.
async fn keep_silence_until(until: Instant) {
    if let Some(coarse) = until.checked_sub(SILENCE_BY_THREAD_SLEEP)
        && coarse > Instant::now()
    {
        tokio::time::sleep_until(coarse).await;
    }
    let left = until.saturating_duration_since(Instant::now());
    if !left.is_zero() {
        std::thread::sleep(left);
    }
}

/// The end of an RTU silence waited with a thread sleep: one tick of tokio's timer and a margin.
const SILENCE_BY_THREAD_SLEEP: Duration = Duration::from_millis(2);

/// One request/reply exchange on `link`. Counts into `counters`.
async fn exchange<L: Link>(
    link: &mut L,
    master: &mut Master,
    unit: UnitId,
    request: &Request,
    settings: &LinkSettings,
    quiet_since: &mut Instant,
    counters: &mut Counters,
) -> Result<Reply, Failure> {
    if settings.rtu {
        // Keep the line silent for the gap before talking (Modbus over Serial Line V1.02 §2.5.1.1), counted
        // from the reply's last byte.
        keep_silence_until(*quiet_since + settings.gap).await;
    }
    link.clear_input().map_err(Failure::Link)?;
    let frame = master.begin(unit, request).map_err(Failure::Refused)?;
    counters.requests += 1;
    link.write_all(&frame).await.map_err(Failure::Link)?;
    link.flush().await.map_err(Failure::Link)?;
    let crc_before = master.crc_failures();
    let deadline = Instant::now() + settings.timeout;
    link.reply_deadline(deadline.into_std());
    let mut buf = [0u8; 512];
    let outcome = loop {
        let n = match tokio::time::timeout_at(deadline, link.read(&mut buf)).await {
            Err(_) => {
                master.cancel();
                let crc = master.crc_failures() > crc_before;
                break Err(Failure::Timeout { crc });
            }
            Ok(Ok(0)) => break Err(Failure::Link(io::ErrorKind::UnexpectedEof.into())),
            Ok(Err(e)) => break Err(Failure::Link(e)),
            Ok(Ok(n)) => n,
        };
        master.push(&buf[..n]);
        let mut done = None;
        loop {
            match master.step() {
                Step::More => break,
                Step::Reply(reply) => {
                    done = Some(Ok(reply));
                    break;
                }
                Step::Stray(why) => {
                    counters.bad_frames += 1;
                    tracing::debug!("unit {unit}: stray frame ignored: {why}");
                }
                Step::Refused(why) => {
                    done = Some(Err(Failure::Refused(why)));
                    break;
                }
                Step::Fatal(why) => {
                    done = Some(Err(Failure::Link(io::Error::new(io::ErrorKind::InvalidData, why))));
                    break;
                }
            }
        }
        if let Some(outcome) = done {
            break outcome;
        }
    };
    *quiet_since = Instant::now();
    match &outcome {
        Err(Failure::Timeout { crc: true }) => counters.crc_errors += 1,
        Err(Failure::Timeout { crc: false }) => counters.timeouts += 1,
        Err(Failure::Refused(_)) => counters.bad_frames += 1,
        // A TCP stream out of step (a spoiled MBAP header) is a corrupted reply: count it with CRC errors.
        Err(Failure::Link(e)) if e.kind() == io::ErrorKind::InvalidData => counters.crc_errors += 1,
        Ok(Reply::Exception(_)) => counters.exceptions += 1,
        _ => {}
    }
    outcome
}

/// Polls one frame: every read of its plan, with retries. Returns Err only when the link must reopen.
async fn poll_frame<L: Link>(
    link: &mut L,
    master: &mut Master,
    frame: &mut PolledFrame,
    settings: &LinkSettings,
    quiet_since: &mut Instant,
    sinks: &Sinks,
    timeouts_in_row: &mut u32,
) -> Result<(), io::Error> {
    let reads = std::sync::Arc::clone(&frame.reads);
    for read in reads.iter() {
        let mut attempt = 0;
        let mut counters = Counters::default();
        let outcome = loop {
            let result = exchange(link, master, frame.unit, &read.request, settings, quiet_since, &mut counters).await;
            match result {
                Err(Failure::Link(e)) => {
                    merge(sinks, frame.index, &counters);
                    return Err(e);
                }
                Err(Failure::Timeout { .. } | Failure::Refused(_)) if attempt < settings.retries => {
                    attempt += 1;
                    if settings.rtu {
                        // A late reply may still be on its way: let the line go quiet before asking again.
                        tokio::time::sleep(settings.gap.max(Duration::from_millis(20))).await;
                    }
                }
                other => break other,
            }
        };
        match outcome {
            Ok(Reply::Normal(Response::ReadHoldingRegisters(words) | Response::ReadInputRegisters(words))) => {
                *timeouts_in_row = 0;
                let at_us = sinks.clock.now_us();
                // The reply's readings and the exchange's counters go out together (one message to the
                // writer, one update of the live view).
                let mut set = ReadingSet::default();
                for &(ci, offset) in &read.parts {
                    let map = frame.channels[ci].register.clone().expect("planned channels have registers");
                    let len = usize::from(map.quantity());
                    let raw = words.get(offset..offset + len).ok_or("short").and_then(|w| {
                        decode_raw(map.value_type, map.word_order, w)
                            .map(|r| r * map.scale + map.offset)
                            .map_err(|_| "bad")
                    });
                    match raw {
                        Ok(raw) => {
                            if let Some(reading) = frame.check(ci, raw, at_us, sinks)
                                && let Err(reading) = set.push(reading)
                            {
                                frame.store(std::mem::take(&mut set), &Counters::default(), sinks);
                                let _ = set.push(reading);
                            }
                        }
                        Err(_) => counters.refused_values += 1,
                    }
                }
                frame.store(set, &counters, sinks);
                continue;
            }
            _ => merge(sinks, frame.index, &counters),
        }
        match outcome {
            Ok(Reply::Normal(Response::ReadHoldingRegisters(_) | Response::ReadInputRegisters(_))) => {}
            Ok(Reply::Normal(other)) => tracing::warn!("frame {}: unexpected response {other:?}", frame.id),
            Ok(Reply::Exception(code)) => {
                *timeouts_in_row = 0;
                tracing::debug!("frame {}: {code}", frame.id);
            }
            Err(Failure::Timeout { .. }) => {
                *timeouts_in_row += 1;
                if !settings.rtu && *timeouts_in_row >= TCP_TIMEOUTS_BEFORE_RECONNECT {
                    return Err(io::Error::new(io::ErrorKind::TimedOut, "no reply to several requests in a row"));
                }
            }
            Err(Failure::Refused(why)) => tracing::debug!("frame {}: {why}", frame.id),
            Err(Failure::Link(e)) => return Err(e),
        }
    }
    Ok(())
}

fn merge(sinks: &Sinks, index: usize, c: &Counters) {
    sinks.live.update(index, |f| {
        let t = &mut f.counters;
        t.requests += c.requests;
        t.timeouts += c.timeouts;
        t.crc_errors += c.crc_errors;
        t.exceptions += c.exceptions;
        t.bad_frames += c.bad_frames;
    });
}

/// Runs a Modbus bus for ever: connect (with back-off), poll its frames on their schedules, reconnect
/// when the link fails. Events: `bus-up`, `bus-down`.
pub async fn run_bus<C: Connector>(
    bus_id: String,
    mut connector: C,
    settings: LinkSettings,
    mut frames: Vec<PolledFrame>,
    sinks: Sinks,
) {
    let mut reconnect = Reconnect::default();
    loop {
        let mut link = reconnect.open(&bus_id, &mut connector, &sinks).await;
        for f in &frames {
            sinks.live.update(f.index, |lf| lf.bus_up = true);
        }
        let mut master = if settings.rtu { Master::Rtu(RtuMaster::new()) } else { Master::Tcp(TcpMaster::new()) };
        let mut quiet_since = Instant::now();
        let mut timeouts_in_row = 0;
        let start = Instant::now();
        let mut due: Vec<Instant> = frames.iter().map(|_| start).collect();
        let error = loop {
            let (i, &when) = due.iter().enumerate().min_by_key(|(_, d)| **d).expect("a bus has frames");
            if when > Instant::now() {
                tokio::time::sleep_until(when).await;
            }
            let result = poll_frame(
                &mut link,
                &mut master,
                &mut frames[i],
                &settings,
                &mut quiet_since,
                &sinks,
                &mut timeouts_in_row,
            )
            .await;
            if let Err(error) = result {
                break error;
            }
            let period = frames[i].period(sinks.clock.now_us());
            // Next poll one period after this one was due, so the schedule does not drift; if the bus
            // fell behind, start again from now.
            let next = when + sinks.clock.real_wait(period, MIN_REAL_POLL);
            due[i] = if next < Instant::now() { Instant::now() } else { next };
        };
        for f in &frames {
            sinks.live.update(f.index, |lf| lf.bus_up = false);
        }
        reconnect.lost(&bus_id, &connector, &sinks, &error).await;
    }
}
