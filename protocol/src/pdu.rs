//! Modbus PDUs for function codes 03, 04, 06 and 16, and exception responses.
//!
//! Encoding and strict decoding of the protocol data unit shared by RTU and TCP (Modbus Application
//! Protocol Specification V1.1b3, §6.3, §6.4, §6.6, §6.12, §7). A frame that breaks a rule of the
//! specification is refused with a [`PduError`] carrying the numbers involved; nothing here panics on
//! input. This module knows nothing about framing (CRC, MBAP) — see [`crate::rtu`] and [`crate::tcp`].

use std::fmt;

/// Largest register count of a read (FC 03/04), V1.1b3 §6.3: 1 to 125 (0x7D).
pub const MAX_READ_QUANTITY: u16 = 125;
/// Largest register count of a write (FC 16), V1.1b3 §6.12: 1 to 123 (0x7B).
pub const MAX_WRITE_QUANTITY: u16 = 123;
/// Largest PDU, V1.1b3 §4.1: 256-byte serial ADU less address and CRC.
pub const MAX_PDU_LEN: usize = 253;

/// A Modbus unit identifier: the slave address on a serial line, the unit id in the MBAP header.
///
/// 0 is the serial broadcast address, 1–247 are individual devices, 248–255 are reserved on serial
/// lines (Modbus over Serial Line V1.02 §2.2); on TCP all 256 values may appear.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct UnitId(pub u8);

impl UnitId {
    /// The serial broadcast address: requests to it are executed by every device and never answered.
    pub const BROADCAST: UnitId = UnitId(0);

    /// Whether this id may address one device on a serial line (1–247).
    pub fn is_individual(self) -> bool {
        (1..=247).contains(&self.0)
    }
}

impl fmt::Display for UnitId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

/// The function codes this codec implements.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FunctionCode {
    /// 0x03 Read Holding Registers.
    ReadHoldingRegisters,
    /// 0x04 Read Input Registers.
    ReadInputRegisters,
    /// 0x06 Write Single Register.
    WriteSingleRegister,
    /// 0x10 Write Multiple Registers.
    WriteMultipleRegisters,
}

impl FunctionCode {
    /// The code's byte on the wire.
    pub fn code(self) -> u8 {
        match self {
            FunctionCode::ReadHoldingRegisters => 0x03,
            FunctionCode::ReadInputRegisters => 0x04,
            FunctionCode::WriteSingleRegister => 0x06,
            FunctionCode::WriteMultipleRegisters => 0x10,
        }
    }

    /// The function code for a wire byte, if this codec implements it.
    pub fn from_code(code: u8) -> Option<FunctionCode> {
        match code {
            0x03 => Some(FunctionCode::ReadHoldingRegisters),
            0x04 => Some(FunctionCode::ReadInputRegisters),
            0x06 => Some(FunctionCode::WriteSingleRegister),
            0x10 => Some(FunctionCode::WriteMultipleRegisters),
            _ => None,
        }
    }
}

/// Exception codes a device returns instead of a normal response (V1.1b3 §7).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum ExceptionCode {
    /// 01: the function code is not supported by the device.
    IllegalFunction,
    /// 02: the register address (or address + quantity) is not valid for the device.
    IllegalDataAddress,
    /// 03: a value in the request is not allowed (e.g. a quantity out of range).
    IllegalDataValue,
    /// 04: an unrecoverable error occurred while the device performed the action.
    ServerDeviceFailure,
    /// 05: the device accepted a long-running request.
    Acknowledge,
    /// 06: the device is busy with a long-running command.
    ServerDeviceBusy,
    /// 08: memory parity error (file records).
    MemoryParityError,
    /// 0A: a gateway could not allocate a path to the target.
    GatewayPathUnavailable,
    /// 0B: a gateway got no response from the target device.
    GatewayTargetFailedToRespond,
    /// Any other code a device sends; kept so nothing the device said is lost.
    Other(u8),
}

impl ExceptionCode {
    /// The code's byte on the wire.
    pub fn code(self) -> u8 {
        match self {
            ExceptionCode::IllegalFunction => 0x01,
            ExceptionCode::IllegalDataAddress => 0x02,
            ExceptionCode::IllegalDataValue => 0x03,
            ExceptionCode::ServerDeviceFailure => 0x04,
            ExceptionCode::Acknowledge => 0x05,
            ExceptionCode::ServerDeviceBusy => 0x06,
            ExceptionCode::MemoryParityError => 0x08,
            ExceptionCode::GatewayPathUnavailable => 0x0A,
            ExceptionCode::GatewayTargetFailedToRespond => 0x0B,
            ExceptionCode::Other(code) => code,
        }
    }

