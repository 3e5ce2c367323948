//! The one seam for bytes: a bus task talks to a [`Link`] it got from a [`Connector`], so a serial port,
//! a pty, a TCP socket and a scripted test transport all drive the same polling code.

use std::future::Future;
use std::io;
use std::time::Duration;

use tokio::io::{AsyncRead, AsyncWrite};
use tokio::net::TcpStream;

use crate::config::{Parity, SerialLine};
use crate::store::EventKind;

/// A connected byte stream to one or more devices.
pub trait Link: AsyncRead + AsyncWrite + Unpin + Send {
    /// Drops whatever the OS has buffered for reading (a late reply must never answer the next request).
    fn clear_input(&mut self) -> io::Result<()>;
}

/// Opens a [`Link`]; called again after the link fails.
pub trait Connector: Send + 'static {
    /// The link it opens.
    type Link: Link + 'static;
    /// What it connects to, for events.
    fn describe(&self) -> String;
    /// Opens the link.
    fn connect(&mut self) -> impl Future<Output = io::Result<Self::Link>> + Send;
}

impl Link for tokio_serial::SerialStream {
    fn clear_input(&mut self) -> io::Result<()> {
        use tokio_serial::SerialPort;
        self.clear(tokio_serial::ClearBuffer::Input).map_err(io::Error::other)
    }
}

impl Link for TcpStream {
    fn clear_input(&mut self) -> io::Result<()> {
        let mut buf = [0u8; 512];
        loop {
            match self.try_read(&mut buf) {
                Ok(0) => return Err(io::ErrorKind::UnexpectedEof.into()),
                Ok(_) => continue,
                Err(e) if e.kind() == io::ErrorKind::WouldBlock => return Ok(()),
                Err(e) => return Err(e),
            }
        }
    }
}

/// Opens a serial device (or pty) with the line's settings, 8 data bits, exclusive.
#[derive(Clone, Debug)]
pub struct SerialConnector {
    /// Device path.
    pub device: String,
    /// Baud rate.
    pub baud: u32,
    /// Parity.
    pub parity: Parity,
    /// Stop bits.
    pub stop_bits: u8,
}

impl SerialConnector {
    /// For an RTU line.
    pub fn for_line(line: &SerialLine) -> Self {
        SerialConnector { device: line.device.clone(), baud: line.baud, parity: line.parity, stop_bits: line.stop_bits }
    }
}

impl Connector for SerialConnector {
    type Link = tokio_serial::SerialStream;

    fn describe(&self) -> String {
        format!("{} at {} baud", self.device, self.baud)
    }

    async fn connect(&mut self) -> io::Result<Self::Link> {
        use tokio_serial::SerialPortBuilderExt;
        let parity = match self.parity {
            Parity::None => tokio_serial::Parity::None,
            Parity::Even => tokio_serial::Parity::Even,
            Parity::Odd => tokio_serial::Parity::Odd,
        };
        let stop_bits = if self.stop_bits == 2 { tokio_serial::StopBits::Two } else { tokio_serial::StopBits::One };
        let mut port = tokio_serial::new(&self.device, self.baud)
            .data_bits(tokio_serial::DataBits::Eight)
            .parity(parity)
            .stop_bits(stop_bits)
            .flow_control(tokio_serial::FlowControl::None)
            .open_native_async()
            .map_err(io::Error::other)?;
        // Two daemons on one port would interleave requests: refuse the second.
        port.set_exclusive(true).map_err(io::Error::other)?;
        Ok(port)
    }
}

/// Connects to a Modbus TCP device or gateway.
#[derive(Clone, Debug)]
pub struct TcpConnector {
    /// host:port.
    pub address: String,
    /// Connect deadline.
    pub timeout: Duration,
}

impl Connector for TcpConnector {
    type Link = TcpStream;

    fn describe(&self) -> String {
        format!("tcp {}", self.address)
    }

    async fn connect(&mut self) -> io::Result<Self::Link> {
        let stream = tokio::time::timeout(self.timeout.max(Duration::from_secs(1)), TcpStream::connect(&self.address))
            .await
            .map_err(|_| io::Error::new(io::ErrorKind::TimedOut, "connect timed out"))??;
        stream.set_nodelay(true)?;
        Ok(stream)
    }
}

/// Opens a bus's link with doubling back-off and journals the outage: `bus-down` once when it starts (or
/// when a working link is lost), `bus-up` when the link is back. Both bus kinds use it.
#[derive(Debug, Default)]
pub struct Reconnect {
    backoff: super::backoff::Backoff,
    down_reported: bool,
}

impl Reconnect {
    /// Opens the link, waiting and retrying for as long as it takes.
    pub async fn open<C: Connector>(&mut self, bus_id: &str, connector: &mut C, sinks: &super::Sinks) -> C::Link {
        loop {
            match connector.connect().await {
                Ok(link) => {
                    self.backoff.reset();
                    self.down_reported = false;
                    sinks.event(None, EventKind::BusUp, format!("bus {bus_id}: connected to {}", connector.describe()));
                    return link;
                }
                Err(error) => {
                    if !self.down_reported {
                        let message = format!("bus {bus_id}: cannot open {}: {error}", connector.describe());
                        sinks.event(None, EventKind::BusDown, message);
                        self.down_reported = true;
                    }
                    tokio::time::sleep(self.backoff.next_wait()).await;
                }
            }
        }
    }

    /// A working link failed: journal it and wait before the next attempt.
    pub async fn lost<C: Connector>(&mut self, bus_id: &str, connector: &C, sinks: &super::Sinks, error: &io::Error) {
        let message = format!("bus {bus_id}: link to {} lost: {error}; reconnecting", connector.describe());
        sinks.event(None, EventKind::BusDown, message);
        self.down_reported = true;
        tokio::time::sleep(self.backoff.next_wait()).await;
    }
}
