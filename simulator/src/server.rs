//! The simulator's transports: Modbus TCP on a listener and Modbus RTU on a serial device or pty, both
//! driven by the sans-IO codec of `oedolog-protocol`, with the wire faults applied to each reply.
//!
//! Every request is answered from the shared [`Simulation`] at the time the [`Clock`] gives; the lock
//! is held only while a reply is computed, never across an await.

use std::sync::{Arc, Mutex};
use std::time::Duration;

use oedolog_protocol::pdu::Exception;
use oedolog_protocol::rtu::{RtuSlave, encode_adu, exception_for, silent_interval};
use oedolog_protocol::tcp::{TcpFramer, encode_adu as tcp_adu};
use oedolog_protocol::{ExceptionCode, Request, UnitId};
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt};
use tokio::net::{TcpListener, TcpStream};

use crate::clock::Clock;
use crate::device::{Outcome, Simulation};
use crate::faults::FaultKind;
use crate::line::LineTiming;

/// What every transport task shares: the frames and the clock.
pub struct Shared {
    /// The simulated frames.
    pub sim: Mutex<Simulation>,
    /// Simulated time.
    pub clock: Arc<dyn Clock>,
    /// Requests left unanswered on a line-timed RTU line because they began less than t3.5 after a reply.
    early_requests: std::sync::atomic::AtomicU64,
}

impl Shared {
    /// Shares `sim` under `clock`.
    pub fn new(sim: Simulation, clock: Arc<dyn Clock>) -> Arc<Shared> {
        Arc::new(Shared { sim: Mutex::new(sim), clock, early_requests: Default::default() })
    }

    /// Counts a request that came too soon after a reply (said once on stderr, for whoever runs the line).
    pub fn note_early_request(&self) {
        if self.early_requests.fetch_add(1, std::sync::atomic::Ordering::Relaxed) == 0 {
            eprintln!(
                "rtu: a request began less than t3.5 after a reply and was not answered (a master must keep the silence)"
            );
        }
    }

    /// Requests not answered because they came less than t3.5 after a reply.
    pub fn early_requests(&self) -> u64 {
        self.early_requests.load(std::sync::atomic::Ordering::Relaxed)
    }

    /// Runs `f` on the simulation (a poisoned lock is recovered: the simulation has no invariants a
    /// panicking reader could break).
    pub fn with<T>(&self, f: impl FnOnce(&mut Simulation) -> T) -> T {
        let mut sim = self.sim.lock().unwrap_or_else(|e| e.into_inner());
        f(&mut sim)
    }
}

/// How a reply goes out, after the simulation has decided.
struct Wire {
    bytes: Vec<u8>,
    fault: Option<FaultKind>,
    fault_ms: u64,
    noise: Vec<u8>,
}

fn pdu_of(reply: &Result<oedolog_protocol::Response, ExceptionCode>, function: u8) -> Vec<u8> {
    let mut pdu = Vec::new();
    match reply {
        Ok(response) => response.encode(&mut pdu),
        Err(code) => Exception { function, code: *code }.encode(&mut pdu),
    }
    pdu
}

/// Writes a reply as the fault says. Returns false when the connection/line should drop.
async fn send<W: AsyncWrite + Unpin>(writer: &mut W, wire: Wire) -> std::io::Result<bool> {
    match wire.fault {
        Some(FaultKind::Drop) => return Ok(true),
        Some(FaultKind::Disconnect) => return Ok(false),
        Some(FaultKind::Delay) => tokio::time::sleep(Duration::from_millis(wire.fault_ms)).await,
        Some(FaultKind::Noise) => writer.write_all(&wire.noise).await?,
        _ => {}
    }
    if wire.fault == Some(FaultKind::Split) && wire.bytes.len() > 2 {
        // Three pieces with pauses well above t1.5: a master must reassemble (or discard) them.
        let cut = [wire.bytes.len() / 3, 2 * wire.bytes.len() / 3];
        for piece in [&wire.bytes[..cut[0]], &wire.bytes[cut[0]..cut[1]], &wire.bytes[cut[1]..]] {
            writer.write_all(piece).await?;
            writer.flush().await?;
            tokio::time::sleep(Duration::from_millis(8)).await;
        }
    } else {
        writer.write_all(&wire.bytes).await?;
    }
    writer.flush().await?;
    Ok(true)
}

