//! Modbus TCP framing: the MBAP header (Modbus Messaging on TCP/IP Implementation Guide V1.0b §3.1.3).
//!
//! Seven header bytes — transaction id, protocol id (0 for Modbus), length (unit id + PDU), unit id —
//! then the PDU. The length field delimits frames, so a byte stream is framed exactly; a header that
//! breaks the rules (protocol id ≠ 0, length outside 2..=254) means the stream is out of step and the
//! connection must be closed ([`TcpError::is_fatal`]). No I/O and no clock here.

use std::collections::VecDeque;

use crate::pdu::{MAX_PDU_LEN, PduError, Reply, Request, Response, UnitId};

/// Bytes of the MBAP header.
pub const MBAP_LEN: usize = 7;
/// Outcomes kept for the caller before the oldest notices are dropped.
const MAX_PENDING_RESULTS: usize = 16;
/// Largest value of the MBAP length field: unit id + the largest PDU.
pub const MAX_LENGTH_FIELD: u16 = 1 + MAX_PDU_LEN as u16;

/// The MBAP header of one frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MbapHeader {
    /// Chosen by the client, echoed by the server; pairs a reply with its request.
    pub transaction_id: u16,
    /// The unit (slave) addressed behind a gateway, or the device itself.
    pub unit: UnitId,
}

/// A framing failure or a refused reply on a Modbus TCP stream.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum TcpError {
    /// The protocol id of a header is not 0: the stream is not Modbus or is out of step. Fatal.
    #[error("MBAP protocol id {0}, expected 0 (Modbus)")]
    ProtocolId(u16),
    /// The length field is outside 2..=254. Fatal.
    #[error("MBAP length {0} outside 2..=254")]
    Length(u16),
    /// A reply carries another transaction id than the outstanding request (e.g. a late reply to an
    /// earlier request); it is discarded and the request still waits.
    #[error("reply with transaction id {actual}, outstanding request has {expected}")]
    TransactionMismatch {
        /// The outstanding request's transaction id.
        expected: u16,
        /// The reply's transaction id.
        actual: u16,
    },
    /// A reply with the right transaction id names another unit. The request is over.
    #[error("reply from unit {actual}, request was to unit {expected}")]
    UnexpectedUnit {
        /// The unit asked.
        expected: UnitId,
        /// The unit in the reply.
        actual: UnitId,
    },
    /// The reply PDU breaks the specification or does not answer the request. The request is over.
    #[error("reply refused: {0}")]
    Pdu(PduError),
    /// The request itself is not one the specification allows.
    #[error("request refused before sending: {0}")]
    InvalidRequest(PduError),
}

impl TcpError {
    /// Whether the stream is out of step and the connection must be closed and reopened.
    pub fn is_fatal(&self) -> bool {
        matches!(self, TcpError::ProtocolId(_) | TcpError::Length(_))
    }
}

/// Builds a Modbus TCP frame: MBAP header then the PDU.
pub fn encode_adu(header: MbapHeader, pdu: &[u8]) -> Vec<u8> {
    let mut adu = Vec::with_capacity(MBAP_LEN + pdu.len());
    adu.extend_from_slice(&header.transaction_id.to_be_bytes());
    adu.extend_from_slice(&0u16.to_be_bytes());
    adu.extend_from_slice(&((pdu.len() + 1) as u16).to_be_bytes());
    adu.push(header.unit.0);
    adu.extend_from_slice(pdu);
    adu
}

/// Builds the Modbus TCP frame of a device's normal response.
pub fn encode_response(header: MbapHeader, response: &Response) -> Vec<u8> {
    let mut pdu = Vec::with_capacity(MAX_PDU_LEN);
    response.encode(&mut pdu);
    encode_adu(header, &pdu)
}

/// Splits a byte stream into MBAP frames, either role. Bounded: it never holds more than one frame
/// plus the bytes of the current read.
#[derive(Debug, Default)]
pub struct TcpFramer {
    buf: Vec<u8>,
}

impl TcpFramer {
    /// An empty framer.
    pub fn new() -> Self {
        TcpFramer { buf: Vec::with_capacity(MBAP_LEN + MAX_PDU_LEN) }
    }

