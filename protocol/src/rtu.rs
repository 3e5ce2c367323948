//! Modbus RTU framing for both roles on a serial line: the master's reply decoder and the device's
//! request decoder.
//!
//! RTU frames carry no length field and no transaction id; the specification delimits them by line
//! silence (t3.5, Modbus over Serial Line V1.02 §2.5.1.1). Length-only framing, as many stacks do it,
//! stalls on a noise prefix such as `01 03 FF` (it waits for 255 data bytes) and takes a late reply as
//! the answer to the next request. These decoders instead:
//! - scan every offset of a bounded buffer for a frame whose shape fits the request (the master knows
//!   the outstanding request, so the expected reply length) and whose CRC checks; a frame found behind
//!   noise is recovered at once, without waiting for silence;
//! - drop bytes that can no longer start a frame, so the buffer stays within one 256-byte ADU;
//! - accept an idle-gap signal from the transport ([`RtuMaster::idle_gap`], [`RtuSlave::idle_gap`]) that
//!   flushes a stalled partial frame;
//! - forget everything when a new request begins, so bytes of an earlier exchange are never an answer.
//!
//! No I/O, no clock: the transport pushes bytes and reports silence; [`silent_interval`] tells it how long
//! t3.5 is for a baud rate.

use std::collections::VecDeque;
use std::time::Duration;

use crate::crc::{append_crc, check_crc};
use crate::pdu::{Exception, ExceptionCode, FunctionCode, PduError, Reply, Request, Response, UnitId};

/// Largest RTU frame: address + 253-byte PDU + CRC (Modbus over Serial Line V1.02 §2.5.1).
pub const MAX_ADU_LEN: usize = 256;
/// Smallest RTU frame: address, function, one data byte... an exception reply is 5 bytes, a request 8.
const MIN_ADU_LEN: usize = 4;
/// Events kept for the caller before the oldest are dropped (each is counted).
const MAX_PENDING_EVENTS: usize = 16;

/// The t3.5 inter-frame silence for a baud rate (Modbus over Serial Line V1.02 §2.5.1.1): 3.5 character
/// times of 11 bits, fixed at 1.750 ms above 19 200 baud. A baud rate of 0 is treated as 1.
pub fn silent_interval(baud: u32) -> Duration {
    if baud > 19_200 {
        Duration::from_micros(1_750)
    } else {
        Duration::from_micros((3.5 * 11.0 * 1_000_000.0 / f64::from(baud.max(1))).ceil() as u64)
    }
}

/// The t1.5 inter-character limit for a baud rate (same clause): 1.5 character times, 750 µs above 19 200 baud.
pub fn character_gap_limit(baud: u32) -> Duration {
    if baud > 19_200 {
        Duration::from_micros(750)
    } else {
        Duration::from_micros((1.5 * 11.0 * 1_000_000.0 / f64::from(baud.max(1))).ceil() as u64)
    }
}

/// Builds an RTU frame: unit id, the PDU, and the CRC low byte first.
pub fn encode_adu(unit: UnitId, pdu: &[u8]) -> Vec<u8> {
    let mut adu = Vec::with_capacity(pdu.len() + 3);
    adu.push(unit.0);
    adu.extend_from_slice(pdu);
    append_crc(&mut adu);
    adu
}

/// Builds the RTU frame of a device's normal response.
pub fn encode_response(unit: UnitId, response: &Response) -> Vec<u8> {
    let mut pdu = Vec::with_capacity(MAX_ADU_LEN);
    response.encode(&mut pdu);
    encode_adu(unit, &pdu)
}

/// Builds the RTU frame of a device's exception response.
pub fn encode_exception(unit: UnitId, exception: Exception) -> Vec<u8> {
    let mut pdu = Vec::with_capacity(2);
    exception.encode(&mut pdu);
    encode_adu(unit, &pdu)
}

