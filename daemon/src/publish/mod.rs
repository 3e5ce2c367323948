//! Publishing to MQTT brokers: every stored reading, the journal, each frame's state and the lab's
//! status, one task per `[[publish.mqtt]]`.
//!
//! The store is the single source: a task tails it on its own read-only connection with a cursor per
//! frame and channel and one for the journal (`publish_*_cursors`, saved through the writer only after
//! the broker acknowledged everything up to them, MQTT 3.1.1 §4.3.2 QoS 1 PUBACK), so a broker that is
//! away, slow or refusing is caught up in store order on its return, with no gap, and a repeat only where
//! QoS 1's at-least-once allows one — every reading carries its channel's sequence number, every journal
//! entry its id, for a consumer to drop repeats. Acquisition and the store never wait on it: it reads
//! what is committed and writes nothing but its cursors; how far behind it is (and its verdict, behind
//! the `publish-lag` alarm) is in [`BrokerStats`]. Each session is a fresh rumqttc connection with a clean session; on any failure the
//! connection is dropped and the task retries with doubling back-off from the saved cursors. It must
//! never command anything: it only publishes, and subscribes to nothing.

use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicI64, AtomicU64, Ordering};
use std::time::{Duration, Instant};

use rumqttc::{AsyncClient, Event as MqttEvent, EventLoop, LastWill, MqttOptions, Outgoing, Packet, QoS, Transport};
use serde_json::json;
use tokio::task::{JoinHandle, JoinSet};

use crate::acquire::backoff::Backoff;
use crate::clock::{Clock, rfc3339};
use crate::config::MqttBroker;
use crate::http::AppState;
use crate::store::publish::{Cursors, ReadingCursor};
use crate::store::{self, ChannelKind, Reader, StoreError, Writer, journal};

/// Readings of one channel in one message at most (a catching-up pass sends full batches back to back).
const READINGS_PER_CHANNEL: i64 = 200;
/// Journal entries published per pass at most.
const EVENTS_PER_PASS: i64 = 100;
/// Largest packet either way: 3 × 200 readings of about 130 bytes, with room.
const MAX_PACKET_BYTES: usize = 1 << 20;

/// How often the store is read and how reconnections are spaced (real, monotonic time).
#[derive(Clone, Copy, Debug)]
pub struct PublishPolicy {
    /// Period of the store reads while caught up.
    pub poll: Duration,
    /// Wait before the first reconnection; doubled after each failure.
    pub first_retry: Duration,
    /// Longest wait between reconnections.
    pub max_retry: Duration,
    /// Longest wait for CONNACK, or for the acknowledgements of one pass.
    pub answer_within: Duration,
    /// A frame's retained state is published again at least this often (its last reading moves on).
    pub state_every: Duration,
}

impl Default for PublishPolicy {
    fn default() -> Self {
        PublishPolicy {
            poll: Duration::from_millis(500),
            first_retry: Duration::from_secs(1),
            max_retry: Duration::from_secs(60),
            answer_within: Duration::from_secs(30),
            state_every: Duration::from_secs(10),
        }
    }
}

/// What `/metrics` shows of one broker; updated by its task.
#[derive(Debug, Default)]
pub struct BrokerStats {
    /// `url client_id`, as in the store's cursors.
    pub name: String,
    connected: AtomicBool,
    messages: AtomicU64,
    readings: AtomicU64,
    errors: AtomicU64,
    /// Real seconds × 1000 since the oldest reading or entry not yet acknowledged was stored.
    lag_ms: AtomicI64,
    lag_alarm: AtomicBool,
}