    /// Feeds bytes read from the stream.
    pub fn push(&mut self, bytes: &[u8]) {
        self.buf.extend_from_slice(bytes);
    }

    /// The next complete frame's header and PDU; `Ok(None)` when more bytes are needed; a fatal error
    /// when the header is invalid (the buffer is then cleared: close the connection).
    pub fn next_frame(&mut self) -> Result<Option<(MbapHeader, Vec<u8>)>, TcpError> {
        if self.buf.len() < MBAP_LEN {
            return Ok(None);
        }
        let word = |at: usize| u16::from_be_bytes([self.buf[at], self.buf[at + 1]]);
        let (transaction_id, protocol_id, length) = (word(0), word(2), word(4));
        if protocol_id != 0 {
            self.buf.clear();
            return Err(TcpError::ProtocolId(protocol_id));
        }
        if !(2..=MAX_LENGTH_FIELD).contains(&length) {
            self.buf.clear();
            return Err(TcpError::Length(length));
        }
        let total = MBAP_LEN - 1 + usize::from(length);
        if self.buf.len() < total {
            return Ok(None);
        }
        let header = MbapHeader { transaction_id, unit: UnitId(self.buf[6]) };
        let pdu = self.buf[MBAP_LEN..total].to_vec();
        self.buf.drain(..total);
        Ok(Some((header, pdu)))
    }

    /// Forgets buffered bytes (after reconnecting).
    pub fn reset(&mut self) {
        self.buf.clear();
    }
}

/// The client side: one outstanding request at a time, paired with its reply by transaction id.
///
/// [`TcpMaster::begin`] returns the frame to write; push what the socket reads with
/// [`TcpMaster::push`]; [`TcpMaster::decode`] gives the reply, `Ok(None)` while more is needed, or an
/// error (call again unless [`TcpError::is_fatal`], in which case reconnect and call [`TcpMaster::reset`]).
#[derive(Debug, Default)]
pub struct TcpMaster {
    framer: TcpFramer,
    next_transaction_id: u16,
    outstanding: Option<(MbapHeader, Request)>,
    results: VecDeque<Result<Reply, TcpError>>,
    discarded_frames: u64,
}

impl TcpMaster {
    /// A client whose first transaction id is 1.
    pub fn new() -> Self {
        TcpMaster { next_transaction_id: 1, ..Default::default() }
    }

    /// Starts a request with a fresh transaction id and returns the frame to write.
    pub fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, TcpError> {
        request.validate().map_err(TcpError::InvalidRequest)?;
        let header = MbapHeader { transaction_id: self.next_transaction_id, unit };
        self.next_transaction_id = self.next_transaction_id.wrapping_add(1);
        self.results.clear();
        self.outstanding = Some((header, request.clone()));
        let mut pdu = Vec::with_capacity(MAX_PDU_LEN);
        request.encode(&mut pdu);
        Ok(encode_adu(header, &pdu))
    }

    /// The transaction id of the outstanding request.
    pub fn outstanding_transaction(&self) -> Option<u16> {
        self.outstanding.as_ref().map(|(header, _)| header.transaction_id)
    }

    /// Gives up the outstanding request; a late reply to it will be discarded by transaction id.
    pub fn cancel(&mut self) {
        self.outstanding = None;
    }

    /// Forgets buffered bytes and the outstanding request (after a reconnect).
    pub fn reset(&mut self) {
        self.framer.reset();
        self.outstanding = None;
        self.results.clear();
    }

    /// Feeds bytes read from the socket.
    pub fn push(&mut self, bytes: &[u8]) {
        self.framer.push(bytes);
        loop {
            match self.framer.next_frame() {
                Ok(None) => return,
                Ok(Some((header, pdu))) => self.accept(header, &pdu),
                Err(fatal) => {
                    self.outstanding = None;
                    self.results.push_back(Err(fatal));
                    return;
                }
            }
        }
    }

    /// The next outcome: the reply, a refused frame, or `Ok(None)` when more bytes are needed.
    pub fn decode(&mut self) -> Result<Option<Reply>, TcpError> {
        match self.results.pop_front() {
            Some(Ok(reply)) => Ok(Some(reply)),
            Some(Err(error)) => Err(error),
            None => Ok(None),
        }
    }

