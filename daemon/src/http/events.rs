//! The journal: `GET /api/events?after=ID&before=ID&limit=N&frame=ID&order=oldest|newest` (ids strictly
//! between `after` and `before`; oldest first unless `order=newest`), and the live stream `GET /api/stream`
//! (Server-Sent Events).
//!
//! How the stream resumes without a gap: each client gets a task that, through the shared read-only
//! connections of the blocking pool, polls the events table every 500 ms for ids above the last one it sent, and sends each as
//! `id: <event id>` / `event: journal` / `data: {json}` in id order. A reconnecting client's
//! `Last-Event-ID` (or `?after=`) is where that task starts, so it first gets every event committed after
//! that id. The events table is the single source (every writer path commits there), so nothing that was
//! committed can be skipped. Every 2 s, and at once on connecting, an `event: frames` snapshot of
//! `/api/frames` follows. The stream never writes.
//!
//! Streams are limited: [`MAX_STREAMS`] in all and [`MAX_STREAMS_PER_USER`] per signed-in user; past either a
//! new one gets 503 with `Retry-After` (a dashboard tab holds one).

use std::collections::HashMap;
use std::convert::Infallible;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use axum::Extension;
use axum::Router;
use axum::extract::{Query, State};
use axum::http::HeaderMap;
use axum::response::Json;
use axum::response::sse::{Event, KeepAlive, Sse};
use axum::routing::get;
use futures_util::stream::Stream;

use super::increments::{int_param, only_params};
use super::queries::{self, EventView};
use super::{ApiError, AppState, Caller};

/// Event streams open at most, in all.
pub const MAX_STREAMS: usize = 64;
/// Event streams one signed-in user may hold.
pub const MAX_STREAMS_PER_USER: usize = 8;

/// The open event streams, by user (`""` without users).
#[derive(Debug, Default)]
pub struct StreamSlots(Mutex<HashMap<String, usize>>);

impl StreamSlots {
    /// Open streams in all.
    pub fn open(&self) -> usize {
        self.0.lock().unwrap_or_else(|e| e.into_inner()).values().sum()
    }

    /// A slot for `user`, or why not.
    fn take(self: &Arc<Self>, user: &str) -> Result<StreamSlot, ApiError> {
        let mut map = self.0.lock().unwrap_or_else(|e| e.into_inner());
        let total: usize = map.values().sum();
        let mine = map.get(user).copied().unwrap_or(0);
        if total >= MAX_STREAMS {
            return Err(ApiError::Busy(format!(
                "{total} event streams are open, the most this daemon serves; close a dashboard tab or try again shortly"
            )));
        }
        if !user.is_empty() && mine >= MAX_STREAMS_PER_USER {
            return Err(ApiError::Busy(format!(
                "user {user} already holds {mine} event streams, the most one user may; close a dashboard tab"
            )));
        }
        *map.entry(user.to_string()).or_default() += 1;
        Ok(StreamSlot { slots: self.clone(), user: user.to_string() })
    }
}

/// One stream's slot, given back when the stream's task ends.
struct StreamSlot {
    slots: Arc<StreamSlots>,
    user: String,
}

impl Drop for StreamSlot {
    fn drop(&mut self) {
        let mut map = self.slots.0.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(n) = map.get_mut(&self.user) {
            *n -= 1;
            if *n == 0 {
                map.remove(&self.user);
            }
        }
    }
}

/// How often a stream looks for new journal events.
const POLL: Duration = Duration::from_millis(500);
/// A frames snapshot every this many polls.
const FRAMES_EVERY: u32 = 4;
/// Events fetched per query while catching up.
const BATCH: i64 = 500;

fn frame_key(state: &AppState, query: &HashMap<String, String>) -> Result<Option<i64>, ApiError> {
    match query.get("frame") {
        None => Ok(None),
        Some(id) => state.frame_index(id).map(|i| Some(state.lab.key(i))).map_err(|_| {
            ApiError::bad_query(
                "frame",
                format!("no frame `{id}`"),
                state.frames.iter().map(|f| f.id.as_str()).collect::<Vec<_>>().join(", "),
            )
        }),
    }
}

async fn list(
    State(state): State<AppState>,
    Query(query): Query<HashMap<String, String>>,
) -> Result<Json<Vec<EventView>>, ApiError> {
    only_params(&query, &["after", "before", "limit", "frame", "order"])?;
    let after = int_param(&query, "after", 0, 0, i64::MAX)?;
    let before = int_param(&query, "before", i64::MAX, 1, i64::MAX)?;
    let limit = int_param(&query, "limit", 100, 1, 1000)?;
    let newest_first = match query.get("order").map(String::as_str) {
        None | Some("oldest") => false,
        Some("newest") => true,
        Some(other) => {
            return Err(ApiError::bad_query("order", format!("`{other}` is not an order"), "oldest, newest"));
        }
    };
    let key = frame_key(&state, &query)?;
    let window = queries::EventWindow { after, before, limit, frame_key: key, newest_first };
    Ok(Json(state.read(move |conn| queries::events_in(conn, &window)).await?))
}

