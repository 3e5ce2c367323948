//! The one seam for bytes: a bus task talks to a [`Link`] it got from a [`Connector`], so a serial port,
//! a pty, a TCP socket and a scripted test transport all drive the same polling code.

use std::future::Future;
use std::io::{self, Read, Write};
use std::pin::Pin;
use std::task::{Context, Poll};
use std::time::{Duration, Instant};

use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};

use crate::config::{Parity, SerialLine};
use crate::store::EventKind;

/// A connected byte stream to one or more devices.
pub trait Link: AsyncRead + AsyncWrite + Unpin + Send {
    /// Drops whatever the OS has buffered for reading (a late reply must never answer the next request).
    fn clear_input(&mut self) -> io::Result<()>;

    /// The exchange's reply deadline, given before its first read (a link that blocks uses it).
    fn reply_deadline(&mut self, _deadline: Instant) {}
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

/// A Modbus TCP link written and read with blocking calls, for a bus on a thread of its own: a request
/// then costs a `send` and a `recv` (the kernel keeps the deadline, `SO_RCVTIMEO`), with no readiness
/// wait in between (tokio's reactor adds an `epoll_wait` and a wake-up per request). Only for a bus
/// thread: a read blocks that thread until bytes come or the deadline passes.
///
/// A read that reaches the deadline returns `Pending`: every read of an exchange runs inside its
/// `tokio::time::timeout_at`, whose timer (due by then) ends it as a timeout.
#[derive(Debug)]
pub struct BlockingTcp {
    stream: std::net::TcpStream,
    /// `SO_RCVTIMEO` as set now.
    read_timeout: Duration,
    /// The full reply timeout (what `SO_RCVTIMEO` is at the first read of an exchange).
    timeout: Duration,
    deadline: Option<Instant>,
    /// Whether this exchange has read already (a later read gets only what is left of the deadline).
    read_once: bool,
}

impl BlockingTcp {
    fn set_read_timeout(&mut self, timeout: Duration) -> io::Result<()> {
        let timeout = timeout.max(Duration::from_millis(1));
        if timeout != self.read_timeout {
            self.stream.set_read_timeout(Some(timeout))?;
            self.read_timeout = timeout;
        }
        Ok(())
    }
}

impl AsyncRead for BlockingTcp {
    fn poll_read(self: Pin<&mut Self>, _cx: &mut Context<'_>, buf: &mut ReadBuf<'_>) -> Poll<io::Result<()>> {
        let this = self.get_mut();
        // The first read of an exchange starts with the whole timeout left (the request was just sent);
        // a later one gets what is left of the deadline (a reply in pieces).
        let wait = match (this.read_once, this.deadline) {
            (true, Some(deadline)) => deadline.saturating_duration_since(Instant::now()),
            _ => this.timeout,
        };
        this.read_once = true;
        if wait.is_zero() {
            return Poll::Pending;
        }
        if let Err(e) = this.set_read_timeout(wait) {
            return Poll::Ready(Err(e));
        }
        loop {
            match this.stream.read(buf.initialize_unfilled()) {
                Ok(n) => {
                    buf.advance(n);
                    return Poll::Ready(Ok(()));
                }
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                // The deadline passed: the exchange's timer, due now, ends it as a timeout.
                Err(e) if matches!(e.kind(), io::ErrorKind::WouldBlock | io::ErrorKind::TimedOut) => {
                    return Poll::Pending;
                }
                Err(e) => return Poll::Ready(Err(e)),
            }
        }
    }
}

impl AsyncWrite for BlockingTcp {
    fn poll_write(self: Pin<&mut Self>, _cx: &mut Context<'_>, buf: &[u8]) -> Poll<io::Result<usize>> {
        Poll::Ready(self.get_mut().stream.write(buf))
    }

    fn poll_flush(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(Ok(()))
    }

    fn poll_shutdown(self: Pin<&mut Self>, _cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Poll::Ready(self.get_mut().stream.shutdown(std::net::Shutdown::Write))
    }
}

impl Link for BlockingTcp {
    /// Nothing to drop: over TCP every reply carries its request's transaction id (MODBUS Messaging on
    /// TCP/IP Implementation Guide V1.0b, MBAP header), so a late reply is told apart and skipped as a
    /// stray frame (counted) instead of being drained unseen.
    fn clear_input(&mut self) -> io::Result<()> {
        Ok(())
    }

