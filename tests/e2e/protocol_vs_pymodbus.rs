//! oedolog-protocol's masters (RTU and TCP) against an independent server: pymodbus 3.16.1
//! (`tests/peers/server.py`), over TCP and over RTU on a socat pty pair.
//!
//! The register values are this test's inputs (sent to the server as a layout), so every expected value
//! is derived here, never copied from a run. It must not talk to the oedolog simulator — that is the
//! other direction, in `peers_pymodbus`.
//!
//! Where pymodbus answers differently from the Modbus specification it is written down beside the check:
//! - A request to a unit id the server does not serve is answered with exception 04
//!   (ServerDeviceFailure), on TCP and even on an RTU line. Modbus over Serial Line V1.02 §2.2 says
//!   an unaddressed device must not reply; for TCP, V1.1b3 §7 points at gateway codes 0A/0B. The
//!   server also logs a `KeyError` traceback for it.
//! - A write to a read-only register is refused with 02 (IllegalDataAddress); the specification has no
//!   read-only notion for holding registers, so 02 is a choice, not a deviation.

use std::io::{ErrorKind, Read, Write};
use std::net::TcpStream;
use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, bail};
use oedolog_protocol::rtu::RtuMaster;
use oedolog_protocol::tcp::TcpMaster;
use oedolog_protocol::{ExceptionCode, Reply, Request, Response, UnitId};
use oedolog_tests::{ChildGuard, pty_pair, python_peer, temp_dir};
use serde_json::json;

/// How long one request may wait for its reply. pymodbus answers in milliseconds; the margin is for a
/// loaded CI machine.
const REPLY_TIMEOUT: Duration = Duration::from_secs(5);
/// How long a blocking read waits before the loop looks at the deadline again (and, on RTU, reports
/// the silence to the codec).
const POLL_READ: Duration = Duration::from_millis(50);

const HOLDING_LEN: u16 = 10;
const INPUT_LEN: u16 = 8;
/// A holding register the server marks read-only.
const READONLY_HOLDING: u16 = 100;
/// A unit id the server does not serve.
const UNKNOWN_UNIT: u8 = 3;
const UNITS: [u8; 2] = [1, 2];

/// The registers one unit serves. Words differ between units and include 0x0000, 0x8000 and 0xFFFF so
/// sign or byte-order slips would show.
struct UnitLayout {
    holding: Vec<u16>,
    input: Vec<u16>,
}

fn layout_for(unit: u8) -> UnitLayout {
    let base = u16::from(unit) << 12;
    let mut holding: Vec<u16> = (0..HOLDING_LEN).map(|i| base | (i * 0x0101)).collect();
    holding[0] = 0x0000;
    holding[usize::from(HOLDING_LEN) - 1] = 0xFFFF;
    let mut input: Vec<u16> = (0..INPUT_LEN).map(|i| base | 0x0800 | (i * 0x0011)).collect();
    input[0] = 0x8000;
    UnitLayout { holding, input }
}

fn server_layout_json() -> String {
    let mut units = serde_json::Map::new();
    for unit in UNITS {
        let layout = layout_for(unit);
        units.insert(
            unit.to_string(),
            json!({ "holding": layout.holding, "input": layout.input, "readonly_holding_at": READONLY_HOLDING }),
        );
    }
    serde_json::Value::Object(units).to_string()
}

/// The one seam the test drives both codecs through.
trait MasterCodec {
    type Error: std::error::Error + Send + Sync + 'static;
    fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, Self::Error>;
    fn push(&mut self, bytes: &[u8]);
    fn decode(&mut self) -> Result<Option<Reply>, Self::Error>;
    /// The line has been quiet for a while (RTU: at least t3.5).
    fn line_quiet(&mut self);
}

impl MasterCodec for RtuMaster {
    type Error = oedolog_protocol::rtu::RtuError;
    fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, Self::Error> {
        RtuMaster::begin(self, unit, request)
    }
    fn push(&mut self, bytes: &[u8]) {
        RtuMaster::push(self, bytes);
    }
    fn decode(&mut self) -> Result<Option<Reply>, Self::Error> {
        RtuMaster::decode(self)
    }
    fn line_quiet(&mut self) {
        self.idle_gap();
    }
}