/// A frame the master decoder refused, or a request it will not send. Each refused frame is consumed;
/// call [`RtuMaster::decode`] again for what follows.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum RtuError {
    /// A well-formed reply with a valid CRC came from another unit than the one asked.
    #[error("reply from unit {actual}, request was to unit {expected}")]
    UnexpectedUnit {
        /// The unit the request went to.
        expected: UnitId,
        /// The unit in the reply.
        actual: UnitId,
    },
    /// The asked unit answered with a valid CRC but the reply breaks the specification or does not
    /// answer the request (e.g. fewer registers than asked). The request is over.
    #[error("reply from unit {unit} refused: {source}")]
    Pdu {
        /// The unit that answered.
        unit: UnitId,
        /// What is wrong with the reply.
        source: PduError,
    },
    /// The request itself is not one the specification allows.
    #[error("request refused before sending: {0}")]
    InvalidRequest(PduError),
    /// Reads cannot be broadcast: no device answers unit 0.
    #[error("a read cannot be sent to the broadcast address 0")]
    BroadcastRead,
}

/// Counts of what a decoder discarded, for the per-device statistics.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct RtuCounters {
    /// Frames accepted (replies for the master, requests for the device).
    pub frames: u64,
    /// Frame-shaped byte runs of the right length whose CRC failed.
    pub crc_failures: u64,
    /// Bytes dropped because no frame could start at them.
    pub noise_bytes: u64,
    /// Valid frames for another unit (master side: replies from a unit not asked).
    pub foreign_frames: u64,
    /// Bytes that arrived while no request was outstanding (master side), e.g. a late reply.
    pub unsolicited_bytes: u64,
    /// Bytes of a partial frame flushed by an idle gap or a new request.
    pub flushed_bytes: u64,
    /// Events dropped because the caller did not collect them.
    pub dropped_events: u64,
}

/// What could begin at one offset of the buffer.
enum Start {
    /// No frame can start here, whatever follows.
    Rejected,
    /// A frame might start here once more bytes arrive.
    Pending,
    /// A frame of this many bytes very likely starts here (its header is self-consistent) and is still
    /// incomplete: a CRC-valid run lying wholly inside it is part of its data, not a frame, until it has
    /// arrived (or the idle gap ends it).
    Expecting(usize),
    /// A frame of this many bytes starts here and its CRC checks.
    Frame(usize),
}

/// Examines the frame lengths that could start at `s`: `Frame` for the first with a good CRC, `Pending`
/// while any is still incomplete, else `Rejected` (counting a CRC failure if a full-length one failed).
fn classify(s: &[u8], lengths: &[Option<usize>], incomplete_header: bool, crc_failures: &mut u64) -> Start {
    let mut pending = incomplete_header;
    let mut failed = false;
    for len in lengths.iter().flatten().copied() {
        if !(MIN_ADU_LEN..=MAX_ADU_LEN).contains(&len) {
            continue;
        }
        if s.len() < len {
            pending = true;
        } else if check_crc(&s[..len]) {
            return Start::Frame(len);
        } else {
            failed = true;
        }
    }
    if pending {
        Start::Pending
    } else {
        if failed {
            *crc_failures += 1;
        }
        Start::Rejected
    }
}

/// A bounded byte buffer with the scan shared by both roles.
#[derive(Debug)]
struct Scanner {
    buf: Vec<u8>,
}

impl Scanner {
    fn new() -> Self {
        Scanner { buf: Vec::with_capacity(2 * MAX_ADU_LEN) }
    }

    /// Finds the first complete frame, dropping the bytes before it; or drops the prefix that can no
    /// longer start a frame and returns `None`.
    fn next_frame(
        &mut self,
        counters: &mut RtuCounters,
        mut start_at: impl FnMut(&[u8], &mut u64) -> Start,
    ) -> Option<Vec<u8>> {
        let mut first_pending = None;
        // The end of the first incomplete frame with a self-consistent header: nothing inside it is taken.
        let mut hold_until = 0;
        for offset in 0..self.buf.len() {
            match start_at(&self.buf[offset..], &mut counters.crc_failures) {
                Start::Frame(len) if offset + len <= hold_until => {}
                Start::Frame(len) => {
                    counters.noise_bytes += offset as u64;
                    let frame = self.buf[offset..offset + len].to_vec();
                    self.buf.drain(..offset + len);
                    return Some(frame);
                }
                Start::Pending => {
                    first_pending.get_or_insert(offset);
                }
                Start::Expecting(len) => {
                    first_pending.get_or_insert(offset);
                    if hold_until == 0 {
                        hold_until = offset + len;
                    }
                }
                Start::Rejected => {}
            }
        }
        let keep_from = first_pending.unwrap_or(self.buf.len());
        counters.noise_bytes += keep_from as u64;
        self.buf.drain(..keep_from);
        None
    }