    fn reply_deadline(&mut self, deadline: Instant) {
        self.deadline = Some(deadline);
        self.read_once = false;
    }
}

/// Connects a [`BlockingTcp`] link to a Modbus TCP device or gateway (on the bus's own thread).
#[derive(Clone, Debug)]
pub struct BlockingTcpConnector {
    /// host:port.
    pub address: String,
    /// Connect deadline, and the reply timeout.
    pub timeout: Duration,
}

impl Connector for BlockingTcpConnector {
    type Link = BlockingTcp;

    fn describe(&self) -> String {
        format!("tcp {}", self.address)
    }

    async fn connect(&mut self) -> io::Result<Self::Link> {
        use std::net::ToSocketAddrs;
        let mut last = io::Error::new(io::ErrorKind::NotFound, format!("{}: no address", self.address));
        for addr in self.address.to_socket_addrs()? {
            match std::net::TcpStream::connect_timeout(&addr, self.timeout.max(Duration::from_secs(1))) {
                Ok(stream) => {
                    stream.set_nodelay(true)?;
                    stream.set_read_timeout(Some(self.timeout))?;
                    stream.set_write_timeout(Some(self.timeout))?;
                    return Ok(BlockingTcp {
                        stream,
                        read_timeout: self.timeout,
                        timeout: self.timeout,
                        deadline: None,
                        read_once: false,
                    });
                }
                Err(e) => last = e,
            }
        }
        Err(last)
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

#[cfg(test)]
mod tests {
    use super::*;
    use std::net::TcpListener;
    use tokio::io::{AsyncReadExt, AsyncWriteExt};

    async fn connected(timeout: Duration) -> (BlockingTcp, std::net::TcpStream) {
        let listener = TcpListener::bind("127.0.0.1:0").unwrap();
        let address = listener.local_addr().unwrap().to_string();
        let mut connector = BlockingTcpConnector { address, timeout };
        let link = connector.connect().await.unwrap();
        let (peer, _) = listener.accept().unwrap();
        (link, peer)
    }

    #[tokio::test(flavor = "current_thread")]
    async fn a_silent_device_ends_the_read_at_the_exchange_s_deadline_as_a_timeout_not_a_broken_link() {
        let timeout = Duration::from_millis(150);
        let (mut link, _peer) = connected(timeout).await;
        link.write_all(&[0, 1, 0, 0, 0, 6, 1, 4, 0, 0, 0, 5]).await.unwrap();
        let started = tokio::time::Instant::now();
        let deadline = started + timeout;
        link.reply_deadline(deadline.into_std());
        let mut buf = [0u8; 64];
        let outcome = tokio::time::timeout_at(deadline, link.read(&mut buf)).await;
        assert!(outcome.is_err(), "the deadline ends it: {outcome:?}");
        let waited = started.elapsed();
        assert!(waited >= timeout && waited < timeout + Duration::from_millis(100), "{waited:?}");
    }

    #[tokio::test(flavor = "current_thread")]
    async fn a_reply_in_pieces_is_read_piece_by_piece_within_one_deadline_and_a_closed_peer_reads_as_end() {
        let timeout = Duration::from_millis(500);
        let (mut link, mut peer) = connected(timeout).await;
        let writer = std::thread::spawn(move || {
            peer.write_all(&[0, 1, 0]).unwrap();
            std::thread::sleep(Duration::from_millis(60));
            peer.write_all(&[0, 0, 5, 1]).unwrap();
            std::thread::sleep(Duration::from_millis(60));
            drop(peer);
        });
        let deadline = tokio::time::Instant::now() + timeout;
        link.reply_deadline(deadline.into_std());
        let mut got = Vec::new();
        let mut buf = [0u8; 64];
        loop {
            let n = tokio::time::timeout_at(deadline, link.read(&mut buf)).await.unwrap().unwrap();
            if n == 0 {
                break;
            }
            got.extend_from_slice(&buf[..n]);
        }
        writer.join().unwrap();
        assert_eq!(got, [0, 1, 0, 0, 0, 5, 1]);
        // A late read after the deadline was set again gets what is left of it, never the full timeout.
        assert!(link.read_timeout <= timeout, "{:?}", link.read_timeout);
    }

    #[tokio::test(flavor = "current_thread")]
    async fn nobody_listening_is_an_error_at_connect() {
        let port = TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
        let mut connector =
            BlockingTcpConnector { address: format!("127.0.0.1:{port}"), timeout: Duration::from_secs(1) };
        assert!(connector.connect().await.is_err());
    }
}