impl MasterCodec for TcpMaster {
    type Error = oedolog_protocol::tcp::TcpError;
    fn begin(&mut self, unit: UnitId, request: &Request) -> Result<Vec<u8>, Self::Error> {
        TcpMaster::begin(self, unit, request)
    }
    fn push(&mut self, bytes: &[u8]) {
        TcpMaster::push(self, bytes);
    }
    fn decode(&mut self) -> Result<Option<Reply>, Self::Error> {
        TcpMaster::decode(self)
    }
    fn line_quiet(&mut self) {}
}

/// A blocking byte transport (TCP stream or serial port with a read timeout) and a master codec.
struct Link<P, C> {
    port: P,
    codec: C,
}

impl<P: Read + Write, C: MasterCodec> Link<P, C> {
    /// Sends one request and returns the device's reply. A frame the codec refuses fails the test: a
    /// conforming peer should never send one.
    fn transact(&mut self, unit: u8, request: Request) -> Result<Reply> {
        // The previous exchange is over and the line has been quiet since.
        self.codec.line_quiet();
        let frame = self.codec.begin(UnitId(unit), &request).context("encode request")?;
        self.port.write_all(&frame).context("write request")?;
        self.port.flush().context("flush request")?;
        let deadline = Instant::now() + REPLY_TIMEOUT;
        let mut buffer = [0u8; 512];
        loop {
            match self.codec.decode() {
                Ok(Some(reply)) => return Ok(reply),
                Ok(None) => {}
                Err(refused) => {
                    bail!("codec refused a frame from the peer for {request:?} to unit {unit}: {refused}")
                }
            }
            if Instant::now() >= deadline {
                bail!("no reply to {request:?} from unit {unit} within {REPLY_TIMEOUT:?}");
            }
            match self.port.read(&mut buffer) {
                Ok(0) => bail!("the peer closed the connection while {request:?} to unit {unit} waited"),
                Ok(read) => self.codec.push(&buffer[..read]),
                Err(error) if matches!(error.kind(), ErrorKind::TimedOut | ErrorKind::WouldBlock) => {}
                Err(error) if error.kind() == ErrorKind::Interrupted => {}
                Err(error) => return Err(error).context("read reply"),
            }
        }
    }

    fn read_holding(&mut self, unit: u8, address: u16, quantity: u16) -> Result<Reply> {
        self.transact(unit, Request::ReadHoldingRegisters { address, quantity })
    }
}

fn expect_registers(reply: Reply, what: &str) -> Vec<u16> {
    match reply {
        Reply::Normal(Response::ReadHoldingRegisters(words) | Response::ReadInputRegisters(words)) => words,
        other => panic!("{what}: expected registers, got {other:?}"),
    }
}

fn expect_exception(reply: Reply, what: &str) -> ExceptionCode {
    match reply {
        Reply::Exception(code) => code,
        other => panic!("{what}: expected an exception, got {other:?}"),
    }
}