    /// The exception for a wire byte.
    pub fn from_code(code: u8) -> ExceptionCode {
        match code {
            0x01 => ExceptionCode::IllegalFunction,
            0x02 => ExceptionCode::IllegalDataAddress,
            0x03 => ExceptionCode::IllegalDataValue,
            0x04 => ExceptionCode::ServerDeviceFailure,
            0x05 => ExceptionCode::Acknowledge,
            0x06 => ExceptionCode::ServerDeviceBusy,
            0x08 => ExceptionCode::MemoryParityError,
            0x0A => ExceptionCode::GatewayPathUnavailable,
            0x0B => ExceptionCode::GatewayTargetFailedToRespond,
            other => ExceptionCode::Other(other),
        }
    }
}

impl fmt::Display for ExceptionCode {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let name = match self {
            ExceptionCode::IllegalFunction => "illegal function",
            ExceptionCode::IllegalDataAddress => "illegal data address",
            ExceptionCode::IllegalDataValue => "illegal data value",
            ExceptionCode::ServerDeviceFailure => "server device failure",
            ExceptionCode::Acknowledge => "acknowledge",
            ExceptionCode::ServerDeviceBusy => "server device busy",
            ExceptionCode::MemoryParityError => "memory parity error",
            ExceptionCode::GatewayPathUnavailable => "gateway path unavailable",
            ExceptionCode::GatewayTargetFailedToRespond => "gateway target failed to respond",
            ExceptionCode::Other(_) => "unlisted exception",
        };
        write!(f, "exception {:02X} ({name})", self.code())
    }
}

/// A request from the master (client) to a device.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Request {
    /// FC 03: read `quantity` holding registers from `address`.
    ReadHoldingRegisters {
        /// First register address (0-based, as on the wire).
        address: u16,
        /// Number of registers, 1–125.
        quantity: u16,
    },
    /// FC 04: read `quantity` input registers from `address`.
    ReadInputRegisters {
        /// First register address (0-based, as on the wire).
        address: u16,
        /// Number of registers, 1–125.
        quantity: u16,
    },
    /// FC 06: write one holding register.
    WriteSingleRegister {
        /// Register address.
        address: u16,
        /// The value to write.
        value: u16,
    },
    /// FC 16: write consecutive holding registers.
    WriteMultipleRegisters {
        /// First register address.
        address: u16,
        /// Values, 1–123 of them.
        values: Vec<u16>,
    },
}

/// A device's normal (non-exception) response.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Response {
    /// FC 03: the registers read.
    ReadHoldingRegisters(Vec<u16>),
    /// FC 04: the registers read.
    ReadInputRegisters(Vec<u16>),
    /// FC 06: the echo of address and value.
    WriteSingleRegister {
        /// Echoed register address.
        address: u16,
        /// Echoed value.
        value: u16,
    },
    /// FC 16: the echo of address and quantity.
    WriteMultipleRegisters {
        /// Echoed first address.
        address: u16,
        /// Echoed register count.
        quantity: u16,
    },
}

/// An exception response: the request's function code with bit 7 set, then one code byte.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Exception {
    /// The function code of the request being refused (without the 0x80 bit).
    pub function: u8,
    /// Why the device refused it.
    pub code: ExceptionCode,
}

impl Exception {
    /// Appends the two PDU bytes of this exception to `out`.
    pub fn encode(&self, out: &mut Vec<u8>) {
        out.push(self.function | 0x80);
        out.push(self.code.code());
    }
}

/// What a device answered to a request: data, or a device exception (kept apart from transport failures).
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Reply {
    /// A normal response that matches the request.
    Normal(Response),
    /// The device refused the request.
    Exception(ExceptionCode),
}