/// Serves Modbus TCP on `listener` until the listener fails. Each connection gets its own task; unit ids
/// select frames; an unknown unit gets exception 0B (gateway target failed to respond), as a gateway would.
pub async fn serve_tcp(listener: TcpListener, shared: Arc<Shared>) -> std::io::Result<()> {
    loop {
        let (stream, _) = listener.accept().await?;
        let _ = stream.set_nodelay(true);
        tokio::spawn(serve_tcp_connection(stream, shared.clone()));
    }
}

async fn serve_tcp_connection(mut stream: TcpStream, shared: Arc<Shared>) {
    let mut framer = TcpFramer::new();
    let mut buf = [0u8; 1024];
    loop {
        let n = match stream.read(&mut buf).await {
            Ok(0) | Err(_) => return,
            Ok(n) => n,
        };
        framer.push(&buf[..n]);
        loop {
            let (header, pdu) = match framer.next_frame() {
                Ok(Some(frame)) => frame,
                Ok(None) => break,
                // Out of step: a real device closes the connection.
                Err(_) => return,
            };
            let function = pdu.first().copied().unwrap_or(0);
            let wire = match Request::decode(&pdu) {
                Err(error) => Wire {
                    bytes: tcp_adu(header, &pdu_of(&Err(exception_for(&error)), function)),
                    fault: None,
                    fault_ms: 0,
                    noise: vec![],
                },
                Ok(request) => {
                    let at_s = shared.clock.now_s();
                    match shared.with(|sim| sim.handle(header.unit, &request, at_s)) {
                        Outcome::UnknownUnit => Wire {
                            bytes: tcp_adu(
                                header,
                                &pdu_of(&Err(ExceptionCode::GatewayTargetFailedToRespond), function),
                            ),
                            fault: None,
                            fault_ms: 0,
                            noise: vec![],
                        },
                        Outcome::Answer { reply, fault, fault_ms, noise } => {
                            let mut bytes = tcp_adu(header, &pdu_of(&reply, function));
                            if fault == Some(FaultKind::BadCrc) {
                                // TCP has no CRC: spoil the header's protocol id instead, so the master
                                // sees a stream out of step.
                                bytes[3] ^= 0x5A;
                            }
                            Wire { bytes, fault, fault_ms, noise }
                        }
                    }
                }
            };
            match send(&mut stream, wire).await {
                Ok(true) => {}
                Ok(false) | Err(_) => return,
            }
        }
    }
}

/// Serial settings of an RTU line.
#[derive(Clone, Debug)]
pub struct RtuLine {
    /// Device or pty path.
    pub path: String,
    /// Baud rate.
    pub baud: u32,
    /// Parity.
    pub parity: tokio_serial::Parity,
    /// Stop bits, 1 or 2.
    pub stop_bits: u32,
    /// Wire timing to keep (`--line-timing`), or none: replies go out as soon as they are computed.
    pub timing: Option<LineTiming>,
}

impl RtuLine {
    /// The wire timing of this line's baud rate and framing, with the device's `turnaround`.
    pub fn timing_of(baud: u32, parity: tokio_serial::Parity, stop_bits: u32, turnaround: Duration) -> LineTiming {
        LineTiming::new(baud, parity != tokio_serial::Parity::None, stop_bits, turnaround)
    }
}

/// Opens an RTU line: 8 data bits, the given parity and stop bits.
pub fn open_rtu(line: &RtuLine) -> tokio_serial::Result<tokio_serial::SerialStream> {
    use tokio_serial::SerialPortBuilderExt;
    let stop_bits = if line.stop_bits == 2 { tokio_serial::StopBits::Two } else { tokio_serial::StopBits::One };
    tokio_serial::new(&line.path, line.baud)
        .data_bits(tokio_serial::DataBits::Eight)
        .stop_bits(stop_bits)
        .parity(line.parity)
        .flow_control(tokio_serial::FlowControl::None)
        .open_native_async()
}