impl BrokerStats {
    /// Whether a session is up (CONNACK received and not failed since).
    pub fn connected(&self) -> bool {
        self.connected.load(Ordering::Relaxed)
    }
    /// Messages acknowledged since the daemon started.
    pub fn messages(&self) -> u64 {
        self.messages.load(Ordering::Relaxed)
    }
    /// Readings acknowledged since the daemon started.
    pub fn readings(&self) -> u64 {
        self.readings.load(Ordering::Relaxed)
    }
    /// Failed connections and sessions since the daemon started.
    pub fn errors(&self) -> u64 {
        self.errors.load(Ordering::Relaxed)
    }
    /// How far publishing is behind the store, real seconds.
    pub fn lag_s(&self) -> f64 {
        self.lag_ms.load(Ordering::Relaxed) as f64 / 1e3
    }
    /// Whether the `publish-lag` alarm is raised.
    pub fn lag_alarm(&self) -> bool {
        self.lag_alarm.load(Ordering::Relaxed)
    }
}

/// The stats of every configured broker, in config order (empty without `[[publish.mqtt]]`).
#[derive(Debug, Default)]
pub struct PublishStats {
    /// One per broker.
    pub brokers: Vec<Arc<BrokerStats>>,
}

impl PublishStats {
    /// Zeroed stats for `brokers`.
    pub fn for_brokers(brokers: &[MqttBroker]) -> PublishStats {
        PublishStats {
            brokers: brokers
                .iter()
                .map(|b| Arc::new(BrokerStats { name: b.cursor_key(), ..Default::default() }))
                .collect(),
        }
    }
}

/// Starts one task per broker under one handle (aborting it stops them all, and each broker then
/// publishes the lab's last will). Reads, and for a new broker sets, every cursor before it returns, so
/// every reading committed after this call is published. Blocks briefly on the store.
pub fn start(
    brokers: &[MqttBroker],
    state: &AppState,
    keys: &[i64],
    stats: &PublishStats,
    policy: PublishPolicy,
) -> Result<JoinHandle<()>, StoreError> {
    let mut tasks = JoinSet::new();
    let store_id = store::publish::store_identity(&store::reader(&state.store_path)?)?;
    for (broker, stats) in brokers.iter().zip(&stats.brokers) {
        let cursors = store::publish::start_cursors(
            &state.writer,
            broker.cursor_key(),
            keys.to_vec(),
            state.started_us,
            state.clock.now_us(),
        )?;
        let frames = state.frames.iter().zip(keys).map(|(f, &k)| (k, f.id.clone())).collect();
        let task = BrokerTask {
            broker: broker.clone(),
            store_path: state.store_path.clone(),
            writer: state.writer.clone(),
            clock: state.clock.clone(),
            app: state.clone(),
            frames,
            store_id: store_id.clone(),
            stats: stats.clone(),
            policy,
            cursors,
            states: HashMap::new(),
        };
        tasks.spawn(task.run());
    }
    Ok(tokio::spawn(async move {
        while let Some(done) = tasks.join_next().await {
            if let Err(error) = done
                && error.is_panic()
            {
                tracing::error!("an MQTT publishing task panicked: {error}");
            }
        }
    }))
}

