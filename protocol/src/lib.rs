//! Sans-IO codecs for the bytes between oedolog and a loading frame.
//!
//! Modbus RTU and Modbus TCP framing (CRC-16/MODBUS, MBAP), the PDUs of function codes 03, 04, 06 and 16
//! with exception responses, register words → typed values → engineering units, and line-output gauge
//! parsing. Every codec takes bytes and returns "need more", a frame, or a typed error, and can be reset.
//!
//! This crate must not do I/O, spawn tasks or read a clock: timing facts (the RTU idle gap t3.5) come in
//! from the transport as explicit calls, so the daemon, the simulator and the tests drive the same code.
#![deny(missing_docs)]

pub mod crc;
pub mod gauge;
pub mod pdu;
pub mod registers;
pub mod rtu;
pub mod tcp;

pub use pdu::{Exception, ExceptionCode, FunctionCode, PduError, Reply, Request, Response, UnitId};