    /// Room left before the buffer holds one maximal ADU.
    fn room(&self) -> usize {
        MAX_ADU_LEN.saturating_sub(self.buf.len()).max(1)
    }

    fn flush(&mut self, counters: &mut RtuCounters) {
        counters.flushed_bytes += self.buf.len() as u64;
        self.buf.clear();
    }
}

fn queue<T>(events: &mut VecDeque<T>, event: T, counters: &mut RtuCounters) {
    if events.len() >= MAX_PENDING_EVENTS {
        events.pop_front();
        counters.dropped_events += 1;
    }
    events.push_back(event);
}

/// The master (client) side: send one request, decode its reply.
///
/// Call [`RtuMaster::begin`] for each request and write the bytes it returns; push every byte read
/// with [`RtuMaster::push`]; call [`RtuMaster::decode`] until it gives the reply (`Ok(Some)`), a refused
/// frame (`Err`, call again), or `Ok(None)` (need more bytes — the transport's deadline decides when to
/// give up). Report line silence with [`RtuMaster::idle_gap`].
#[derive(Debug)]
pub struct RtuMaster {
    scanner: Scanner,
    outstanding: Option<(UnitId, Request)>,
    events: VecDeque<Result<Reply, RtuError>>,
    counters: RtuCounters,
}

impl Default for RtuMaster {
    fn default() -> Self {
        Self::new()
    }
}

impl RtuMaster {
    /// A master with no request outstanding.
    pub fn new() -> Self {
        RtuMaster {
            scanner: Scanner::new(),
            outstanding: None,
            events: VecDeque::new(),
            counters: RtuCounters::default(),
        }
    }

    /// Starts a request: forgets every byte and event of earlier exchanges and returns the frame to
    /// write. A write to [`UnitId::BROADCAST`] expects no reply ([`RtuMaster::awaiting_reply`] is false).
    pub fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, RtuError> {
        request.validate().map_err(RtuError::InvalidRequest)?;
        let broadcast = unit == UnitId::BROADCAST;
        if broadcast && matches!(request, Request::ReadHoldingRegisters { .. } | Request::ReadInputRegisters { .. }) {
            return Err(RtuError::BroadcastRead);
        }
        self.scanner.flush(&mut self.counters);
        self.events.clear();
        self.outstanding = (!broadcast).then(|| (unit, request.clone()));
        let mut pdu = Vec::with_capacity(MAX_ADU_LEN);
        request.encode(&mut pdu);
        Ok(encode_adu(unit, &pdu))
    }

    /// Whether a request is waiting for its reply.
    pub fn awaiting_reply(&self) -> bool {
        self.outstanding.is_some()
    }

    /// Gives up the outstanding request (the transport's deadline passed); later bytes are unsolicited.
    pub fn cancel(&mut self) {
        self.outstanding = None;
        self.scanner.flush(&mut self.counters);
    }

    /// Feeds bytes read from the line. Bytes that arrive with no request outstanding are discarded.
    pub fn push(&mut self, mut bytes: &[u8]) {
        while !bytes.is_empty() {
            if self.outstanding.is_none() {
                self.counters.unsolicited_bytes += bytes.len() as u64;
                return;
            }
            let take = bytes.len().min(self.scanner.room());
            self.scanner.buf.extend_from_slice(&bytes[..take]);
            bytes = &bytes[take..];
            self.scan();
        }
    }

    /// The transport saw t3.5 of silence: whatever partial frame is buffered will never complete.
    pub fn idle_gap(&mut self) {
        self.scanner.flush(&mut self.counters);
    }

    /// The next outcome: the reply, a refused frame, or `Ok(None)` when more bytes are needed.
    pub fn decode(&mut self) -> Result<Option<Reply>, RtuError> {
        match self.events.pop_front() {
            Some(Ok(reply)) => Ok(Some(reply)),
            Some(Err(error)) => Err(error),
            None => Ok(None),
        }
    }