/// Why a session ended.
#[derive(Debug, thiserror::Error)]
enum SessionError {
    #[error("{0}")]
    Mqtt(Box<rumqttc::ConnectionError>),
    #[error("MQTT client: {0}")]
    Client(#[from] rumqttc::ClientError),
    #[error("no answer from the broker within {0} s")]
    Silent(f64),
    #[error("cannot read the store: {0}")]
    Store(String),
    #[error("TLS set-up: {0}")]
    Tls(String),
    /// The writer has stopped: the daemon is stopping.
    #[error("the store's writer has stopped")]
    WriterGone,
}

impl From<rumqttc::ConnectionError> for SessionError {
    fn from(error: rumqttc::ConnectionError) -> Self {
        SessionError::Mqtt(Box::new(error))
    }
}

/// One message of a pass.
struct Message {
    topic: String,
    retain: bool,
    payload: Vec<u8>,
}

/// What one read of the store found to publish.
struct Pass {
    messages: Vec<Message>,
    /// The cursors once every message is acknowledged.
    after: Cursors,
    readings: u64,
    /// A batch was full: read again at once.
    more: bool,
}

struct BrokerTask {
    broker: MqttBroker,
    store_path: PathBuf,
    writer: Writer,
    clock: Arc<dyn Clock>,
    app: AppState,
    /// (frames.key, config id), config order.
    frames: Vec<(i64, String)>,
    /// The database's identity (`store_identity`), in every payload beside the sequence numbers.
    store_id: String,
    stats: Arc<BrokerStats>,
    policy: PublishPolicy,
    /// Acknowledged (and saved, or being saved) up to here.
    cursors: Cursors,
    /// Per frame id: the state last published (without its stamps) and when.
    states: HashMap<String, (serde_json::Value, Instant)>,
}

impl BrokerTask {
    async fn run(mut self) {
        let mut backoff = Backoff::new(self.policy.first_retry, self.policy.max_retry);
        let mut reader: Option<Reader> = None;
        loop {
            let outcome = self.session(&mut reader, &mut backoff).await;
            self.stats.connected.store(false, Ordering::Relaxed);
            self.states.clear();
            match outcome {
                Err(SessionError::WriterGone) => return,
                Err(error) => {
                    self.stats.errors.fetch_add(1, Ordering::Relaxed);
                    let wait = backoff.next_wait();
                    tracing::warn!(
                        broker = %self.broker.url.text,
                        "MQTT publishing interrupted ({error}); next try in {} s",
                        wait.as_secs_f64()
                    );
                    // The lag keeps being measured (and alarmed) while the broker is away.
                    let until = Instant::now() + wait;
                    while Instant::now() < until {
                        self.measure_lag(&mut reader).await;
                        tokio::time::sleep(Duration::from_secs(1).min(until - Instant::now())).await;
                    }
                }
                Ok(()) => return,
            }
        }
    }

    fn qos(&self) -> QoS {
        if self.broker.qos == 0 { QoS::AtMostOnce } else { QoS::AtLeastOnce }
    }

    fn options(&self) -> Result<MqttOptions, SessionError> {
        let b = &self.broker;
        let mut options = MqttOptions::new(b.client_id.clone(), b.url.host.clone(), b.url.port);
        options.set_keep_alive(b.keep_alive);
        // A fresh session each time: what the broker acknowledged is in our cursors, not in its session.
        options.set_clean_session(true);
        options.set_max_packet_size(MAX_PACKET_BYTES, MAX_PACKET_BYTES);
        options.set_inflight(u16::MAX);
        // MQTT 3.1.1 §3.1.2.5–§3.1.2.7: the broker publishes this, retained, when we vanish without DISCONNECT.
        options.set_last_will(LastWill::new(
            format!("{}/status", b.lab_topic()),
            self.status_payload("offline").to_string(),
            QoS::AtLeastOnce,
            true,
        ));
        if let Some((user, password)) = &b.credentials {
            options.set_credentials(user.clone(), password.as_ref().map_or(String::new(), |p| p.0.clone()));
        }
        if b.url.tls {
            options.set_transport(tls_transport(&b.ca).map_err(SessionError::Tls)?);
        }
        Ok(options)
    }

    fn status_payload(&self, status: &str) -> serde_json::Value {
        json!({
            "status": status,
            "lab": self.broker.lab,
            "store": self.store_id,
            "at": rfc3339(self.clock.now_us()),
            "dashboard": self.broker.dashboard_url,
            "frames": self.frames.iter().map(|(_, id)| id).collect::<Vec<_>>(),
            "simulated_time": self.clock.is_simulated(),
            "version": env!("CARGO_PKG_VERSION"),
        })
    }

