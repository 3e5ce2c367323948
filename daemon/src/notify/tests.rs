//! The notifier against loopback receivers started in each test (an axum server that answers from a
//! script, and a TCP listener that never answers), on a real SQLite file with the real writer. No sleep
//! is a synchronisation: every wait polls a condition under a deadline.

use std::collections::VecDeque;
use std::net::SocketAddr;
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

use axum::extract::State;
use axum::http::{HeaderMap, Uri};
use axum::routing::post;
use tokio::io::AsyncReadExt;

use super::*;
use crate::clock::ManualClock;
use crate::config::{NotifyEvent, Webhook, WebhookUrl};
use crate::store::testing::{self, Table};
use crate::store::{ChannelKind, Reading, WriterPolicy, WriterThread};

/// 2026-01-01T00:00:00.25Z (`date -u -d @1767225600` prints Thu Jan 1 00:00:00 UTC 2026).
const START_US: i64 = 1_767_225_600_250_000;
const DEADLINE: Duration = Duration::from_secs(15);

/// Fast polls and retries so the tests take milliseconds; the shape (doubling, capped) is the real one.
fn quick() -> NotifyPolicy {
    NotifyPolicy {
        poll: Duration::from_millis(20),
        first_retry: Duration::from_millis(20),
        max_retry: Duration::from_millis(100),
    }
}

/// A database with one frame and the writer running on it.
struct Bench {
    _dir: tempfile::TempDir,
    path: PathBuf,
    writer: Writer,
    _writer_thread: WriterThread,
    frame_key: i64,
    clock: Arc<ManualClock>,
}

impl Bench {
    fn new() -> Bench {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("lab.sqlite");
        let conn = store::open(&path).unwrap();
        let frame_key = store::frame_key(&conn, "F1", "Frame 1", START_US).unwrap();
        let policy = WriterPolicy { flush: Duration::from_millis(20), ..Default::default() };
        let writer_thread = Writer::spawn(conn, policy, |_| {});
        let writer = writer_thread.writer();
        let clock = Arc::new(ManualClock::new(START_US));
        Bench { _dir: dir, path, writer, _writer_thread: writer_thread, frame_key, clock }
    }

    /// Commits a journal entry of frame F1 and returns its id.
    async fn journal(&self, kind: EventKind, data: Option<serde_json::Value>) -> i64 {
        let (writer, key, at_us) = (self.writer.clone(), self.frame_key, self.clock.now_us());
        self.clock.advance_us(1_000_000);
        let event = Event {
            at_us,
            frame_key: Some(key),
            kind,
            message: format!("{kind} on F1"),
            actor: Some("olga".into()),
            data,
        };
        tokio::task::spawn_blocking(move || journal::append(&writer, event)).await.unwrap().unwrap()
    }

    fn start(&self, webhooks: &[Webhook]) -> JoinHandle<()> {
        start(webhooks, &self.path, &self.writer, self.clock.clone(), quick()).unwrap()
    }

    fn count(&self, table: Table) -> i64 {
        testing::count(&store::reader(&self.path).unwrap(), table)
    }

    /// The `notify-failed` entries, oldest first.
    fn failures(&self) -> Vec<journal::JournalEntry> {
        let reader = store::reader(&self.path).unwrap();
        testing::journal(&reader).into_iter().filter(|e| e.kind == FAILED_KIND).collect()
    }

    fn cursor(&self, url: &WebhookUrl) -> Option<i64> {
        store::notify::cursor(&store::reader(&self.path).unwrap(), url.as_str()).unwrap()
    }
}

fn webhook(addr: SocketAddr, path: &str, events: &[NotifyEvent]) -> Webhook {
    Webhook {
        url: WebhookUrl::parse(&format!("http://{addr}{path}")).unwrap(),
        events: events.to_vec(),
        timeout: Duration::from_secs(5),
    }
}

/// One request as the receiver saw it.
#[derive(Clone, Debug)]
struct Received {
    uri: String,
    event_header: Option<String>,
    content_type: Option<String>,
    body: serde_json::Value,
    answered: u16,
}

impl Received {
    fn event_id(&self) -> i64 {
        self.body["event_id"].as_i64().unwrap()
    }
}