    /// What this decoder has discarded so far.
    pub fn counters(&self) -> RtuCounters {
        self.counters
    }

    /// Bytes held for a frame not yet complete (never more than one ADU).
    pub fn buffered(&self) -> usize {
        self.scanner.buf.len()
    }

    fn scan(&mut self) {
        while let Some((unit, request)) = &self.outstanding {
            let (unit, function) = (*unit, request.function().code());
            let normal_len = 3 + request.response_pdu_len();
            let quantity = match request {
                Request::ReadHoldingRegisters { quantity, .. } | Request::ReadInputRegisters { quantity, .. } => {
                    Some(usize::from(*quantity))
                }
                _ => None,
            };
            let start_at = |s: &[u8], crc_failures: &mut u64| {
                let Some(&fc) = s.get(1) else { return Start::Pending };
                if fc == function | 0x80 {
                    classify(s, &[Some(5)], false, crc_failures)
                } else if fc == function {
                    // A read reply whose byte count disagrees with the request may still be a real
                    // (short or long) reply: try that length too, so it is refused by name, not timed out.
                    let counted = match (quantity, s.get(2)) {
                        (Some(q), Some(&count)) if usize::from(count) != 2 * q => Some(5 + usize::from(count)),
                        _ => None,
                    };
                    let header_incomplete = quantity.is_some() && s.len() < 3;
                    // From the asked unit with the expected byte count: while incomplete, a CRC-valid run
                    // inside it is its data (e.g. register values that happen to form a frame).
                    let expected =
                        s[0] == unit.0 && quantity.is_some_and(|q| s.get(2) == u8::try_from(2 * q).ok().as_ref());
                    match classify(s, &[Some(normal_len), counted], header_incomplete, crc_failures) {
                        Start::Pending if expected => Start::Expecting(normal_len),
                        other => other,
                    }
                } else {
                    Start::Rejected
                }
            };
            let Some(frame) = self.scanner.next_frame(&mut self.counters, start_at) else { return };
            let from = UnitId(frame[0]);
            let pdu = &frame[1..frame.len() - 2];
            if from != unit {
                self.counters.foreign_frames += 1;
                queue(
                    &mut self.events,
                    Err(RtuError::UnexpectedUnit { expected: unit, actual: from }),
                    &mut self.counters,
                );
                continue;
            }
            self.counters.frames += 1;
            let outcome = Reply::decode(request, pdu).map_err(|source| RtuError::Pdu { unit, source });
            queue(&mut self.events, outcome, &mut self.counters);
            // The asked unit has answered, rightly or wrongly: the exchange is over.
            self.outstanding = None;
            let rest = self.scanner.buf.len();
            self.counters.unsolicited_bytes += rest as u64;
            self.scanner.buf.clear();
        }
    }
}

/// A request frame as a device sees it: which unit it is for, and the decoded request or why it is not
/// one this codec accepts. The device answers only its own unit ids, never unit 0 (broadcast).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RequestFrame {
    /// The addressed unit (0 = broadcast).
    pub unit: UnitId,
    /// The function code byte of the frame.
    pub function: u8,
    /// The request, or the PDU error; [`exception_for`] gives the exception code to answer.
    pub request: Result<Request, PduError>,
}

/// The exception a device answers to a request PDU it cannot accept (V1.1b3 §7 and the state diagrams
/// of §6: unsupported function → 01, address out of range → 02, quantity or byte count wrong → 03).
pub fn exception_for(error: &PduError) -> ExceptionCode {
    match error {
        PduError::UnsupportedFunction(_) | PduError::Empty => ExceptionCode::IllegalFunction,
        PduError::AddressOverflow { .. } => ExceptionCode::IllegalDataAddress,
        _ => ExceptionCode::IllegalDataValue,
    }
}

/// The device (server) side: decodes request frames from the line.
///
/// Push bytes with [`RtuSlave::push`]; take frames with [`RtuSlave::decode`]. Frames of the four
/// implemented function codes are recognised by length and CRC; a frame of any other function code has
/// no known length, so it is delivered (for an exception 01 answer) when the transport reports the idle
/// gap that ends it ([`RtuSlave::idle_gap`]).
#[derive(Debug)]
pub struct RtuSlave {
    scanner: Scanner,
    frames: VecDeque<RequestFrame>,
    counters: RtuCounters,
}

