//! Notifications: journal events posted as JSON to each `[[notify.webhook]]`.
//!
//! The journal is the single source: one task per webhook tails the `events` table on its own read-only
//! connection every [`NotifyPolicy::poll`] and posts each subscribed event, in journal order, retrying with
//! doubling back-off on network errors, timeouts, 408, 429 and 5xx; any other answer than 2xx is final
//! for that event and journalled once as `notify-failed`. How far each webhook has got is kept in
//! `notify_cursors` through the store's writer, so a restart resumes without repeats or a flood; a webhook
//! seen for the first time starts after the newest event. It must not write anything but its cursor and
//! `notify-failed`, must not notify about `notify-failed` (no kind of a [`NotifyEvent`] is one), and
//! acquisition never waits on it.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use http_body_util::Full;
use hyper::body::Bytes;
use hyper::header::{CONNECTION, CONTENT_TYPE, HOST, USER_AGENT};
use hyper::{Request, StatusCode};
use hyper_util::rt::TokioIo;
use tokio::task::{JoinHandle, JoinSet};

use crate::acquire::backoff::Backoff;
use crate::clock::{Clock, rfc3339};
use crate::config::{NotifyEvent, Webhook};
use crate::store::{self, Event, EventKind, Reader, StoreError, Writer, journal};

/// The header that carries the journal id of the event, the same on every retry, so a receiver can drop
/// a duplicate (one delivered but whose answer was lost).
pub const EVENT_ID_HEADER: &str = "x-oedolog-event";
/// The journal kind of a notification refused for good.
pub const FAILED_KIND: EventKind = EventKind::NotifyFailed;
/// Events read per query while catching up.
const BATCH: i64 = 200;
/// A cursor moved only past unsubscribed events is saved at most this often (a restart re-reads at most
/// this much of the journal and sends nothing twice: those events were not subscribed).
const SAVE_SKIPS_EVERY: Duration = Duration::from_secs(30);

/// How often the journal is read and how retries are spaced (real, monotonic time: never the demo's clock).
#[derive(Clone, Copy, Debug)]
pub struct NotifyPolicy {
    /// Period of the journal reads.
    pub poll: Duration,
    /// Wait before the first retry; doubled after each failure.
    pub first_retry: Duration,
    /// Longest wait between retries.
    pub max_retry: Duration,
}

impl Default for NotifyPolicy {
    fn default() -> Self {
        NotifyPolicy {
            poll: Duration::from_millis(500),
            first_retry: Duration::from_secs(1),
            max_retry: Duration::from_secs(300),
        }
    }
}

/// Starts one task per webhook, under one handle: aborting it stops them all. Reads (and for a new
/// webhook sets) each cursor before it returns, so every event committed after this call is sent.
/// Blocks briefly on the store; needs a tokio runtime.
pub fn start(
    webhooks: &[Webhook],
    store_path: &Path,
    writer: &Writer,
    clock: Arc<dyn Clock>,
    policy: NotifyPolicy,
) -> Result<JoinHandle<()>, StoreError> {
    let conn = store::reader(store_path)?;
    let mut tasks = JoinSet::new();
    for hook in webhooks {
        let cursor = first_cursor(&conn, writer, hook, clock.now_us())?;
        let task = HookTask {
            hook: hook.clone(),
            kinds: hook.events.iter().flat_map(|e| e.kinds()).collect(),
            store_path: store_path.to_path_buf(),
            writer: writer.clone(),
            clock: clock.clone(),
            policy,
            cursor,
            saved: cursor,
        };
        tasks.spawn(task.run());
    }
    Ok(tokio::spawn(async move {
        // Dropping the set (when this task is aborted) aborts every webhook task.
        while let Some(done) = tasks.join_next().await {
            if let Err(error) = done
                && error.is_panic()
            {
                tracing::error!("a webhook task panicked: {error}");
            }
        }
    }))
}

/// The persisted cursor of a webhook, or for a new one the newest event id, saved at once.
fn first_cursor(conn: &Reader, writer: &Writer, hook: &Webhook, now_us: i64) -> Result<i64, StoreError> {
    let url = hook.url.as_str().to_string();
    if let Some(id) = store::notify::cursor(conn, &url)? {
        return Ok(id);
    }
    store::notify::start_cursor(writer, url, now_us)
}