/// A PDU that breaks the specification, or does not answer the request it was matched with.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum PduError {
    /// No bytes at all.
    #[error("empty PDU")]
    Empty,
    /// A function code this codec does not implement.
    #[error("function code {0:#04x} is not supported (supported: 03, 04, 06, 16)")]
    UnsupportedFunction(u8),
    /// The PDU is longer or shorter than its function code requires.
    #[error("function {function:#04x}: PDU of {actual} bytes, expected {expected}")]
    Length {
        /// Function code.
        function: u8,
        /// Length the function requires.
        expected: usize,
        /// Length received.
        actual: usize,
    },
    /// A register count outside what the function allows.
    #[error("function {function:#04x}: quantity {quantity} outside 1..={max}")]
    Quantity {
        /// Function code.
        function: u8,
        /// Quantity received or requested.
        quantity: u16,
        /// Largest quantity the function allows.
        max: u16,
    },
    /// The addressed block would run past register 65535.
    #[error("address {address} + quantity {quantity} runs past register 65535")]
    AddressOverflow {
        /// First address.
        address: u16,
        /// Register count.
        quantity: u16,
    },
    /// The byte count field disagrees with the register count (expected = 2 × quantity).
    #[error("byte count {actual}, expected {expected} (2 × quantity)")]
    ByteCount {
        /// Byte count the request implies (or the data length implies).
        expected: usize,
        /// Byte count in the frame.
        actual: usize,
    },
    /// A response for another function code than the request's.
    #[error("response function {actual:#04x} does not answer request function {expected:#04x}")]
    FunctionMismatch {
        /// The request's function code.
        expected: u8,
        /// The response's function code.
        actual: u8,
    },
    /// A write response whose echo differs from the request.
    #[error("echoed {field} is {actual}, request had {expected}")]
    EchoMismatch {
        /// Which echoed field differs: `address`, `value` or `quantity`.
        field: &'static str,
        /// The request's value.
        expected: u16,
        /// The echoed value.
        actual: u16,
    },
}

fn be16(bytes: &[u8], at: usize) -> u16 {
    u16::from_be_bytes([bytes[at], bytes[at + 1]])
}

fn check_block(function: u8, address: u16, quantity: u16, max: u16) -> Result<(), PduError> {
    if quantity == 0 || quantity > max {
        return Err(PduError::Quantity { function, quantity, max });
    }
    if u32::from(address) + u32::from(quantity) > 0x1_0000 {
        return Err(PduError::AddressOverflow { address, quantity });
    }
    Ok(())
}

fn check_len(function: u8, pdu: &[u8], expected: usize) -> Result<(), PduError> {
    if pdu.len() == expected { Ok(()) } else { Err(PduError::Length { function, expected, actual: pdu.len() }) }
}

impl Request {
    /// The request's function code.
    pub fn function(&self) -> FunctionCode {
        match self {
            Request::ReadHoldingRegisters { .. } => FunctionCode::ReadHoldingRegisters,
            Request::ReadInputRegisters { .. } => FunctionCode::ReadInputRegisters,
            Request::WriteSingleRegister { .. } => FunctionCode::WriteSingleRegister,
            Request::WriteMultipleRegisters { .. } => FunctionCode::WriteMultipleRegisters,
        }
    }

    /// Checks the quantities and address range a device would check, so a master never sends a
    /// request the specification forbids.
    pub fn validate(&self) -> Result<(), PduError> {
        let function = self.function().code();
        match self {
            Request::ReadHoldingRegisters { address, quantity } | Request::ReadInputRegisters { address, quantity } => {
                check_block(function, *address, *quantity, MAX_READ_QUANTITY)
            }
            Request::WriteSingleRegister { .. } => Ok(()),
            Request::WriteMultipleRegisters { address, values } => {
                let quantity = u16::try_from(values.len()).unwrap_or(u16::MAX);
                check_block(function, *address, quantity, MAX_WRITE_QUANTITY)
            }
        }
    }

    /// Appends the request PDU to `out`. The request should have passed [`Request::validate`].
    pub fn encode(&self, out: &mut Vec<u8>) {
        out.push(self.function().code());
        match self {
            Request::ReadHoldingRegisters { address, quantity } | Request::ReadInputRegisters { address, quantity } => {
                out.extend_from_slice(&address.to_be_bytes());
                out.extend_from_slice(&quantity.to_be_bytes());
            }
            Request::WriteSingleRegister { address, value } => {
                out.extend_from_slice(&address.to_be_bytes());
                out.extend_from_slice(&value.to_be_bytes());
            }
            Request::WriteMultipleRegisters { address, values } => {
                out.extend_from_slice(&address.to_be_bytes());
                out.extend_from_slice(&(values.len() as u16).to_be_bytes());
                out.push((values.len() * 2) as u8);
                for value in values {
                    out.extend_from_slice(&value.to_be_bytes());
                }
            }
        }
    }

