//! The HTTP server loop: HTTP/1.1 over each accepted connection, with a header timeout that also ends idle
//! keep-alive connections, and a cap on open connections that keeps the dashboard reachable under a flood.
//!
//! At the cap a new connection takes the place of the open one that has been quiet longest (nothing written
//! to it for at least [`QUIET`]: an idle keep-alive connection, or one still trickling its headers), which is
//! closed; if every open connection is busy the new one gets a whole `503` with `Retry-After` and is closed.
//! So a few hundred idle or half-sent connections cannot lock out a technician's browser, and the file
//! descriptors left keep the database and the serial lines working. Accept errors (the process out of file
//! descriptors, for one) pause the loop briefly instead of spinning.

use std::collections::HashMap;
use std::io;
use std::pin::Pin;
use std::sync::atomic::{AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, LazyLock, Mutex};
use std::task::{Context, Poll};
use std::time::{Duration, Instant};

use axum::Router;
use hyper_util::rt::{TokioIo, TokioTimer};
use hyper_util::service::TowerToHyperService;
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::oneshot;

/// A connection with nothing written to it for this long may give its place to a new one at the cap.
pub(crate) const QUIET: Duration = Duration::from_secs(1);

/// Limits of the server.
#[derive(Clone, Copy, Debug)]
pub struct ServeLimits {
    /// Open connections at most; past it the quietest gives way, or the new one gets 503.
    pub max_connections: usize,
    /// A request's headers must arrive within this, and an idle keep-alive connection is closed after it.
    pub header_timeout: Duration,
}

impl Default for ServeLimits {
    /// 512 connections (a lab's browsers and scripts need tens; the unit file's `LimitNOFILE` leaves room
    /// for them, the database and the serial lines), 10 s for headers and idle keep-alive.
    fn default() -> Self {
        ServeLimits { max_connections: 512, header_timeout: Duration::from_secs(10) }
    }
}

/// Connections open now and how many were closed to make room, for `/metrics`.
#[derive(Debug, Default)]
pub struct ConnectionCount {
    open: AtomicUsize,
    evicted: AtomicU64,
    refused: AtomicU64,
}

impl ConnectionCount {
    /// How many are open.
    pub fn get(&self) -> usize {
        self.open.load(Ordering::Relaxed)
    }

    /// Quiet connections closed to make room for new ones, since start.
    pub fn evicted(&self) -> u64 {
        self.evicted.load(Ordering::Relaxed)
    }

    /// Connections answered 503 because every open one was busy, since start.
    pub fn refused(&self) -> u64 {
        self.refused.load(Ordering::Relaxed)
    }
}

/// Milliseconds since the server's first use, the clock of [`Tracked`].
fn now_ms() -> u64 {
    static START: LazyLock<Instant> = LazyLock::new(Instant::now);
    START.elapsed().as_millis() as u64
}

/// A TCP stream that records when it was last written to.
struct Tracked {
    stream: TcpStream,
    last_write: Arc<AtomicU64>,
}

impl AsyncRead for Tracked {
    fn poll_read(mut self: Pin<&mut Self>, cx: &mut Context<'_>, buf: &mut ReadBuf<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stream).poll_read(cx, buf)
    }
}

impl AsyncWrite for Tracked {
    fn poll_write(mut self: Pin<&mut Self>, cx: &mut Context<'_>, buf: &[u8]) -> Poll<io::Result<usize>> {
        let result = Pin::new(&mut self.stream).poll_write(cx, buf);
        if matches!(result, Poll::Ready(Ok(n)) if n > 0) {
            self.last_write.store(now_ms(), Ordering::Relaxed);
        }
        result
    }

    fn poll_write_vectored(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        bufs: &[io::IoSlice<'_>],
    ) -> Poll<io::Result<usize>> {
        let result = Pin::new(&mut self.stream).poll_write_vectored(cx, bufs);
        if matches!(result, Poll::Ready(Ok(n)) if n > 0) {
            self.last_write.store(now_ms(), Ordering::Relaxed);
        }
        result
    }

    fn is_write_vectored(&self) -> bool {
        self.stream.is_write_vectored()
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stream).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stream).poll_shutdown(cx)
    }
}

/// An open connection as the registry sees it.
struct Open {
    last_write: Arc<AtomicU64>,
    close: oneshot::Sender<()>,
}

/// The open connections, so that the quietest can be closed at the cap.
#[derive(Default)]
struct Registry {
    next_id: u64,
    open: HashMap<u64, Open>,
}

impl Registry {
    /// Closes the connection quiet longest if it has been quiet at least [`QUIET`] at `now`; whether one was.
    fn evict_quietest(&mut self, now: u64) -> bool {
        let quiet_ms = QUIET.as_millis() as u64;
        let quietest = self
            .open
            .iter()
            .map(|(id, open)| (*id, open.last_write.load(Ordering::Relaxed)))
            .filter(|(_, last)| now.saturating_sub(*last) >= quiet_ms)
            .min_by_key(|(_, last)| *last);
        match quietest.and_then(|(id, _)| self.open.remove(&id)) {
            Some(open) => {
                let _ = open.close.send(());
                true
            }
            None => false,
        }
    }
}