/// Sleeps the thread until `at` (a blocking sleep: with line timing the line has its own thread, and
/// tokio's timers are only millisecond-grained while t1.5 is under one).
fn wait_until(at: std::time::Instant) {
    let now = std::time::Instant::now();
    if at > now {
        std::thread::sleep(at - now);
    }
}

/// Writes `bytes` at the wire rate from `start`: each character no earlier than its last bit has left
/// the wire, and every character whose time has come in one write (so a late wake-up catches up and
/// gaps stay near the sleep's resolution, under t1.5). Returns when the last one is out.
async fn release_at_wire_rate<W: AsyncWrite + Unpin>(
    writer: &mut W,
    bytes: &[u8],
    start: std::time::Instant,
    timing: &LineTiming,
) -> std::io::Result<std::time::Instant> {
    let due: Vec<std::time::Instant> = timing.release_offsets(bytes.len()).map(|offset| start + offset).collect();
    let mut sent = 0;
    while sent < bytes.len() {
        wait_until(due[sent]);
        let now = std::time::Instant::now();
        let ready = due.iter().skip(sent).take_while(|d| **d <= now).count().max(1);
        writer.write_all(&bytes[sent..sent + ready]).await?;
        writer.flush().await?;
        sent += ready;
    }
    Ok(due.last().copied().unwrap_or(start))
}

/// Length of a request's RTU frame: address, PDU, CRC (8 for an undecodable one, the usual read).
fn request_frame_len(request: &Result<Request, oedolog_protocol::PduError>) -> usize {
    match request {
        Ok(request) => {
            let mut pdu = Vec::new();
            request.encode(&mut pdu);
            pdu.len() + 3
        }
        Err(_) => 8,
    }
}