/// An HTTP receiver on 127.0.0.1:0 that records every request and answers the scripted statuses in
/// turn, then 200.
#[derive(Clone, Default)]
struct Receiver {
    got: Arc<Mutex<Vec<Received>>>,
    answers: Arc<Mutex<VecDeque<u16>>>,
}

impl Receiver {
    async fn start(answers: &[u16]) -> (SocketAddr, Receiver) {
        let receiver =
            Receiver { got: Default::default(), answers: Arc::new(Mutex::new(answers.iter().copied().collect())) };
        let app = axum::Router::new().fallback(post(record)).with_state(receiver.clone());
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
        let addr = listener.local_addr().unwrap();
        tokio::spawn(async move { axum::serve(listener, app).await.unwrap() });
        (addr, receiver)
    }

    fn all(&self) -> Vec<Received> {
        self.got.lock().unwrap().clone()
    }

    fn delivered(&self) -> Vec<i64> {
        self.all().iter().filter(|r| (200..300).contains(&r.answered)).map(Received::event_id).collect()
    }

    /// Waits until `event_id` has been answered with 2xx; returns every request so far.
    async fn wait_delivered(&self, event_id: i64) -> Vec<Received> {
        wait_for(|| self.delivered().contains(&event_id), "the event delivered").await;
        self.all()
    }
}

async fn record(State(receiver): State<Receiver>, uri: Uri, headers: HeaderMap, body: Bytes) -> StatusCode {
    let answered = receiver.answers.lock().unwrap().pop_front().unwrap_or(200);
    let header = |name: &str| headers.get(name).map(|v| v.to_str().unwrap().to_string());
    receiver.got.lock().unwrap().push(Received {
        uri: uri.to_string(),
        event_header: header(EVENT_ID_HEADER),
        content_type: header("content-type"),
        body: serde_json::from_slice(&body).unwrap_or(serde_json::Value::Null),
        answered,
    });
    StatusCode::from_u16(answered).unwrap()
}

/// A TCP listener on 127.0.0.1:0 that accepts, reads whatever comes and never answers.
#[derive(Default)]
struct Silent {
    /// What each connection sent, in accept order.
    requests: Mutex<Vec<String>>,
    /// Connections the client has closed.
    closed: AtomicUsize,
}

impl Silent {
    async fn start() -> (SocketAddr, Arc<Silent>) {
        let silent = Arc::new(Silent::default());
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
        let addr = listener.local_addr().unwrap();
        let state = silent.clone();
        tokio::spawn(async move {
            loop {
                let (mut stream, _) = listener.accept().await.unwrap();
                let state = state.clone();
                let index = {
                    let mut requests = state.requests.lock().unwrap();
                    requests.push(String::new());
                    requests.len() - 1
                };
                tokio::spawn(async move {
                    let mut buf = [0u8; 4096];
                    loop {
                        match stream.read(&mut buf).await {
                            Ok(0) | Err(_) => break,
                            Ok(n) => state.requests.lock().unwrap()[index] += &String::from_utf8_lossy(&buf[..n]),
                        }
                    }
                    state.closed.fetch_add(1, Ordering::SeqCst);
                });
            }
        });
        (addr, silent)
    }

    fn requests(&self) -> Vec<String> {
        self.requests.lock().unwrap().clone()
    }
}