    /// One connection: CONNACK, `online`, then passes until something fails.
    async fn session(&mut self, reader: &mut Option<Reader>, backoff: &mut Backoff) -> Result<(), SessionError> {
        let (client, mut events) = new_client(self.options()?, self.frames.len());
        let within = self.policy.answer_within;
        loop {
            match tokio::time::timeout(within, events.poll()).await {
                Err(_) => return Err(SessionError::Silent(within.as_secs_f64())),
                Ok(Err(error)) => return Err(error.into()),
                Ok(Ok(MqttEvent::Incoming(Packet::ConnAck(_)))) => break,
                Ok(Ok(_)) => {}
            }
        }
        self.stats.connected.store(true, Ordering::Relaxed);
        backoff.reset();
        tracing::info!(broker = %self.broker.url.text, lab = %self.broker.lab, "MQTT broker connected");
        let online = Message {
            topic: format!("{}/status", self.broker.lab_topic()),
            retain: true,
            payload: self.status_payload("online").to_string().into_bytes(),
        };
        self.send(&client, &mut events, vec![online]).await?;
        loop {
            let pass = self.read_pass(reader).await?;
            let (count, readings, more) = (pass.messages.len() as u64, pass.readings, pass.more);
            self.send(&client, &mut events, pass.messages).await?;
            // Saved only when they moved: an idle lab's pass then costs the disk nothing (a save is a
            // writer commit, with its fsync).
            let moved = pass.after != self.cursors;
            self.cursors = pass.after;
            if moved {
                self.save().await?;
            }
            self.stats.messages.fetch_add(count, Ordering::Relaxed);
            self.stats.readings.fetch_add(readings, Ordering::Relaxed);
            self.measure_lag(reader).await;
            if !more {
                // Keep the connection served (PINGREQ, §3.1.2.10) while waiting for the next read.
                let until = tokio::time::Instant::now() + self.policy.poll;
                while let Ok(polled) = tokio::time::timeout_at(until, events.poll()).await {
                    polled?;
                }
            }
        }
    }

    /// Publishes `messages` in order and waits until the broker has acknowledged every one (QoS 1:
    /// PUBACK; QoS 0: written to the connection).
    async fn send(
        &self,
        client: &AsyncClient,
        events: &mut EventLoop,
        messages: Vec<Message>,
    ) -> Result<(), SessionError> {
        let qos = self.qos();
        let mut waiting = messages.len();
        for m in messages {
            client.publish(m.topic, qos, m.retain, m.payload).await?;
        }
        let deadline = tokio::time::Instant::now() + self.policy.answer_within;
        while waiting > 0 {
            match tokio::time::timeout_at(deadline, events.poll()).await {
                Err(_) => return Err(SessionError::Silent(self.policy.answer_within.as_secs_f64())),
                Ok(Err(error)) => return Err(error.into()),
                Ok(Ok(MqttEvent::Incoming(Packet::PubAck(_)))) if qos == QoS::AtLeastOnce => waiting -= 1,
                Ok(Ok(MqttEvent::Outgoing(Outgoing::Publish(_)))) if qos == QoS::AtMostOnce => waiting -= 1,
                Ok(Ok(_)) => {}
            }
        }
        Ok(())
    }

    async fn save(&self) -> Result<(), SessionError> {
        let (writer, key, cursors, now) =
            (self.writer.clone(), self.broker.cursor_key(), self.cursors.clone(), self.clock.now_us());
        match tokio::task::spawn_blocking(move || store::publish::save_cursors(&writer, key, cursors, now)).await {
            Ok(Ok(())) => Ok(()),
            Ok(Err(StoreError::WriterGone)) => Err(SessionError::WriterGone),
            // The cursors stay moved in memory: nothing is sent twice while the daemon runs.
            Ok(Err(error)) => {
                tracing::error!(broker = %self.broker.url.text, "MQTT cursors not saved: {error}");
                Ok(())
            }
            Err(error) => Err(SessionError::Store(error.to_string())),
        }
    }