/// A subscribed journal event waiting to be posted.
#[derive(Clone, Debug)]
struct Pending {
    id: i64,
    kind: EventKind,
    body: Bytes,
}

/// What one request came to.
#[derive(Debug, PartialEq, Eq)]
enum Attempt {
    /// 2xx.
    Delivered,
    /// An answer that retrying will not change (other 4xx, 3xx: redirects are not followed).
    Refused(StatusCode),
    /// Worth another try: no connection, no answer in time, 408, 429, 5xx.
    Failed(String),
}

struct HookTask {
    hook: Webhook,
    /// The journal kinds subscribed.
    kinds: Vec<EventKind>,
    store_path: PathBuf,
    writer: Writer,
    clock: Arc<dyn Clock>,
    policy: NotifyPolicy,
    /// Every event up to this id is done with.
    cursor: i64,
    /// The cursor as saved in `notify_cursors`.
    saved: i64,
}

impl HookTask {
    async fn run(mut self) {
        let mut conn: Option<Reader> = None;
        let mut last_save = Instant::now();
        let mut ticker = tokio::time::interval(self.policy.poll);
        ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        loop {
            ticker.tick().await;
            let (pending, scanned_to) = match self.fetch(&mut conn).await {
                Ok(found) => found,
                Err(error) => {
                    // Logged once per poll; the next poll opens a fresh connection and tries again.
                    tracing::warn!(webhook = %self.hook.url.redacted(), "cannot read the journal: {error}");
                    conn = None;
                    continue;
                }
            };
            for event in pending {
                let refused = self.deliver(&event).await;
                self.cursor = event.id;
                if !self.save(refused.map(|status| (event, status))).await {
                    return;
                }
                last_save = Instant::now();
            }
            self.cursor = self.cursor.max(scanned_to);
            if self.cursor > self.saved && last_save.elapsed() >= SAVE_SKIPS_EVERY {
                if !self.save(None).await {
                    return;
                }
                last_save = Instant::now();
            }
        }
    }

    /// Subscribed events after the cursor, oldest first, and the id up to which the journal was read.
    async fn fetch(&self, conn: &mut Option<Reader>) -> Result<(Vec<Pending>, i64), String> {
        let (path, kinds, after) = (self.store_path.clone(), self.kinds.clone(), self.cursor);
        let simulated = self.clock.is_simulated();
        let taken = conn.take();
        let (back, found) = tokio::task::spawn_blocking(move || {
            let conn = match taken {
                Some(c) => c,
                None => match store::reader(&path) {
                    Ok(c) => c,
                    Err(error) => return (None, Err(error)),
                },
            };
            let found = pending_after(&conn, after, &kinds, simulated);
            (Some(conn), found)
        })
        .await
        .map_err(|e| format!("journal read task: {e}"))?;
        *conn = back;
        found.map_err(|e| e.to_string())
    }

    /// Posts one event until it is delivered (`None`) or refused for good (`Some(status)`).
    async fn deliver(&self, event: &Pending) -> Option<StatusCode> {
        let mut backoff = Backoff::new(self.policy.first_retry, self.policy.max_retry);
        let mut attempt = 1u32;
        loop {
            match post(&self.hook, event).await {
                Attempt::Delivered => return None,
                Attempt::Refused(status) => return Some(status),
                Attempt::Failed(why) => {
                    let wait = backoff.next_wait();
                    // Never the full URL: its query may hold the receiver's secret.
                    tracing::warn!(
                        webhook = %self.hook.url.redacted(),
                        event_id = event.id,
                        attempt,
                        "notification not delivered ({why}); next try in {} s",
                        wait.as_secs_f64()
                    );
                    tokio::time::sleep(wait).await;
                    attempt = attempt.saturating_add(1);
                }
            }
        }
    }