/// Where a stream starts: `Last-Event-ID`, else `?after=`, else the newest event (only new ones follow).
fn resume_from(headers: &HeaderMap, query: &HashMap<String, String>) -> Result<Option<i64>, ApiError> {
    if let Some(v) = headers.get("last-event-id") {
        let text = v.to_str().unwrap_or("");
        return text.trim().parse::<i64>().ok().filter(|id| *id >= 0).map(Some).ok_or_else(|| ApiError::BadRequest {
            error: format!("Last-Event-ID `{text}` is not an event id"),
            field: Some("Last-Event-ID".into()),
            allowed: Some("a whole number from 0 (the id of the last event received), as for ?after=".into()),
        });
    }
    query.get("after").map(|_| int_param(query, "after", 0, 0, i64::MAX)).transpose()
}

fn journal_event(e: &EventView) -> Event {
    Event::default()
        .id(e.id.to_string())
        .event("journal")
        .data(serde_json::to_string(e).unwrap_or_else(|_| "{}".into()))
}

async fn stream(
    State(state): State<AppState>,
    caller: Option<Extension<Caller>>,
    headers: HeaderMap,
    Query(query): Query<HashMap<String, String>>,
) -> Result<Sse<impl Stream<Item = Result<Event, Infallible>>>, ApiError> {
    only_params(&query, &["after"])?;
    let start = resume_from(&headers, &query)?;
    let slot = state.streams.take(caller.as_ref().map_or("", |c| c.name.as_str()))?;
    let mut last = match start {
        Some(id) => id,
        None => state.read(queries::last_event_id).await?,
    };
    let (tx, rx) = tokio::sync::mpsc::channel::<Event>(64);
    tokio::spawn(async move {
        let _slot = slot;
        let mut ticker = tokio::time::interval(POLL);
        ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
        let mut tick = 0u32;
        loop {
            ticker.tick().await;
            if tick.is_multiple_of(FRAMES_EVERY) {
                let frames = super::frames::views(&state);
                let data = serde_json::to_string(&frames).unwrap_or_else(|_| "[]".into());
                if tx.send(Event::default().event("frames").data(data)).await.is_err() {
                    return;
                }
            }
            tick = tick.wrapping_add(1);
            // Catch up in batches until nothing newer is committed.
            loop {
                let from = last;
                let events = match state.read(move |conn| queries::events(conn, from, BATCH, None)).await {
                    Ok(events) => events,
                    Err(error) => {
                        // Logged once per poll; the client keeps its place and the next poll retries.
                        tracing::warn!("event stream: {error}");
                        break;
                    }
                };
                let full = events.len() as i64 == BATCH;
                for e in &events {
                    if tx.send(journal_event(e)).await.is_err() {
                        return;
                    }
                    last = e.id;
                }
                if !full {
                    break;
                }
            }
        }
    });
    let events = futures_util::stream::unfold(rx, |mut rx| async move { rx.recv().await.map(|e| (Ok(e), rx)) });
    Ok(Sse::new(events).keep_alive(KeepAlive::new().interval(Duration::from_secs(15))))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/api/events", get(list)).route("/api/stream", get(stream))
}

#[cfg(test)]
mod unit {
    use super::*;

    #[test]
    fn one_user_holds_at_most_eight_streams_and_gets_them_back_when_they_close() {
        let slots = Arc::new(StreamSlots::default());
        let mine: Vec<_> = (0..MAX_STREAMS_PER_USER).map(|_| slots.take("ana").unwrap()).collect();
        let refused = slots.take("ana").err().expect("a ninth stream for ana");
        assert!(matches!(&refused, ApiError::Busy(m) if m.contains("ana") && m.contains('8')), "{refused:?}");
        assert!(slots.take("vic").is_ok(), "another user is not held up by ana's streams");
        drop(mine);
        assert_eq!(slots.open(), 0, "vic's slot was a temporary and is back too");
        assert!(slots.take("ana").is_ok());
    }

    #[test]
    fn all_users_together_hold_at_most_sixty_four_and_without_users_the_total_alone_applies() {
        let slots = Arc::new(StreamSlots::default());
        let held: Vec<_> = (0..MAX_STREAMS).map(|_| slots.take("").unwrap()).collect();
        assert_eq!(slots.open(), MAX_STREAMS);
        assert!(matches!(slots.take(""), Err(ApiError::Busy(m)) if m.contains("64")));
        assert!(matches!(slots.take("ana"), Err(ApiError::Busy(_))), "the total binds a signed-in user too");
        drop(held);
        assert!(slots.take("ana").is_ok());
    }
}