async fn wait_for(condition: impl Fn() -> bool, what: &str) {
    let deadline = Instant::now() + DEADLINE;
    while !condition() {
        assert!(Instant::now() < deadline, "timed out waiting for {what}");
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_subscribed_ready_event_reaches_the_receiver_with_event_frame_at_and_details_and_others_are_not_sent() {
    let bench = Bench::new();
    let (addr, receiver) = Receiver::start(&[]).await;
    let _notifier = bench.start(&[webhook(addr, "/hook?token=s3cret", &[NotifyEvent::Ready])]);
    let onset = bench.journal(EventKind::Onset, None).await;
    let details = serde_json::json!({ "stress_kpa": 200.0, "t90_min": 12.5 });
    let first = bench.journal(EventKind::Ready, Some(details.clone())).await;
    let note = bench.journal(EventKind::Note, None).await;
    let second = bench.journal(EventKind::Ready, None).await;
    assert!(onset < first && first < note && note < second);

    let got = receiver.wait_delivered(second).await;
    // Journal order is kept, so an unsubscribed onset or note that was sent would sit before `second`.
    let ids: Vec<i64> = got.iter().map(Received::event_id).collect();
    assert_eq!(ids, vec![first, second], "only the ready events, in order: {got:#?}");

    let body = &got[0].body;
    assert_eq!(body["event"], "ready");
    assert_eq!(body["kind"], "ready");
    assert_eq!(body["frame"], "F1");
    assert_eq!(body["frame_name"], "Frame 1");
    // The first entry was stamped at START_US: 2026-01-01T00:00:00.25Z plus one clock second per entry.
    assert_eq!(body["at"], "2026-01-01T00:00:01.250000Z");
    assert_eq!(body["details"], details);
    assert_eq!(body["message"], "ready on F1");
    assert_eq!(body["actor"], "olga");
    assert_eq!(body["event_id"], first);
    assert_eq!(body["simulated_time"], false);
    assert_eq!(got[0].event_header.as_deref(), Some(first.to_string().as_str()));
    assert_eq!(got[0].content_type.as_deref(), Some("application/json"));
    assert_eq!(got[0].uri, "/hook?token=s3cret", "path and query reach the receiver");
    assert_eq!(got[1].body["details"], serde_json::json!({}), "an entry without data gets empty details");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn server_errors_and_429_are_retried_and_the_event_then_arrives_once_in_journal_order() {
    let bench = Bench::new();
    let (addr, receiver) = Receiver::start(&[500, 429, 503]).await;
    let _notifier = bench.start(&[webhook(addr, "/hook", &[NotifyEvent::Ready])]);
    let a = bench.journal(EventKind::Ready, None).await;
    let b = bench.journal(EventKind::Ready, None).await;
    let got = receiver.wait_delivered(b).await;
    let tries: Vec<(i64, u16)> = got.iter().map(|r| (r.event_id(), r.answered)).collect();
    assert_eq!(tries, vec![(a, 500), (a, 429), (a, 503), (a, 200), (b, 200)]);
    assert!(got[..4].iter().all(|r| r.event_header == got[0].event_header), "a retry carries the same event id");
    assert_eq!(receiver.delivered(), vec![a, b], "each delivered once");
    assert_eq!(bench.failures().len(), 0);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_client_error_is_journalled_once_as_notify_failed_and_the_next_event_still_arrives() {
    let bench = Bench::new();
    let (addr, receiver) = Receiver::start(&[400]).await;
    // Subscribed to every name: a `notify-failed` entry must still never be posted.
    let _notifier = bench.start(&[webhook(addr, "/hook?key=s3cret", &NotifyEvent::ALL)]);
    let a = bench.journal(EventKind::Ready, None).await;
    let b = bench.journal(EventKind::Armed, None).await;
    let got = receiver.wait_delivered(b).await;
    let tries: Vec<(i64, u16)> = got.iter().map(|r| (r.event_id(), r.answered)).collect();
    assert_eq!(tries, vec![(a, 400), (b, 200)], "a 400 is not retried");

    let failed = bench.failures();
    assert_eq!(failed.len(), 1, "{failed:?}");
    let data = failed[0].data.clone().expect("details");
    assert_eq!((data["event_id"].as_i64(), data["status"].as_u64()), (Some(a), Some(400)));
    assert_eq!(data["webhook"], format!("http://{addr}/hook"));
    assert_eq!(data["kind"], "ready");
    assert!(
        !failed[0].message.contains("s3cret") && !data.to_string().contains("s3cret"),
        "the query is not journalled"
    );

    let c = bench.journal(EventKind::Note, None).await;
    let got = receiver.wait_delivered(c).await;
    assert!(got.iter().all(|r| r.body["kind"] != FAILED_KIND.name()), "notify-failed posted: {got:#?}");
    assert!(failed[0].id < c, "journalled before `c`, so it would have been posted before it");
    assert_eq!(bench.failures().len(), 1);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_restarted_notifier_resumes_from_its_saved_cursor_and_a_new_webhook_starts_at_the_newest_event() {
    let bench = Bench::new();
    let (addr1, first_receiver) = Receiver::start(&[]).await;
    let (addr2, second_receiver) = Receiver::start(&[]).await;
    let hook1 = webhook(addr1, "/one", &[NotifyEvent::Ready]);
    let hook2 = webhook(addr2, "/two", &[NotifyEvent::Ready]);

    let before = bench.journal(EventKind::Ready, None).await;
    let notifier = bench.start(std::slice::from_ref(&hook1));
    assert_eq!(bench.cursor(&hook1.url), Some(before), "a new webhook starts after the newest event");
    let b = bench.journal(EventKind::Ready, None).await;
    first_receiver.wait_delivered(b).await;
    wait_for(|| bench.cursor(&hook1.url) == Some(b), "the cursor saved").await;
    notifier.abort();
    assert!(notifier.await.unwrap_err().is_cancelled());

    let while_stopped = bench.journal(EventKind::Ready, None).await;
    let _notifier = bench.start(&[hook1.clone(), hook2.clone()]);
    let d = bench.journal(EventKind::Ready, None).await;
    let got = first_receiver.wait_delivered(d).await;
    let ids: Vec<i64> = got.iter().map(Received::event_id).collect();
    assert_eq!(ids, vec![b, while_stopped, d], "no repeat of {b}, nothing lost while stopped, {before} never sent");
    let got = second_receiver.wait_delivered(d).await;
    assert_eq!(got.iter().map(Received::event_id).collect::<Vec<_>>(), vec![d], "no flood of older events");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_receiver_that_never_answers_does_not_delay_the_writer() {
    let bench = Bench::new();
    let (addr, silent) = Silent::start().await;
    let mut hook = webhook(addr, "/hook", &[NotifyEvent::Ready]);
    hook.timeout = Duration::from_secs(60);
    let _notifier = bench.start(std::slice::from_ref(&hook));
    let ready = bench.journal(EventKind::Ready, None).await;
    wait_for(|| silent.requests().first().is_some_and(|r| r.contains("\r\n\r\n{")), "the request sent").await;

    // While that request hangs, the store keeps committing readings at its usual pace.
    let (writer, key) = (bench.writer.clone(), bench.frame_key);
    let started = Instant::now();
    let committed = tokio::task::spawn_blocking(move || {
        for i in 0..2000 {
            let at_us = START_US + i * 1000;
            writer.reading(Reading {
                frame_key: key,
                channel: ChannelKind::Displacement,
                at_us,
                raw: 1.0,
                value: 1.0,
            })?;
        }
        writer.sync()
    });
    tokio::time::timeout(Duration::from_secs(5), committed).await.expect("the writer was held up").unwrap().unwrap();
    let took = started.elapsed();
    assert_eq!(bench.count(Table::Readings), 2000);
    assert_eq!(silent.requests().len(), 1, "still the one request, unanswered");
    assert_eq!(silent.closed.load(Ordering::SeqCst), 0, "the notifier is still waiting");
    assert!(bench.cursor(&hook.url).unwrap() < ready, "not counted as delivered");
    assert!(took < Duration::from_secs(5), "{took:?}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_request_without_an_answer_times_out_closes_its_connection_and_is_tried_again() {
    let bench = Bench::new();
    let (addr, silent) = Silent::start().await;
    let mut hook = webhook(addr, "/hook", &[NotifyEvent::Ready]);
    hook.timeout = Duration::from_millis(200);
    let _notifier = bench.start(&[hook]);
    let ready = bench.journal(EventKind::Ready, None).await;
    wait_for(|| silent.requests().len() >= 2, "a second try").await;
    wait_for(|| silent.closed.load(Ordering::SeqCst) >= 1, "the first connection closed").await;
    let requests = silent.requests();
    let header = format!("{EVENT_ID_HEADER}: {ready}\r\n");
    assert!(requests[0].starts_with("POST /hook HTTP/1.1\r\n"), "{}", requests[0]);
    assert!(requests[0].to_ascii_lowercase().contains(&header), "{}", requests[0]);
}

#[test]
fn no_event_name_stands_for_notify_failed() {
    assert!(NotifyEvent::ALL.iter().all(|e| !e.kinds().contains(&FAILED_KIND)));
    assert_eq!(FAILED_KIND.name(), "notify-failed");
    assert_eq!(NotifyEvent::of_kind(FAILED_KIND), None);
}