    /// Frames discarded because no request was waiting for them.
    pub fn discarded_frames(&self) -> u64 {
        self.discarded_frames
    }

    fn accept(&mut self, header: MbapHeader, pdu: &[u8]) {
        let Some((expected, request)) = &self.outstanding else {
            self.discarded_frames += 1;
            return;
        };
        if header.transaction_id != expected.transaction_id {
            self.discarded_frames += 1;
            // Keep only the newest few notices, so a flood of stale frames cannot grow memory.
            if self.results.len() >= MAX_PENDING_RESULTS {
                self.results.pop_front();
            }
            let error =
                TcpError::TransactionMismatch { expected: expected.transaction_id, actual: header.transaction_id };
            self.results.push_back(Err(error));
            return;
        }
        let outcome = if header.unit != expected.unit {
            Err(TcpError::UnexpectedUnit { expected: expected.unit, actual: header.unit })
        } else {
            Reply::decode(request, pdu).map_err(TcpError::Pdu)
        };
        self.results.push_back(outcome);
        self.outstanding = None;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::pdu::ExceptionCode;

    /// Transaction 1, unit 1, FC 03 registers 0–1 (Modbus Messaging on TCP/IP Implementation Guide
    /// V1.0b §3.1.3 header layout; PDU as in the Application Protocol V1.1b3 §6.3).
    const REQ_FC03_T1_U1: &[u8] = &[
        0x00, 0x01, // transaction id 1
        0x00, 0x00, // protocol id 0 = Modbus
        0x00, 0x06, // length: unit id + 5 PDU bytes
        0x01, // unit id 1
        0x03, // read holding registers
        0x00, 0x00, // starting address 0
        0x00, 0x02, // quantity 2
    ];
    /// The reply: registers 0–1 = 0x0001, 0xE240.
    const RSP_FC03_T1_U1: &[u8] = &[
        0x00, 0x01, // transaction id 1 (echoed)
        0x00, 0x00, // protocol id
        0x00, 0x07, // length: unit id + 6 PDU bytes
        0x01, // unit id 1
        0x03, // function code
        0x04, // byte count
        0x00, 0x01, // register 0
        0xE2, 0x40, // register 1
    ];
    /// Exception 02 to transaction 2.
    const EXC_FC04_T2_U1: &[u8] = &[
        0x00, 0x02, // transaction id 2
        0x00, 0x00, // protocol id
        0x00, 0x03, // length
        0x01, // unit id
        0x84, // function 04 | 0x80
        0x02, // illegal data address
    ];

    fn read_u1() -> Request {
        Request::ReadHoldingRegisters { address: 0, quantity: 2 }
    }

    fn expected_reply() -> Reply {
        Reply::Normal(Response::ReadHoldingRegisters(vec![0x0001, 0xE240]))
    }

    #[test]
    fn request_encodes_to_the_vector_and_reply_decodes_whole_and_byte_by_byte() {
        let mut master = TcpMaster::new();
        assert_eq!(master.begin(UnitId(1), &read_u1()).unwrap(), REQ_FC03_T1_U1);
        master.push(RSP_FC03_T1_U1);
        assert_eq!(master.decode(), Ok(Some(expected_reply())));

        let mut master = TcpMaster::new();
        master.begin(UnitId(1), &read_u1()).unwrap();
        for byte in RSP_FC03_T1_U1 {
            assert_eq!(master.decode(), Ok(None));
            master.push(std::slice::from_ref(byte));
        }
        assert_eq!(master.decode(), Ok(Some(expected_reply())));
        assert_eq!(master.outstanding_transaction(), None);
    }

    #[test]
    fn exception_reply_is_a_device_exception() {
        let mut master = TcpMaster::new();
        master.begin(UnitId(1), &Request::ReadInputRegisters { address: 0, quantity: 1 }).unwrap();
        master.begin(UnitId(1), &Request::ReadInputRegisters { address: 500, quantity: 1 }).unwrap();
        master.push(EXC_FC04_T2_U1);
        assert_eq!(master.decode(), Ok(Some(Reply::Exception(ExceptionCode::IllegalDataAddress))));
    }

    #[test]
    fn late_reply_with_old_transaction_id_is_discarded_and_the_wait_goes_on() {
        let mut master = TcpMaster::new();
        master.begin(UnitId(1), &read_u1()).unwrap();
        master.cancel();
        master.begin(UnitId(1), &read_u1()).unwrap(); // transaction 2
        let mut current = RSP_FC03_T1_U1.to_vec();
        current[1] = 0x02;
        master.push(&[RSP_FC03_T1_U1, &current].concat());
        assert_eq!(master.decode(), Err(TcpError::TransactionMismatch { expected: 2, actual: 1 }));
        assert_eq!(master.decode(), Ok(Some(expected_reply())));
        assert_eq!(master.discarded_frames(), 1);
    }

    #[test]
    fn reply_from_another_unit_is_refused() {
        let mut master = TcpMaster::new();
        master.begin(UnitId(2), &read_u1()).unwrap();
        master.push(RSP_FC03_T1_U1);
        assert_eq!(master.decode(), Err(TcpError::UnexpectedUnit { expected: UnitId(2), actual: UnitId(1) }));
    }

    #[test]
    fn bad_protocol_id_and_length_are_fatal() {
        let mut framer = TcpFramer::new();
        framer.push(&[0, 1, 0, 1, 0, 6, 1, 3, 0, 0, 0, 2]);
        let error = framer.next_frame().unwrap_err();
        assert_eq!(error, TcpError::ProtocolId(1));
        assert!(error.is_fatal());
        framer.push(&[0, 1, 0, 0, 0x01, 0x00, 1]);
        assert_eq!(framer.next_frame(), Err(TcpError::Length(256)));
        framer.push(&[0, 1, 0, 0, 0, 1, 1]);
        assert_eq!(framer.next_frame(), Err(TcpError::Length(1)));
    }

    #[test]
    fn short_response_is_refused() {
        let mut master = TcpMaster::new();
        master.begin(UnitId(1), &read_u1()).unwrap();
        master.push(&[0, 1, 0, 0, 0, 5, 1, 3, 2, 0, 1]);
        assert_eq!(master.decode(), Err(TcpError::Pdu(PduError::ByteCount { expected: 4, actual: 2 })));
    }

    #[test]
    fn server_side_frames_back_to_back_requests() {
        let mut framer = TcpFramer::new();
        framer.push(&[REQ_FC03_T1_U1, REQ_FC03_T1_U1].concat());
        for _ in 0..2 {
            let (header, pdu) = framer.next_frame().unwrap().unwrap();
            assert_eq!(header, MbapHeader { transaction_id: 1, unit: UnitId(1) });
            assert_eq!(Request::decode(&pdu), Ok(read_u1()));
        }
        assert_eq!(framer.next_frame(), Ok(None));
        let reply = encode_response(
            MbapHeader { transaction_id: 1, unit: UnitId(1) },
            &Response::ReadHoldingRegisters(vec![0x0001, 0xE240]),
        );
        assert_eq!(reply, RSP_FC03_T1_U1);
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(5000))]
        /// Arbitrary bytes never panic the framer, and it never holds more than it was given.
        #[test]
        fn framer_never_panics(bytes in proptest::collection::vec(proptest::num::u8::ANY, 0..600), split in 1usize..64) {
            let mut framer = TcpFramer::new();
            for chunk in bytes.chunks(split) {
                framer.push(chunk);
                while let Ok(Some(_)) = framer.next_frame() {}
            }
        }

        /// encode ∘ decode round-trips a reply of any size and transaction id.
        #[test]
        fn replies_round_trip(values in proptest::collection::vec(proptest::num::u16::ANY, 1..=125), skip in 0u16..500) {
            let mut master = TcpMaster::new();
            for _ in 0..skip {
                master.begin(UnitId(9), &read_u1()).unwrap();
            }
            let request = Request::ReadInputRegisters { address: 0, quantity: values.len() as u16 };
            master.begin(UnitId(9), &request).unwrap();
            let header = MbapHeader { transaction_id: master.outstanding_transaction().unwrap(), unit: UnitId(9) };
            master.push(&encode_response(header, &Response::ReadInputRegisters(values.clone())));
            proptest::prop_assert_eq!(master.decode(), Ok(Some(Reply::Normal(Response::ReadInputRegisters(values)))));
        }
    }
}