/// The checks both transports share: reads, FC06 and FC16 writes read back, and the exceptions.
fn exercise_pymodbus_server<P: Read + Write, C: MasterCodec>(link: &mut Link<P, C>) -> Result<()> {
    for unit in UNITS {
        let layout = layout_for(unit);
        let holding = expect_registers(link.read_holding(unit, 0, HOLDING_LEN)?, "FC03 all holding");
        assert_eq!(holding, layout.holding, "unit {unit}: FC03 0..{HOLDING_LEN}");

        let input = expect_registers(
            link.transact(unit, Request::ReadInputRegisters { address: 0, quantity: INPUT_LEN })?,
            "FC04 all input",
        );
        assert_eq!(input, layout.input, "unit {unit}: FC04 0..{INPUT_LEN}");

        // A read that starts inside the block: checks the address is applied, not just the count.
        let middle = expect_registers(link.read_holding(unit, 3, 4)?, "FC03 3..7");
        assert_eq!(middle, layout.holding[3..7], "unit {unit}: FC03 3..7");

        let mut expected = layout.holding.clone();
        let single_value = 0xBEE0 | u16::from(unit);
        let echo = link.transact(unit, Request::WriteSingleRegister { address: 2, value: single_value })?;
        assert_eq!(
            echo,
            Reply::Normal(Response::WriteSingleRegister { address: 2, value: single_value }),
            "unit {unit}: FC06 echo (V1.1b3 §6.6: the response echoes the request)"
        );
        expected[2] = single_value;

        let multiple: Vec<u16> = (0..4).map(|i| 0x5A00 | (u16::from(unit) << 4) | i).collect();
        let echo = link.transact(unit, Request::WriteMultipleRegisters { address: 5, values: multiple.clone() })?;
        assert_eq!(
            echo,
            Reply::Normal(Response::WriteMultipleRegisters { address: 5, quantity: 4 }),
            "unit {unit}: FC16 echo (V1.1b3 §6.12: address and quantity)"
        );
        expected[5..9].copy_from_slice(&multiple);

        let after = expect_registers(link.read_holding(unit, 0, HOLDING_LEN)?, "FC03 after writes");
        assert_eq!(after, expected, "unit {unit}: holding registers after FC06 and FC16");

        // V1.1b3 §7: an address outside the device's map is exception 02.
        let unmapped = expect_exception(link.read_holding(unit, 200, 1)?, "FC03 at 200");
        assert_eq!(unmapped, ExceptionCode::IllegalDataAddress, "unit {unit}: FC03 unmapped address");
        assert_eq!(unmapped.code(), 2);

        // A range that runs past the end of the block is also 02 (V1.1b3 §6.3: address + quantity).
        let past_end = expect_exception(link.read_holding(unit, HOLDING_LEN - 2, 4)?, "FC03 past end");
        assert_eq!(past_end, ExceptionCode::IllegalDataAddress, "unit {unit}: FC03 range past the end");

        // pymodbus refuses writes to a read-only register with 02 (a choice; see the module comment).
        let readonly = expect_exception(
            link.transact(unit, Request::WriteSingleRegister { address: READONLY_HOLDING, value: 1 })?,
            "FC06 to read-only",
        );
        assert_eq!(readonly, ExceptionCode::IllegalDataAddress, "unit {unit}: FC06 to a read-only register");
    }

    // Writes to one unit must not have touched the other: unit 1 is read again after unit 2's writes.
    let unit_one = expect_registers(link.read_holding(1, 0, 2)?, "unit 1 again");
    assert_eq!(unit_one, [layout_for(1).holding[0], layout_for(1).holding[1]], "unit 1 words 0..2");

    // pymodbus deviation (module comment): an unknown unit gets exception 04 instead of silence (RTU)
    // or a gateway code (TCP).
    let unknown = expect_exception(link.read_holding(UNKNOWN_UNIT, 0, 1)?, "unknown unit");
    assert_eq!(unknown, ExceptionCode::ServerDeviceFailure, "pymodbus 3.16.1 answers an unknown unit with 04");
    Ok(())
}

fn start_server(endpoint: &[&str], ready_prefix: &str) -> Result<(ChildGuard, String)> {
    let mut command: Command = python_peer("server.py");
    command.args(endpoint).arg("--layout").arg(server_layout_json());
    ChildGuard::spawn_ready("pymodbus server.py", command, ready_prefix)
}

// Peer: pymodbus 3.16.1 ModbusTcpServer (tests/peers/server.py); spec: Modbus Messaging on TCP/IP V1.0b.
#[test]
fn tcp_master_reads_and_writes_a_pymodbus_tcp_server() -> Result<()> {
    let (server, line) = start_server(&["--tcp", "127.0.0.1:0"], "listening on tcp ")?;
    let address = line["listening on tcp ".len()..].trim().to_string();
    let stream = TcpStream::connect(&address).with_context(|| format!("connect to pymodbus at {address}"))?;
    stream.set_read_timeout(Some(POLL_READ))?;
    stream.set_nodelay(true)?;
    let mut link = Link { port: stream, codec: TcpMaster::new() };
    exercise_pymodbus_server(&mut link).with_context(|| server.output_log())
}

fn open_pty_master(path: &Path) -> Result<Box<dyn serialport::SerialPort>> {
    // No parity: the pymodbus end cannot open a pty with even parity (DEVELOPERS.md, Testing).
    serialport::new(path.to_string_lossy(), 19_200)
        .parity(serialport::Parity::None)
        .timeout(POLL_READ)
        .open()
        .with_context(|| format!("open {}", path.display()))
}

// Peer: pymodbus 3.16.1 ModbusSerialServer over a socat pty pair; spec: Modbus over Serial Line V1.02.
#[test]
fn rtu_master_reads_and_writes_a_pymodbus_rtu_server_through_socat() -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let device_end = line.device_end.to_string_lossy().to_string();
    let (server, _) = start_server(&["--rtu", &device_end, "--parity", "N"], "listening on rtu ")?;
    let mut link = Link { port: open_pty_master(&line.master_end)?, codec: RtuMaster::new() };
    exercise_pymodbus_server(&mut link).with_context(|| server.output_log())
}
