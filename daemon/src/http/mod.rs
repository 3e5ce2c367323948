//! HTTP: the JSON API, the event stream, CSV exports, metrics and the pages, as one axum [`Router`] built
//! by [`router`] from one `router()` per resource module (tests call it in-process with `oneshot`).
//!
//! Handlers validate every request body and query before anything is stored, act only through the lab
//! book, the watch hub and the store's writer, and read on short-lived read-only connections. Nothing
//! here ever commands a load change: arming an increment records what the operator will put on.

mod auth;
mod body;
mod csv;
mod error;
mod events;
mod export;
mod frames;
mod increments;
mod lab_tests;
mod metrics;
mod overview;
mod queries;
mod report;
mod web;

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
use crate::store::Writer;
use crate::watch::Hub;

pub use auth::{Caller, constant_time_eq};
pub use error::ApiError;
pub use frames::{FrameView, frame_state};
pub use increments::{STANDARD_GRAVITY_M_PER_S2, hanger_stress_kpa};

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
}

impl AppState {
    /// The config index of frame `id`.
    pub(crate) fn frame_index(&self, id: &str) -> Result<usize, ApiError> {
        self.frames.iter().position(|f| f.id == id).ok_or_else(|| ApiError::NotFound(format!("no frame `{id}`")))
    }

    /// Runs `job` on a fresh read-only connection off the async runtime.
    pub(crate) async fn read<T: Send + 'static>(
        &self,
        job: impl FnOnce(&rusqlite::Connection) -> Result<T, ApiError> + Send + 'static,
    ) -> Result<T, ApiError> {
        let path = self.store_path.clone();
        tokio::task::spawn_blocking(move || {
            let conn = crate::store::reader(&path)?;
            job(&conn)
        })
        .await
        .map_err(|e| ApiError::Internal(format!("reader task: {e}")))?
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
    }))
}

/// The whole HTTP surface: every resource's routes behind the access check.
pub fn router(state: AppState) -> Router {
    Router::new()
        .route("/healthz", get(healthz))
        .merge(frames::router())
        .merge(lab_tests::router())
        .merge(increments::router())
        .merge(events::router())
        .merge(export::router())
        .merge(metrics::router())
        .merge(overview::router())
        .merge(report::router())
        .merge(web::router())
        .fallback(web::fallback)
        .layer(axum::middleware::from_fn_with_state(state.clone(), auth::require_user))
        .with_state(state)
}