    /// Reads what comes after the cursors and builds the pass's messages (states from memory).
    async fn read_pass(&mut self, reader: &mut Option<Reader>) -> Result<Pass, SessionError> {
        let (path, cursors, frames) = (self.store_path.clone(), self.cursors.clone(), self.frames.clone());
        let (lab, topic) = (self.broker.lab.clone(), self.broker.lab_topic());
        let store_id = self.store_id.clone();
        let taken = reader.take();
        let (back, found) = tokio::task::spawn_blocking(move || {
            let conn = match taken {
                Some(c) => c,
                None => match store::reader(&path) {
                    Ok(c) => c,
                    Err(e) => return (None, Err(e)),
                },
            };
            let found = read_store(&conn, cursors, &frames, &Origin { lab: &lab, store: &store_id }, &topic);
            (Some(conn), found)
        })
        .await
        .map_err(|e| SessionError::Store(e.to_string()))?;
        *reader = back;
        let mut pass = found.map_err(|e| SessionError::Store(e.to_string()))?;
        pass.messages.extend(self.states_due());
        Ok(pass)
    }

    /// Each frame's retained state, when it changed or is due again.
    fn states_due(&mut self) -> Vec<Message> {
        let views = crate::http::frame_views(&self.app);
        let now = self.clock.now_us();
        let mut out = Vec::new();
        for v in views {
            let test = v.test.as_ref();
            let attention = attention(&v);
            let body = json!({
                "lab": self.broker.lab,
                "frame": v.id,
                "name": v.name,
                "state": v.state,
                "attention": attention,
                "test": test.map(|t| json!({
                    "specimen": t.specimen,
                    "load_step": t.increment,
                    "stress_kpa": t.stress_kpa,
                    "from_kpa": t.from_kpa,
                    "onset_at": t.onset_us.map(rfc3339),
                    "ready_at": t.ready_us.map(rfc3339),
                    "plan_finished": t.plan_finished,
                })),
                "ready_eta": v.watch.as_ref().and_then(|w| w.ready_eta_us).map(rfc3339),
                "t90_min": v.watch.as_ref().and_then(|w| w.t90_min),
                "alarms": v.alarms.iter().map(|a| json!({
                    "code": a.code,
                    "message": a.message,
                    "raised_at": a.raised_at,
                    "acknowledged_by": a.acknowledged_by,
                })).collect::<Vec<_>>(),
                "bus_up": v.bus_up,
            });
            let due = match self.states.get(&v.id) {
                None => true,
                Some((last, when)) => *last != body || when.elapsed() >= self.policy.state_every,
            };
            if !due {
                continue;
            }
            let mut payload = body.clone();
            payload["at"] = json!(rfc3339(now));
            payload["last_reading"] = json!({
                "at": v.last_reading_at,
                "displacement_mm": v.displacement_mm,
                "load_kn": v.load_kn,
                "temperature_c": v.temperature_c,
            });
            payload["simulated_time"] = json!(self.clock.is_simulated());
            out.push(Message {
                topic: format!("{}/{}/state", self.broker.lab_topic(), v.id),
                retain: true,
                payload: payload.to_string().into_bytes(),
            });
            self.states.insert(v.id.clone(), (body, Instant::now()));
        }
        out
    }