    /// Length in bytes of the PDU of a normal response to this request.
    pub fn response_pdu_len(&self) -> usize {
        match self {
            Request::ReadHoldingRegisters { quantity, .. } | Request::ReadInputRegisters { quantity, .. } => {
                2 + 2 * usize::from(*quantity)
            }
            Request::WriteSingleRegister { .. } | Request::WriteMultipleRegisters { .. } => 5,
        }
    }

    /// Decodes a request PDU (the device's side), strictly: exact length, quantity limits, byte count.
    pub fn decode(pdu: &[u8]) -> Result<Request, PduError> {
        let &function = pdu.first().ok_or(PduError::Empty)?;
        let code = FunctionCode::from_code(function).ok_or(PduError::UnsupportedFunction(function))?;
        match code {
            FunctionCode::ReadHoldingRegisters | FunctionCode::ReadInputRegisters => {
                check_len(function, pdu, 5)?;
                let (address, quantity) = (be16(pdu, 1), be16(pdu, 3));
                check_block(function, address, quantity, MAX_READ_QUANTITY)?;
                Ok(if code == FunctionCode::ReadHoldingRegisters {
                    Request::ReadHoldingRegisters { address, quantity }
                } else {
                    Request::ReadInputRegisters { address, quantity }
                })
            }
            FunctionCode::WriteSingleRegister => {
                check_len(function, pdu, 5)?;
                Ok(Request::WriteSingleRegister { address: be16(pdu, 1), value: be16(pdu, 3) })
            }
            FunctionCode::WriteMultipleRegisters => {
                if pdu.len() < 6 {
                    return Err(PduError::Length { function, expected: 6, actual: pdu.len() });
                }
                let (address, quantity) = (be16(pdu, 1), be16(pdu, 3));
                check_block(function, address, quantity, MAX_WRITE_QUANTITY)?;
                let byte_count = usize::from(pdu[5]);
                let expected = 2 * usize::from(quantity);
                if byte_count != expected {
                    return Err(PduError::ByteCount { expected, actual: byte_count });
                }
                check_len(function, pdu, 6 + byte_count)?;
                let values = pdu[6..].chunks_exact(2).map(|w| u16::from_be_bytes([w[0], w[1]])).collect();
                Ok(Request::WriteMultipleRegisters { address, values })
            }
        }
    }
}

impl Response {
    /// The response's function code.
    pub fn function(&self) -> FunctionCode {
        match self {
            Response::ReadHoldingRegisters(_) => FunctionCode::ReadHoldingRegisters,
            Response::ReadInputRegisters(_) => FunctionCode::ReadInputRegisters,
            Response::WriteSingleRegister { .. } => FunctionCode::WriteSingleRegister,
            Response::WriteMultipleRegisters { .. } => FunctionCode::WriteMultipleRegisters,
        }
    }

    /// Appends the response PDU to `out` (the device's side).
    pub fn encode(&self, out: &mut Vec<u8>) {
        out.push(self.function().code());
        match self {
            Response::ReadHoldingRegisters(values) | Response::ReadInputRegisters(values) => {
                out.push((values.len() * 2) as u8);
                for value in values {
                    out.extend_from_slice(&value.to_be_bytes());
                }
            }
            Response::WriteSingleRegister { address, value } => {
                out.extend_from_slice(&address.to_be_bytes());
                out.extend_from_slice(&value.to_be_bytes());
            }
            Response::WriteMultipleRegisters { address, quantity } => {
                out.extend_from_slice(&address.to_be_bytes());
                out.extend_from_slice(&quantity.to_be_bytes());
            }
        }
    }
}