/// Serves Modbus RTU on an already opened line until it fails (the device path vanished). Units not
/// simulated get no reply; broadcasts (unit 0) are executed and never answered. With `timing` the line
/// keeps wire time (see [`crate::line`]): this blocks the calling thread while it waits, so give such a
/// line a thread of its own.
pub async fn serve_rtu_port<S: AsyncRead + AsyncWrite + Unpin>(
    port: &mut S,
    baud: u32,
    timing: Option<LineTiming>,
    shared: &Shared,
) -> std::io::Result<()> {
    let mut slave = RtuSlave::new();
    // t3.5 by the serial-line spec, but never under 10 ms: a pty delivers bytes with scheduling jitter,
    // and the decoder does not need the gap to find frames of known length.
    let idle = silent_interval(baud).max(Duration::from_millis(10));
    let mut buf = [0u8; 512];
    let mut silent_until: Option<tokio::time::Instant> = None;
    // Line timing: when the first byte of the frame being received was seen, and when the line is free
    // (the last reply's last character off the wire); a request cannot have begun before either.
    let mut first_byte: Option<std::time::Instant> = None;
    let mut line_free_at = std::time::Instant::now();
    // When our last reply's last character left the wire: the next request must come t3.5 after it.
    let mut reply_end: Option<std::time::Instant> = None;
    loop {
        let read = tokio::time::timeout(idle, port.read(&mut buf)).await;
        match read {
            Err(_) => {
                slave.idle_gap();
                first_byte = None;
            }
            Ok(Ok(0)) => return Err(std::io::ErrorKind::UnexpectedEof.into()),
            Ok(Err(error)) => return Err(error),
            Ok(Ok(n)) => {
                if silent_until.is_some_and(|until| tokio::time::Instant::now() < until) {
                    continue;
                }
                silent_until = None;
                first_byte.get_or_insert_with(std::time::Instant::now);
                slave.push(&buf[..n]);
            }
        }
        while let Some(frame) = slave.decode() {
            // With line timing the request is received only when its characters have crossed the wire
            // and t3.5 of silence has followed; the device then takes its turnaround.
            let mut reply_start = None;
            if let Some(timing) = &timing {
                let seen = first_byte.take().unwrap_or_else(std::time::Instant::now);
                // A frame starts only after t3.5 of silence (Modbus over Serial Line V1.02 §2.5.1.1): a
                // request whose first byte came sooner after our reply's last is not a frame to this
                // device, and gets no answer (the master times out, as on a cable). 50 µs for the pty.
                if reply_end.is_some_and(|end| seen + Duration::from_micros(50) < end + timing.t3_5()) {
                    shared.note_early_request();
                    slave.reset();
                    continue;
                }
                let began = seen.max(line_free_at);
                let received = began + timing.wire_time(request_frame_len(&frame.request)) + timing.t3_5();
                line_free_at = received;
                let start = received + timing.turnaround;
                wait_until(start);
                reply_start = Some(start);
            }
            let at_s = shared.clock.now_s();
            let request = match frame.request {
                Ok(request) => request,
                Err(error) => {
                    if frame.unit.is_individual() && shared.with(|sim| sim.frame(frame.unit).is_some()) {
                        let code = exception_for(&error);
                        let bytes = encode_adu(frame.unit, &pdu_of(&Err(code), frame.function));
                        send(port, Wire { bytes, fault: None, fault_ms: 0, noise: vec![] }).await?;
                    }
                    continue;
                }
            };
            if frame.unit == UnitId::BROADCAST {
                shared.with(|sim| sim.broadcast(&request, at_s));
                continue;
            }
            let Outcome::Answer { reply, fault, fault_ms, noise } =
                shared.with(|sim| sim.handle(frame.unit, &request, at_s))
            else {
                continue;
            };
            let mut bytes = encode_adu(frame.unit, &pdu_of(&reply, frame.function));
            if fault == Some(FaultKind::BadCrc) {
                let last = bytes.len() - 1;
                bytes[last] ^= 0xA5;
            }
            if fault == Some(FaultKind::Disconnect) {
                // The line goes dead for a while: nothing read in that time is answered.
                silent_until = Some(tokio::time::Instant::now() + Duration::from_millis(fault_ms));
                slave.reset();
                continue;
            }
            match (&timing, reply_start, fault) {
                (Some(timing), Some(start), None) => {
                    line_free_at = release_at_wire_rate(port, &bytes, start, timing).await?;
                    reply_end = Some(line_free_at);
                }
                _ => {
                    send(port, Wire { bytes, fault, fault_ms, noise }).await?;
                }
            }
            slave.reset();
        }
    }
}

/// Serves an RTU line for ever: serves `first` (already opened, so nothing sent before the readiness
/// line is lost), and when the line fails (adapter unplugged, pty closed) reopens it every `retry`.
pub async fn serve_rtu(line: RtuLine, first: tokio_serial::SerialStream, shared: Arc<Shared>, retry: Duration) {
    let mut first = Some(first);
    loop {
        let port = match first.take() {
            Some(port) => Ok(port),
            None => open_rtu(&line),
        };
        match port {
            Ok(mut port) => {
                if let Err(error) = serve_rtu_port(&mut port, line.baud, line.timing, &shared).await {
                    eprintln!("rtu {}: {error}; reopening", line.path);
                }
            }
            Err(error) => eprintln!("rtu {}: cannot open: {error}; retrying", line.path),
        }
        tokio::time::sleep(retry).await;
    }
}

/// Applies the automatic schedules as simulated time passes, calling `on_load` for each load applied
/// (unit, onset on the simulated timeline, stress).
pub async fn run_schedules(shared: Arc<Shared>, tick: Duration, mut on_load: impl FnMut(UnitId, f64, f64)) {
    let mut interval = tokio::time::interval(tick);
    interval.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    loop {
        interval.tick().await;
        let at_s = shared.clock.now_s();
        for (unit, onset_s, stress_kpa) in shared.with(|sim| sim.advance(at_s)) {
            on_load(unit, onset_s, stress_kpa);
        }
    }
}
