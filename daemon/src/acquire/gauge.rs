//! A line-output gauge bus: a serial gauge that prints one reading per line, asked by a request string
//! or printing on its own. Lines are split and parsed by `oedolog-protocol::gauge`; noise and bad lines
//! are counted, never fatal.

use std::time::Duration;

use oedolog_protocol::gauge::{LineSplitter, parse_reading};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::time::Instant;

use super::link::{Connector, Link, Reconnect};
use super::{MIN_REAL_POLL, PolledFrame, Sinks};
use crate::config::LineGauge;

/// Runs a line-gauge bus for ever (reopening the port with back-off when it fails).
pub async fn run_bus<C: Connector>(
    bus_id: String,
    mut connector: C,
    gauge: LineGauge,
    mut frame: PolledFrame,
    sinks: Sinks,
) {
    let mut reconnect = Reconnect::default();
    loop {
        let mut link = reconnect.open(&bus_id, &mut connector, &sinks).await;
        sinks.live.update(frame.index, |f| f.bus_up = true);
        let error = serve(&mut link, &gauge, &mut frame, &sinks).await;
        sinks.live.update(frame.index, |f| f.bus_up = false);
        reconnect.lost(&bus_id, &connector, &sinks, &error).await;
    }
}

async fn serve<L: Link>(link: &mut L, gauge: &LineGauge, frame: &mut PolledFrame, sinks: &Sinks) -> std::io::Error {
    let mut splitter = LineSplitter::default();
    let mut buf = [0u8; 256];
    let mut next_store = Instant::now();
    loop {
        let period = sinks.clock.real_wait(frame.period(sinks.clock.now_us()), MIN_REAL_POLL);
        if let Some(request) = &gauge.request {
            tokio::time::sleep_until(next_store).await;
            if let Err(e) = link.clear_input() {
                return e;
            }
            splitter.reset();
            sinks.live.update(frame.index, |f| f.counters.requests += 1);
            if let Err(e) = link.write_all(request).await {
                return e;
            }
            if let Err(e) = link.flush().await {
                return e;
            }
        }
        let deadline = Instant::now() + gauge.timeout;
        let mut got = false;
        while !got {
            let n = match tokio::time::timeout_at(deadline, link.read(&mut buf)).await {
                Err(_) => {
                    sinks.live.update(frame.index, |f| f.counters.timeouts += 1);
                    break;
                }
                Ok(Ok(0)) => return std::io::ErrorKind::UnexpectedEof.into(),
                Ok(Err(e)) => return e,
                Ok(Ok(n)) => n,
            };
            splitter.push(&buf[..n]);
            while let Some(line) = splitter.next_line() {
                match parse_reading(&line, gauge.unit) {
                    Ok(mm) => {
                        // A free-running gauge may print faster than the poll period: keep one per period.
                        if Instant::now() >= next_store || gauge.request.is_some() {
                            frame.accept(0, mm, sinks.clock.now_us(), sinks);
                            next_store = Instant::now() + period;
                        }
                        got = true;
                    }
                    Err(error) => {
                        sinks.live.update(frame.index, |f| f.counters.bad_frames += 1);
                        tracing::debug!("frame {}: gauge line refused: {error}", frame.id);
                    }
                }
            }
        }
        if gauge.request.is_some() && !got {
            next_store = Instant::now() + Duration::from_millis(100).max(period);
        }
    }
}