/// What a connection over the cap is told before it is closed: a whole 503 with the API's error shape.
fn busy() -> Vec<u8> {
    let body = r#"{"error":"too many open connections to this daemon; try again in a few seconds","field":null,"allowed":null}"#;
    format!(
        "HTTP/1.1 503 Service Unavailable\r\ncontent-type: application/json\r\nretry-after: 5\r\n\
         connection: close\r\ncontent-length: {}\r\n\r\n{body}",
        body.len()
    )
    .into_bytes()
}

/// Serves `app` on `listener` until the task is aborted.
pub async fn serve(listener: TcpListener, app: Router, limits: ServeLimits, count: Arc<ConnectionCount>) {
    let registry = Arc::new(Mutex::new(Registry::default()));
    loop {
        let stream = match listener.accept().await {
            Ok((stream, _)) => stream,
            Err(error) => {
                tracing::warn!("http: accept failed ({error}); pausing 100 ms");
                tokio::time::sleep(Duration::from_millis(100)).await;
                continue;
            }
        };
        let now = now_ms();
        let admitted = {
            let mut registry = registry.lock().expect("the connection registry");
            let full = registry.open.len() >= limits.max_connections;
            if full && !registry.evict_quietest(now) {
                None
            } else {
                if full {
                    count.evicted.fetch_add(1, Ordering::Relaxed);
                }
                let last_write = Arc::new(AtomicU64::new(now));
                let (close, closed) = oneshot::channel();
                let id = registry.next_id;
                registry.next_id += 1;
                registry.open.insert(id, Open { last_write: last_write.clone(), close });
                Some((id, last_write, closed))
            }
        };
        let Some((id, last_write, closed)) = admitted else {
            count.refused.fetch_add(1, Ordering::Relaxed);
            tokio::spawn(async move {
                let mut stream = stream;
                let _ = tokio::time::timeout(Duration::from_secs(2), stream.write_all(&busy())).await;
                let _ = stream.shutdown().await;
            });
            continue;
        };
        let service = TowerToHyperService::new(app.clone());
        let count = count.clone();
        let registry = registry.clone();
        count.open.fetch_add(1, Ordering::Relaxed);
        tokio::spawn(async move {
            let mut builder = hyper::server::conn::http1::Builder::new();
            builder.timer(TokioTimer::new()).header_read_timeout(limits.header_timeout).keep_alive(true);
            let io = TokioIo::new(Tracked { stream, last_write });
            let connection = builder.serve_connection(io, service);
            tokio::select! {
                result = connection => {
                    if let Err(error) = result {
                        tracing::debug!("http connection: {error}");
                    }
                }
                _ = closed => tracing::debug!("http connection closed to make room for a new one"),
            }
            registry.lock().expect("the connection registry").open.remove(&id);
            count.open.fetch_sub(1, Ordering::Relaxed);
        });
    }
}

#[cfg(test)]
mod unit {
    use super::*;

    #[test]
    fn the_busy_answer_is_a_whole_http_response() {
        let bytes = busy();
        let text = std::str::from_utf8(&bytes).unwrap();
        let (head, body) = text.split_once("\r\n\r\n").unwrap();
        let length: usize =
            head.lines().find_map(|l| l.strip_prefix("content-length: ")).and_then(|v| v.parse().ok()).unwrap();
        assert_eq!(body.len(), length, "{body}");
        assert!(serde_json::from_str::<serde_json::Value>(body).is_ok());
    }

    fn registry_with(last_writes: &[u64]) -> (Registry, Vec<oneshot::Receiver<()>>) {
        let mut registry = Registry::default();
        let mut receivers = Vec::new();
        for &last in last_writes {
            let (close, closed) = oneshot::channel();
            let id = registry.next_id;
            registry.next_id += 1;
            registry.open.insert(id, Open { last_write: Arc::new(AtomicU64::new(last)), close });
            receivers.push(closed);
        }
        (registry, receivers)
    }

    #[test]
    fn at_the_cap_the_connection_quiet_longest_is_closed() {
        let (mut registry, mut closed) = registry_with(&[5_000, 1_000, 3_000]);
        assert!(registry.evict_quietest(6_000));
        assert!(closed[1].try_recv().is_ok(), "the one written to at 1 000 ms goes");
        assert!(closed[0].try_recv().is_err() && closed[2].try_recv().is_err());
        assert_eq!(registry.open.len(), 2);
    }

    #[test]
    fn a_connection_written_to_within_the_quiet_time_is_kept() {
        let (mut registry, mut closed) = registry_with(&[9_500, 9_900]);
        assert!(!registry.evict_quietest(10_000), "both wrote within the last second");
        assert_eq!(registry.open.len(), 2);
        assert!(closed.iter_mut().all(|c| c.try_recv().is_err()));
    }
}
