//! HTTP: the JSON API, the event stream, CSV exports, metrics and the pages, as one axum [`Router`] built
//! by [`router`] from one `router()` per resource module (tests call it in-process with `oneshot`).
//!
//! Handlers validate every request body and query before anything is stored, act only through the lab
//! book, the watch hub and the store's writer, and read on short-lived read-only connections. Nothing
//! here ever commands a load change: arming an increment records what the operator will put on.

mod alarms;
mod auth;
mod body;
mod cache;
mod csv;
mod error;
mod events;
mod export;
mod frames;
mod guard;
mod increments;
mod lab_book;
mod metrics;
mod overview;
mod queries;
mod report;
mod review;
mod serve;
mod web;
mod words;

#[cfg(test)]
mod tests;

use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use axum::Router;
use axum::extract::State;
use axum::response::{IntoResponse, Json};
use axum::routing::get;

use crate::acquire::Live;
use crate::clock::{Clock, rfc3339};
use crate::config::{Frame, User};
use crate::lab::Lab;
use crate::store::{Reader, Writer};
use crate::watch::Hub;

pub(crate) use auth::authenticate;
pub use auth::{Caller, constant_time_eq};
pub use cache::Caches;
pub use error::ApiError;
pub use events::{MAX_STREAMS, MAX_STREAMS_PER_USER, StreamSlots};
pub(crate) use frames::views as frame_views;
pub use frames::{FrameView, frame_state};
pub use guard::Guard;
pub(crate) use guard::{check as check_request, security_headers};
pub use increments::{STANDARD_GRAVITY_M_PER_S2, hanger_stress_kpa};
pub(crate) use overview::escape as escape_html;
pub(crate) use overview::minute_text;
pub use serve::{ConnectionCount, ServeLimits, serve};
pub(crate) use words::state_word;

/// What the handlers share.
#[derive(Clone)]
pub struct AppState {
    /// Acquisition's live view.
    pub live: Live,
    /// Running tests.
    pub lab: Lab,
    /// The live watch.
    pub hub: Hub,
    /// The daemon's clock.
    pub clock: Arc<dyn Clock>,
    /// Per frame: how long without a valid reading before it counts as offline.
    pub stale_after: Vec<Duration>,
    /// The units the lab shows results in (`[display]`); the API stays SI.
    pub display: oedolog_core::units::DisplayUnits,
    /// When the daemon started, UTC µs.
    pub started_us: i64,
    /// The store's writer (operator actions that are not the lab book's: notes, "load applied").
    pub writer: Writer,
    /// The SQLite file, for read-only connections.
    pub store_path: PathBuf,
    /// The configured frames (config order = index in `live`, `lab`, `hub`).
    pub frames: Arc<Vec<Frame>>,
    /// `[[http.user]]`; empty: no authentication (the listen address is then loopback only).
    pub users: Arc<Vec<User>>,
    /// Answers kept while what they were built from is unchanged.
    pub caches: Arc<Caches>,
    /// The open alarms.
    pub alarms: crate::alarms::AlarmBoard,
    /// Which `Host` and `Origin` name this daemon.
    pub guard: Arc<Guard>,
    /// The open event streams, by user.
    pub streams: Arc<StreamSlots>,
    /// The open HTTP connections (counted by [`serve`]).
    pub connections: Arc<ConnectionCount>,
    /// Each MQTT broker's publishing (`[[publish.mqtt]]`), for `/metrics`.
    pub publish: Arc<crate::publish::PublishStats>,
}

thread_local! {
    /// Each blocking-pool thread keeps its read-only connection (and its prepared statements) between
    /// requests: opening one costs more than most of the queries it runs.
    static READER: std::cell::RefCell<Option<(PathBuf, Reader)>> = const { std::cell::RefCell::new(None) };
}

/// Runs `job` on this thread's read-only connection to `path`, opening it first if needed; a connection
/// whose job failed is closed rather than kept.
fn with_reader<T>(path: &std::path::Path, job: impl FnOnce(&Reader) -> Result<T, ApiError>) -> Result<T, ApiError> {
    let held = READER.with(|cell| cell.borrow_mut().take()).filter(|(p, _)| p == path);
    let conn = match held {
        Some((_, conn)) => conn,
        None => crate::store::reader(path)?,
    };
    let out = job(&conn);
    if out.is_ok() {
        READER.with(|cell| *cell.borrow_mut() = Some((path.to_path_buf(), conn)));
    }
    out
}

impl AppState {
    /// The config index of frame `id`.
    pub(crate) fn frame_index(&self, id: &str) -> Result<usize, ApiError> {
        self.frames.iter().position(|f| f.id == id).ok_or_else(|| ApiError::NotFound(format!("no frame `{id}`")))
    }