    /// Saves the cursor, with the `notify-failed` entry of a refused event in the same transaction (so it
    /// is journalled at most once). False when the writer has stopped: the daemon is stopping.
    async fn save(&mut self, refused: Option<(Pending, StatusCode)>) -> bool {
        let url = self.hook.url.as_str().to_string();
        let shown = self.hook.url.redacted();
        let (cursor, now_us) = (self.cursor, self.clock.now_us());
        let writer = self.writer.clone();
        let failed = refused.map(|(event, status)| {
            let message = format!(
                "webhook {shown} refused event {} ({}) with HTTP {status}; it is not sent again",
                event.id, event.kind
            );
            let data = serde_json::json!({
                "webhook": shown,
                "event_id": event.id,
                "kind": event.kind,
                "status": status.as_u16(),
            });
            tracing::error!("{message}");
            Event { at_us: now_us, frame_key: None, kind: FAILED_KIND, message, actor: None, data: Some(data) }
        });
        let job = move || store::notify::save_cursor(&writer, url, cursor, now_us, failed);
        match tokio::task::spawn_blocking(job).await {
            Ok(Ok(())) => {
                self.saved = cursor;
                true
            }
            Ok(Err(StoreError::WriterGone)) => false,
            Ok(Err(error)) => {
                // The cursor stays moved in memory: nothing is sent twice while the daemon runs.
                tracing::error!(webhook = %self.hook.url.redacted(), "notification cursor not saved: {error}");
                true
            }
            Err(error) => {
                tracing::error!("notification cursor task: {error}");
                true
            }
        }
    }
}

/// The subscribed events with `id > after` (at most [`BATCH`]) and how far the journal was read: to the
/// newest event, or to the last one returned when the batch is full.
fn pending_after(
    conn: &Reader,
    after: i64,
    kinds: &[EventKind],
    simulated: bool,
) -> Result<(Vec<Pending>, i64), StoreError> {
    let newest = journal::newest_id(conn)?;
    if newest <= after {
        return Ok((Vec::new(), after));
    }
    let pending: Vec<Pending> = journal::of_kinds(conn, after, newest, kinds, BATCH)?
        .into_iter()
        .map(|e| {
            let body = serde_json::json!({
                "event": NotifyEvent::of_kind(e.kind).map(NotifyEvent::name),
                "kind": e.kind,
                "frame": e.frame,
                "frame_name": e.frame_name,
                "at": rfc3339(e.at_us),
                "message": e.message,
                "actor": e.actor,
                "event_id": e.id,
                "details": e.data.unwrap_or_else(|| serde_json::json!({})),
                "simulated_time": simulated,
            });
            Pending { id: e.id, kind: e.kind, body: Bytes::from(body.to_string()) }
        })
        .collect();
    let scanned_to = if pending.len() as i64 == BATCH { pending.last().map_or(after, |p| p.id) } else { newest };
    Ok((pending, scanned_to))
}

/// One POST of an event, within the webhook's deadline.
async fn post(hook: &Webhook, event: &Pending) -> Attempt {
    match tokio::time::timeout(hook.timeout, exchange(hook, event)).await {
        Err(_) => Attempt::Failed(format!("no answer within {} s", hook.timeout.as_secs_f64())),
        Ok(Err(why)) => Attempt::Failed(why),
        Ok(Ok(status)) if status.is_success() => Attempt::Delivered,
        Ok(Ok(status))
            if status.is_server_error()
                || status == StatusCode::REQUEST_TIMEOUT
                || status == StatusCode::TOO_MANY_REQUESTS =>
        {
            Attempt::Failed(format!("HTTP {status}"))
        }
        Ok(Ok(status)) => Attempt::Refused(status),
    }
}

/// Connects, sends the request on a fresh HTTP/1.1 connection and returns the status of the answer.
async fn exchange(hook: &Webhook, event: &Pending) -> Result<StatusCode, String> {
    let url = &hook.url;
    let stream = tokio::net::TcpStream::connect((url.host(), url.port()))
        .await
        .map_err(|e| format!("cannot connect to {}: {e}", url.authority()))?;
    let (mut sender, connection) =
        hyper::client::conn::http1::handshake(TokioIo::new(stream)).await.map_err(|e| format!("HTTP: {e}"))?;
    // The connection runs beside the request and is aborted when this returns (or times out).
    let mut driver = JoinSet::new();
    driver.spawn(connection);
    let request = Request::post(url.path_and_query())
        .header(HOST, url.authority())
        .header(CONTENT_TYPE, "application/json")
        .header(USER_AGENT, concat!("oedolog/", env!("CARGO_PKG_VERSION")))
        .header(CONNECTION, "close")
        .header(EVENT_ID_HEADER, event.id)
        .body(Full::new(event.body.clone()))
        .map_err(|e| format!("request: {e}"))?;
    let response = sender.send_request(request).await.map_err(|e| format!("HTTP: {e}"))?;
    Ok(response.status())
}

#[cfg(test)]
mod tests;