impl Reply {
    /// Decodes the PDU a device sent in answer to `request` (the master's side), strictly: function code,
    /// exact length, byte count = 2 × quantity, echoed address, value and quantity.
    pub fn decode(request: &Request, pdu: &[u8]) -> Result<Reply, PduError> {
        let &function = pdu.first().ok_or(PduError::Empty)?;
        let expected_function = request.function().code();
        if function == expected_function | 0x80 {
            check_len(function, pdu, 2)?;
            return Ok(Reply::Exception(ExceptionCode::from_code(pdu[1])));
        }
        if function != expected_function {
            return Err(PduError::FunctionMismatch { expected: expected_function, actual: function });
        }
        match request {
            Request::ReadHoldingRegisters { quantity, .. } | Request::ReadInputRegisters { quantity, .. } => {
                if pdu.len() < 2 {
                    return Err(PduError::Length { function, expected: request.response_pdu_len(), actual: pdu.len() });
                }
                let byte_count = usize::from(pdu[1]);
                let expected = 2 * usize::from(*quantity);
                if byte_count != expected {
                    return Err(PduError::ByteCount { expected, actual: byte_count });
                }
                check_len(function, pdu, 2 + byte_count)?;
                let values: Vec<u16> = pdu[2..].chunks_exact(2).map(|w| u16::from_be_bytes([w[0], w[1]])).collect();
                Ok(Reply::Normal(if request.function() == FunctionCode::ReadHoldingRegisters {
                    Response::ReadHoldingRegisters(values)
                } else {
                    Response::ReadInputRegisters(values)
                }))
            }
            Request::WriteSingleRegister { address, value } => {
                check_len(function, pdu, 5)?;
                echo("address", *address, be16(pdu, 1))?;
                echo("value", *value, be16(pdu, 3))?;
                Ok(Reply::Normal(Response::WriteSingleRegister { address: *address, value: *value }))
            }
            Request::WriteMultipleRegisters { address, values } => {
                check_len(function, pdu, 5)?;
                let quantity = values.len() as u16;
                echo("address", *address, be16(pdu, 1))?;
                echo("quantity", quantity, be16(pdu, 3))?;
                Ok(Reply::Normal(Response::WriteMultipleRegisters { address: *address, quantity }))
            }
        }
    }
}