impl Default for RtuSlave {
    fn default() -> Self {
        Self::new()
    }
}

impl RtuSlave {
    /// An empty decoder.
    pub fn new() -> Self {
        RtuSlave { scanner: Scanner::new(), frames: VecDeque::new(), counters: RtuCounters::default() }
    }

    /// Feeds bytes read from the line.
    pub fn push(&mut self, mut bytes: &[u8]) {
        while !bytes.is_empty() {
            let take = bytes.len().min(self.scanner.room());
            self.scanner.buf.extend_from_slice(&bytes[..take]);
            bytes = &bytes[take..];
            self.scan();
        }
    }

    /// The next request frame, if one is complete.
    pub fn decode(&mut self) -> Option<RequestFrame> {
        self.frames.pop_front()
    }

    /// The transport saw t3.5 of silence. The silence ends every frame: a header still waiting for its
    /// bytes was noise, so a frame held back inside it is delivered now. A buffered run with a good CRC
    /// and an unimplemented function code is delivered as a frame (so the device can answer exception
    /// 01); anything else is flushed.
    pub fn idle_gap(&mut self) {
        self.scan_at(true);
        let buf = &self.scanner.buf;
        if buf.len() >= MIN_ADU_LEN && check_crc(buf) && FunctionCode::from_code(buf[1]).is_none() {
            let frame = RequestFrame {
                unit: UnitId(buf[0]),
                function: buf[1],
                request: Err(PduError::UnsupportedFunction(buf[1])),
            };
            self.counters.frames += 1;
            self.scanner.buf.clear();
            queue(&mut self.frames, frame, &mut self.counters);
        } else {
            self.scanner.flush(&mut self.counters);
        }
    }

    /// Forgets any partial frame (e.g. after the device has written a reply).
    pub fn reset(&mut self) {
        self.scanner.flush(&mut self.counters);
        self.frames.clear();
    }

    /// What this decoder has discarded so far.
    pub fn counters(&self) -> RtuCounters {
        self.counters
    }

    /// Bytes held for a frame not yet complete (never more than one ADU).
    pub fn buffered(&self) -> usize {
        self.scanner.buf.len()
    }

    fn scan(&mut self) {
        self.scan_at(false);
    }

    /// Scans the buffer; `at_gap`: the line has gone silent, so an incomplete frame holds nothing back.
    fn scan_at(&mut self, at_gap: bool) {
        let start_at = |s: &[u8], crc_failures: &mut u64| {
            let Some(&fc) = s.get(1) else { return Start::Pending };
            match FunctionCode::from_code(fc) {
                Some(FunctionCode::WriteMultipleRegisters) => match s.get(6) {
                    Some(&count) => {
                        let len = 9 + usize::from(count);
                        // Unit 0..=247, quantity 1..=123 and byte count = 2 × quantity: a header noise
                        // rarely forms; while it is incomplete, runs inside it are its data.
                        let quantity = u16::from_be_bytes([s[4], s[5]]);
                        let consistent = s[0] <= 247
                            && (1..=123).contains(&quantity)
                            && usize::from(count) == 2 * usize::from(quantity);
                        match classify(s, &[Some(len)], false, crc_failures) {
                            Start::Pending if at_gap => Start::Rejected,
                            Start::Pending if consistent => Start::Expecting(len),
                            other => other,
                        }
                    }
                    None => Start::Pending,
                },
                Some(_) => classify(s, &[Some(8)], false, crc_failures),
                // Unknown length: it can only be delimited by the idle gap, unless a known frame follows;
                // never longer than one ADU.
                None if s.len() < MAX_ADU_LEN => Start::Pending,
                None => Start::Rejected,
            }
        };
        while let Some(frame) = self.scanner.next_frame(&mut self.counters, start_at) {
            self.counters.frames += 1;
            let pdu = &frame[1..frame.len() - 2];
            let decoded = RequestFrame { unit: UnitId(frame[0]), function: frame[1], request: Request::decode(pdu) };
            queue(&mut self.frames, decoded, &mut self.counters);
        }
    }
}

#[cfg(test)]
#[path = "rtu_tests.rs"]
mod tests;