    /// Measures the lag from the store (the oldest reading or entry after the cursors) and raises or
    /// clears the verdict behind the `publish-lag` alarm.
    async fn measure_lag(&self, reader: &mut Option<Reader>) {
        let (path, cursors) = (self.store_path.clone(), self.cursors.clone());
        let taken = reader.take();
        let found = tokio::task::spawn_blocking(move || {
            let conn = match taken {
                Some(c) => c,
                None => match store::reader(&path) {
                    Ok(c) => c,
                    Err(e) => return (None, Err(e)),
                },
            };
            let found = oldest_unpublished(&conn, &cursors);
            (Some(conn), found)
        })
        .await;
        let Ok((back, Ok(oldest))) = found else {
            return;
        };
        *reader = back;
        let now = self.clock.now_us();
        // Stamps are clock time; the lag is shown in real seconds (the demo's clock runs faster).
        let lag_s = oldest.map_or(0.0, |at| (now - at).max(0) as f64 / 1e6 / self.clock.speed());
        self.stats.lag_ms.store((lag_s * 1e3) as i64, Ordering::Relaxed);
        let limit = self.broker.lag_alarm.as_secs_f64();
        let raised = self.stats.lag_alarm();
        // The verdict, with its hysteresis (past the limit raises, under half of it clears); the alarm
        // task turns it into the `publish-lag` alarm (stored, journalled, on every page's banner).
        if !raised && lag_s > limit {
            self.stats.lag_alarm.store(true, Ordering::Relaxed);
            tracing::warn!(
                "publishing to MQTT broker {} is {lag_s:.0} s behind the store (limit {limit:.0} s); nothing is lost, it catches up when the broker takes it",
                self.broker.url.text
            );
        } else if raised && lag_s <= limit / 2.0 {
            self.stats.lag_alarm.store(false, Ordering::Relaxed);
            tracing::info!("publishing to MQTT broker {} caught up", self.broker.url.text);
        }
    }
}

/// Most messages one pass can hold: its journal entries, a readings and a state message per frame, and room.
fn pass_capacity(frames: usize) -> usize {
    frames * 2 + EVENTS_PER_PASS as usize + 8
}

/// The client and its event loop, with a request channel that holds a whole pass: `send` queues every
/// message of a pass before it polls the event loop, so a smaller channel blocks it for good (with 16, a
/// pass of 17 messages — a lab of 8 frames and one journal entry, or a catch-up of 17 entries — left the
/// task waiting, silent, until the broker dropped the connection, and waiting still). rumqttc 0.25's
/// `AsyncClient::new` sizes the channel by its own argument only, not by `MqttOptions::request_channel_capacity`.
fn new_client(mut options: MqttOptions, frames: usize) -> (AsyncClient, EventLoop) {
    let capacity = pass_capacity(frames);
    options.set_request_channel_capacity(capacity);
    AsyncClient::new(options, capacity)
}

/// TLS through rustls trusting only the authorities of `ca` (an `mqtts://` broker's `ca_file`).
pub(crate) fn tls_transport(ca: &[rustls::pki_types::CertificateDer<'static>]) -> Result<Transport, String> {
    let mut roots = rustls::RootCertStore::empty();
    for cert in ca {
        roots.add(cert.clone()).map_err(|e| e.to_string())?;
    }
    let config = rustls::ClientConfig::builder_with_provider(Arc::new(rustls::crypto::ring::default_provider()))
        .with_safe_default_protocol_versions()
        .map_err(|e| e.to_string())?
        .with_root_certificates(roots)
        .with_no_client_auth();
    Ok(Transport::tls_with_config(rumqttc::TlsConfiguration::Rustls(Arc::new(config))))
}

/// Why a frame wants a person, most urgent first: for the fleet board's order.
fn attention(v: &crate::http::FrameView) -> Vec<&'static str> {
    let mut out = Vec::new();
    if v.alarms.iter().any(|a| a.acknowledged_by.is_none()) {
        out.push("alarm");
    }
    if v.state == "offline" && v.test.is_some() {
        out.push("offline");
    }
    if let Some(t) = &v.test {
        if t.plan_finished {
            out.push("schedule-finished");
        } else if v.state == "ready" {
            out.push("ready");
        }
    }
    out
}

/// The unit of a channel's calibrated value.
fn unit(channel: ChannelKind) -> &'static str {
    match channel {
        ChannelKind::Displacement => "mm",
        ChannelKind::Load => "kN",
        ChannelKind::Temperature => "°C",
    }
}

/// The stamp of the oldest reading or journal entry not yet acknowledged.
fn oldest_unpublished(conn: &Reader, cursors: &Cursors) -> Result<Option<i64>, StoreError> {
    let mut oldest: Option<i64> = None;
    for c in &cursors.readings {
        if let Some(at) = store::publish::oldest_after(conn, c.frame_key, c.channel, c.last_at_us)? {
            oldest = Some(oldest.map_or(at, |o| o.min(at)));
        }
    }
    if let Some(entry) = journal::after(conn, cursors.last_event_id, 1, None)?.first() {
        oldest = Some(oldest.map_or(entry.at_us, |o| o.min(entry.at_us)));
    }
    Ok(oldest)
}