fn echo(field: &'static str, expected: u16, actual: u16) -> Result<(), PduError> {
    if expected == actual { Ok(()) } else { Err(PduError::EchoMismatch { field, expected, actual }) }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    // Examples of the Modbus Application Protocol Specification V1.1b3 (PDU only, no address/CRC).

    /// §6.3 Read Holding Registers, request: read registers 108–110.
    const SPEC_FC03_REQUEST: &[u8] = &[
        0x03, // function code
        0x00, 0x6B, // starting address 107 (register 108, 1-based)
        0x00, 0x03, // quantity 3
    ];
    /// §6.3 response: registers 108–110 hold 555, 0, 100.
    const SPEC_FC03_RESPONSE: &[u8] = &[
        0x03, // function code
        0x06, // byte count = 2 × 3
        0x02, 0x2B, // register 108 = 555
        0x00, 0x00, // register 109 = 0
        0x00, 0x64, // register 110 = 100
    ];
    /// §6.4 Read Input Registers, request: read register 9.
    const SPEC_FC04_REQUEST: &[u8] = &[
        0x04, // function code
        0x00, 0x08, // starting address 8 (register 9)
        0x00, 0x01, // quantity 1
    ];
    /// §6.4 response: register 9 holds 10.
    const SPEC_FC04_RESPONSE: &[u8] = &[
        0x04, // function code
        0x02, // byte count
        0x00, 0x0A, // register 9 = 10
    ];
    /// §6.6 Write Single Register, request: register 2 ← 3; the normal response echoes it.
    const SPEC_FC06_REQUEST: &[u8] = &[
        0x06, // function code
        0x00, 0x01, // register address 1 (register 2)
        0x00, 0x03, // value 3
    ];
    /// §6.12 Write Multiple Registers, request: registers 2–3 ← 0x000A, 0x0102.
    const SPEC_FC16_REQUEST: &[u8] = &[
        0x10, // function code
        0x00, 0x01, // starting address 1
        0x00, 0x02, // quantity 2
        0x04, // byte count
        0x00, 0x0A, // register 2
        0x01, 0x02, // register 3
    ];
    /// §6.12 response: echo of address and quantity.
    const SPEC_FC16_RESPONSE: &[u8] = &[
        0x10, // function code
        0x00, 0x01, // starting address
        0x00, 0x02, // quantity
    ];
    /// §7 example: exception 02 to a Read Input Registers... the spec's example is FC 01; same shape.
    const EXCEPTION_FC04_ADDRESS: &[u8] = &[
        0x84, // function code 04 | 0x80
        0x02, // illegal data address
    ];

    fn encoded_request(request: &Request) -> Vec<u8> {
        let mut out = Vec::new();
        request.encode(&mut out);
        out
    }

    fn encoded_response(response: &Response) -> Vec<u8> {
        let mut out = Vec::new();
        response.encode(&mut out);
        out
    }

    #[test]
    fn spec_examples_encode_and_decode_fc03() {
        let request = Request::ReadHoldingRegisters { address: 107, quantity: 3 };
        assert_eq!(encoded_request(&request), SPEC_FC03_REQUEST);
        assert_eq!(Request::decode(SPEC_FC03_REQUEST), Ok(request.clone()));
        let response = Response::ReadHoldingRegisters(vec![555, 0, 100]);
        assert_eq!(encoded_response(&response), SPEC_FC03_RESPONSE);
        assert_eq!(Reply::decode(&request, SPEC_FC03_RESPONSE), Ok(Reply::Normal(response)));
        assert_eq!(request.response_pdu_len(), SPEC_FC03_RESPONSE.len());
    }

    #[test]
    fn spec_examples_encode_and_decode_fc04() {
        let request = Request::ReadInputRegisters { address: 8, quantity: 1 };
        assert_eq!(encoded_request(&request), SPEC_FC04_REQUEST);
        assert_eq!(Request::decode(SPEC_FC04_REQUEST), Ok(request.clone()));
        let response = Response::ReadInputRegisters(vec![10]);
        assert_eq!(encoded_response(&response), SPEC_FC04_RESPONSE);
        assert_eq!(Reply::decode(&request, SPEC_FC04_RESPONSE), Ok(Reply::Normal(response)));
    }

    #[test]
    fn spec_examples_encode_and_decode_fc06_echo() {
        let request = Request::WriteSingleRegister { address: 1, value: 3 };
        assert_eq!(encoded_request(&request), SPEC_FC06_REQUEST);
        assert_eq!(Request::decode(SPEC_FC06_REQUEST), Ok(request.clone()));
        let response = Response::WriteSingleRegister { address: 1, value: 3 };
        assert_eq!(encoded_response(&response), SPEC_FC06_REQUEST, "FC 06 response echoes the request");
        assert_eq!(Reply::decode(&request, SPEC_FC06_REQUEST), Ok(Reply::Normal(response)));
    }

    #[test]
    fn spec_examples_encode_and_decode_fc16() {
        let request = Request::WriteMultipleRegisters { address: 1, values: vec![0x000A, 0x0102] };
        assert_eq!(encoded_request(&request), SPEC_FC16_REQUEST);
        assert_eq!(Request::decode(SPEC_FC16_REQUEST), Ok(request.clone()));
        let response = Response::WriteMultipleRegisters { address: 1, quantity: 2 };
        assert_eq!(encoded_response(&response), SPEC_FC16_RESPONSE);
        assert_eq!(Reply::decode(&request, SPEC_FC16_RESPONSE), Ok(Reply::Normal(response)));
    }

    #[test]
    fn exception_response_decodes_to_device_exception() {
        let request = Request::ReadInputRegisters { address: 500, quantity: 2 };
        assert_eq!(
            Reply::decode(&request, EXCEPTION_FC04_ADDRESS),
            Ok(Reply::Exception(ExceptionCode::IllegalDataAddress))
        );
        let mut out = Vec::new();
        Exception { function: 0x04, code: ExceptionCode::IllegalDataAddress }.encode(&mut out);
        assert_eq!(out, EXCEPTION_FC04_ADDRESS);
        // An exception for another function does not answer this request.
        assert_eq!(
            Reply::decode(&request, &[0x83, 0x02]),
            Err(PduError::FunctionMismatch { expected: 0x04, actual: 0x83 })
        );
        // An exception with a trailing byte is malformed.
        assert!(matches!(Reply::decode(&request, &[0x84, 0x02, 0x00]), Err(PduError::Length { .. })));
    }

    #[test]
    fn short_response_with_fewer_registers_than_asked_is_refused() {
        let request = Request::ReadHoldingRegisters { address: 0, quantity: 2 };
        let one_register = [0x03, 0x02, 0x12, 0x34];
        assert_eq!(Reply::decode(&request, &one_register), Err(PduError::ByteCount { expected: 4, actual: 2 }));
        // Byte count right but data cut short.
        let truncated = [0x03, 0x04, 0x12, 0x34];
        assert_eq!(Reply::decode(&request, &truncated), Err(PduError::Length { function: 3, expected: 6, actual: 4 }));
    }

    #[test]
    fn write_echo_mismatch_is_refused_naming_the_field() {
        let request = Request::WriteSingleRegister { address: 1, value: 3 };
        assert_eq!(
            Reply::decode(&request, &[0x06, 0x00, 0x01, 0x00, 0x04]),
            Err(PduError::EchoMismatch { field: "value", expected: 3, actual: 4 })
        );
        let request = Request::WriteMultipleRegisters { address: 1, values: vec![1, 2] };
        assert_eq!(
            Reply::decode(&request, &[0x10, 0x00, 0x02, 0x00, 0x02]),
            Err(PduError::EchoMismatch { field: "address", expected: 1, actual: 2 })
        );
        assert_eq!(
            Reply::decode(&request, &[0x10, 0x00, 0x01, 0x00, 0x03]),
            Err(PduError::EchoMismatch { field: "quantity", expected: 2, actual: 3 })
        );
    }

    #[test]
    fn request_decoder_enforces_spec_limits() {
        // quantity 0 and 126 are outside 1..=125 (V1.1b3 §6.3).
        assert!(matches!(Request::decode(&[0x03, 0, 0, 0, 0]), Err(PduError::Quantity { quantity: 0, .. })));
        assert!(matches!(Request::decode(&[0x04, 0, 0, 0, 126]), Err(PduError::Quantity { max: 125, .. })));
        assert!(matches!(Request::decode(&[0x03, 0xFF, 0xFF, 0, 2]), Err(PduError::AddressOverflow { .. })));
        // FC 16 with a byte count that is not 2 × quantity.
        assert_eq!(
            Request::decode(&[0x10, 0, 1, 0, 2, 3, 0, 1, 2]),
            Err(PduError::ByteCount { expected: 4, actual: 3 })
        );
        // FC 16 quantity 124 is outside 1..=123 (V1.1b3 §6.12).
        assert!(matches!(Request::decode(&[0x10, 0, 0, 0, 124, 248]), Err(PduError::Quantity { max: 123, .. })));
        assert_eq!(Request::decode(&[0x2B]), Err(PduError::UnsupportedFunction(0x2B)));
        assert_eq!(Request::decode(&[]), Err(PduError::Empty));
        assert!(matches!(Request::decode(&[0x06, 0, 1, 0]), Err(PduError::Length { expected: 5, actual: 4, .. })));
    }

    #[test]
    fn validate_refuses_what_a_device_would_refuse() {
        assert!(Request::ReadHoldingRegisters { address: 0, quantity: 125 }.validate().is_ok());
        assert!(Request::ReadHoldingRegisters { address: 0, quantity: 126 }.validate().is_err());
        assert!(Request::WriteMultipleRegisters { address: 0, values: vec![] }.validate().is_err());
        assert!(Request::WriteMultipleRegisters { address: 65535, values: vec![1, 2] }.validate().is_err());
    }

    #[test]
    fn exception_codes_round_trip() {
        for code in 0u8..=255 {
            assert_eq!(ExceptionCode::from_code(code).code(), code);
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(5000))]
        /// encode ∘ decode is the identity on every valid request.
        #[test]
        fn requests_round_trip(request in arb_request()) {
            let pdu = encoded_request(&request);
            proptest::prop_assert_eq!(Request::decode(&pdu), Ok(request));
        }

        /// Decoding arbitrary bytes never panics, in either role.
        #[test]
        fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(proptest::num::u8::ANY, 0..260), request in arb_request()) {
            let _ = Request::decode(&bytes);
            let _ = Reply::decode(&request, &bytes);
        }
    }

    /// Strategy for valid requests of every implemented function.
    pub(crate) fn arb_request() -> impl proptest::strategy::Strategy<Value = Request> {
        use proptest::prelude::*;
        prop_oneof![
            (0u16..=65535, 1u16..=125).prop_filter_map("in range", |(a, q)| {
                (u32::from(a) + u32::from(q) <= 0x10000)
                    .then_some(Request::ReadHoldingRegisters { address: a, quantity: q })
            }),
            (0u16..=65535, 1u16..=125).prop_filter_map("in range", |(a, q)| {
                (u32::from(a) + u32::from(q) <= 0x10000)
                    .then_some(Request::ReadInputRegisters { address: a, quantity: q })
            }),
            (any::<u16>(), any::<u16>()).prop_map(|(address, value)| Request::WriteSingleRegister { address, value }),
            (0u16..=65000, proptest::collection::vec(any::<u16>(), 1..=123))
                .prop_map(|(address, values)| Request::WriteMultipleRegisters { address, values }),
        ]
    }
}