    /// Runs `job` on a fresh read-only connection off the async runtime.
    pub(crate) async fn read<T: Send + 'static>(
        &self,
        job: impl FnOnce(&Reader) -> Result<T, ApiError> + Send + 'static,
    ) -> Result<T, ApiError> {
        let path = self.store_path.clone();
        tokio::task::spawn_blocking(move || with_reader(&path, job))
            .await
            .map_err(|e| ApiError::Internal(format!("reader task: {e}")))?
    }

    /// Test `id` reduced (increments through the caches, settlements corrected for apparatus deflection
    /// where the frame is calibrated, then its e–log σ′ curve).
    pub(crate) async fn reduce_test(&self, id: i64) -> Result<queries::TestSummary, ApiError> {
        let (now, commits, caches) = (self.clock.now_us(), self.writer.commits(), self.caches.clone());
        let frames = self.frames.clone();
        self.read(move |conn| queries::reduce_test(conn, &caches, commits, id, now, &frames)).await
    }

    /// Runs a blocking action (the hub and the writer answer synchronously) off the async runtime, and
    /// answers only once everything it wrote, journal entries included, is committed: a client that reads
    /// right after a 201 sees what it created.
    pub(crate) async fn blocking<T: Send + 'static>(
        &self,
        job: impl FnOnce(AppState) -> Result<T, ApiError> + Send + 'static,
    ) -> Result<T, ApiError> {
        let state = self.clone();
        tokio::task::spawn_blocking(move || {
            let out = job(state.clone());
            // Journal entries an action queued are committed too before the answer goes out.
            state.writer.sync()?;
            out
        })
        .await
        .map_err(|e| ApiError::Internal(format!("action task: {e}")))?
    }
}

async fn healthz(State(state): State<AppState>) -> impl IntoResponse {
    let now = state.clock.now_us();
    Json(serde_json::json!({
        "status": "ok",
        "now": rfc3339(now),
        "uptime_s": (now - state.started_us) as f64 / 1e6,
        "simulated_time": state.clock.is_simulated(),
        "clock_speed": state.clock.speed(),
        "frames": state.live.snapshot().len(),
        // The lab's display units: value shown = API value × per_stored.
        "display": state.display,
        // Every unit the dashboard's switch offers, with its factor.
        "display_options": oedolog_core::units::OPTIONS,
        // Open alarms about the lab as a whole (a bus, an outlet): every page shows them as a banner.
        "lab_alarms": state.alarms.of_lab(),
    }))
}

/// After any request that may have changed something (not GET or HEAD), the held frames overview goes,
/// so whoever acted sees the effect on the next read.
async fn drop_snapshots_after_actions(
    State(state): State<AppState>,
    request: axum::extract::Request,
    next: axum::middleware::Next,
) -> axum::response::Response {
    let acts = !matches!(*request.method(), axum::http::Method::GET | axum::http::Method::HEAD);
    let response = next.run(request).await;
    if acts {
        state.caches.frames.clear();
    }
    response
}

/// `GET /api/me`: who the request's credentials name and what they may do, so a page can offer only the
/// actions its user may take. Without configured users everyone on loopback may act.
async fn me(State(state): State<AppState>, caller: Option<axum::Extension<Caller>>) -> impl IntoResponse {
    let (name, role) = match &caller {
        Some(c) => (Some(c.name.clone()), c.role),
        None => (None, crate::config::Role::Operator),
    };
    Json(serde_json::json!({
        "name": name,
        "role": role,
        "may_act": role >= crate::config::Role::Operator,
        // Adjusting a construction or approving a test needs a signed-in engineer: an approval names a person.
        "may_review": caller.is_some() && role == crate::config::Role::Engineer,
        "authentication": !state.users.is_empty(),
    }))
}

/// The whole HTTP surface: every resource's routes behind the access check.
pub fn router(state: AppState) -> Router {
    Router::new()
        .route("/healthz", get(healthz))
        .route("/api/me", get(me))
        .merge(frames::router())
        .merge(alarms::router())
        .merge(lab_book::router())
        .merge(increments::router())
        .merge(events::router())
        .merge(export::router())
        .merge(metrics::router())
        .merge(overview::router())
        .merge(report::router())
        .merge(review::router())
        .merge(web::router())
        .fallback(web::fallback)
        .layer(axum::middleware::from_fn_with_state(state.clone(), auth::require_user))
        .layer(axum::middleware::from_fn_with_state(state.clone(), drop_snapshots_after_actions))
        // Outside the access check and the snapshot drop: a foreign or cross-site request changes nothing.
        .layer(axum::middleware::from_fn_with_state(state.clone(), guard::refuse_foreign))
        .layer(axum::middleware::from_fn(guard::security_headers))
        // gzip where the client asks for it (the page is ~116 KB); the default predicate leaves event streams,
        // images and tiny answers alone, so SSE is never buffered.
        .layer(tower_http::compression::CompressionLayer::new())
        .with_state(state)
}