/// Who publishes: the lab's name and the database's identity (the `seq` numbers are this database's).
struct Origin<'a> {
    lab: &'a str,
    store: &'a str,
}

/// The journal entries and readings after `cursors`, as messages, and the cursors past them.
fn read_store(
    conn: &Reader,
    mut cursors: Cursors,
    frames: &[(i64, String)],
    origin: &Origin<'_>,
    topic: &str,
) -> Result<Pass, StoreError> {
    let (lab, store) = (origin.lab, origin.store);
    let mut messages = Vec::new();
    let mut more = false;
    let entries = journal::after(conn, cursors.last_event_id, EVENTS_PER_PASS, None)?;
    more |= entries.len() as i64 == EVENTS_PER_PASS;
    for e in entries {
        cursors.last_event_id = e.id;
        let body = json!({
            "lab": lab,
            "store": store,
            "seq": e.id,
            "kind": e.kind,
            "frame": e.frame,
            "frame_name": e.frame_name,
            "at": rfc3339(e.at_us),
            "at_us": e.at_us,
            "message": e.message,
            "actor": e.actor,
            "details": e.data.unwrap_or_else(|| json!({})),
        });
        messages.push(Message {
            topic: format!("{topic}/events"),
            retain: false,
            payload: body.to_string().into_bytes(),
        });
    }
    let mut readings = 0u64;
    for (frame_key, frame_id) in frames {
        let mut rows = Vec::new();
        for cursor in cursors.readings.iter_mut().filter(|c| c.frame_key == *frame_key) {
            let found = store::publish::readings_after(
                conn,
                *frame_key,
                cursor.channel,
                cursor.last_at_us,
                READINGS_PER_CHANNEL,
            )?;
            more |= found.len() as i64 == READINGS_PER_CHANNEL;
            for (at_us, raw, value) in found {
                cursor.last_seq += 1;
                cursor.last_at_us = at_us;
                rows.push((at_us, *cursor, raw, value));
            }
        }
        if rows.is_empty() {
            continue;
        }
        rows.sort_by_key(|(at_us, c, _, _)| (*at_us, c.channel.code()));
        readings += rows.len() as u64;
        let list: Vec<serde_json::Value> =
            rows.iter().map(|(at_us, c, raw, value)| reading_json(*at_us, c, *raw, *value)).collect();
        let body = json!({ "lab": lab, "store": store, "frame": frame_id, "readings": list });
        messages.push(Message {
            topic: format!("{topic}/{frame_id}/readings"),
            retain: false,
            payload: body.to_string().into_bytes(),
        });
    }
    Ok(Pass { messages, after: cursors, readings, more })
}

/// One reading in a `readings` message. `c` is the cursor as it stood after this reading.
fn reading_json(at_us: i64, c: &ReadingCursor, raw: f64, value: f64) -> serde_json::Value {
    json!({
        "channel": c.channel.name(),
        "seq": c.last_seq,
        "at": rfc3339(at_us),
        "at_us": at_us,
        "value": value,
        "unit": unit(c.channel),
        "raw": raw,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_request_channel_takes_a_whole_pass_before_the_event_loop_is_polled() {
        for frames in [1usize, 8, 17, 32, 200] {
            let (client, _events) = new_client(MqttOptions::new("t", "127.0.0.1", 1), frames);
            // The fullest pass: a batch of journal entries, then a readings and a state message per frame.
            let fullest = EVENTS_PER_PASS as usize + 2 * frames;
            for i in 0..fullest {
                client
                    .try_publish("bench/lab/F1/readings", QoS::AtLeastOnce, false, b"{}".to_vec())
                    .unwrap_or_else(|e| panic!("{frames} frames: message {} of {fullest} not queued: {e}", i + 1));
            }
        }
    }
}
