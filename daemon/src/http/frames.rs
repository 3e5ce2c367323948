//! Frames: `GET /api/frames` (every frame's live state — a contract other tests rely on: keep the keys) and
//! `GET /api/frames/{id}` (the same plus the frame's configured loading, its running test with the
//! specimen data and the test's increments). Read-only.

use std::time::Duration;

use axum::Router;
use axum::body::Bytes;
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{IntoResponse, Json};
use axum::routing::get;
use serde::Serialize;

use super::queries::{self, IncrementView, TestRow};
use super::{ApiError, AppState};
use crate::acquire::{Counters, LiveFrame};
use crate::clock::rfc3339;
use crate::config::Loading;
use crate::lab::RunningTest;
use crate::watch::WatchStatus;

/// One frame in `GET /api/frames`.
#[derive(Debug, Serialize)]
pub struct FrameView {
    /// Config id.
    pub id: String,
    /// Name.
    pub name: String,
    /// `offline`, `idle`, `seating`, `armed`, `primary`, `ready` or `finished`.
    pub state: String,
    /// Latest displacement, mm (compression positive).
    pub displacement_mm: Option<f64>,
    /// Latest load, kN.
    pub load_kn: Option<f64>,
    /// Latest temperature, °C.
    pub temperature_c: Option<f64>,
    /// The newest valid reading, RFC 3339 UTC.
    pub last_reading_at: Option<String>,
    /// Seconds since that reading (clock time).
    pub reading_age_s: Option<f64>,
    /// Whether its bus link is up.
    pub bus_up: bool,
    /// The running test, if any.
    pub test: Option<RunningTest>,
    /// Seconds into the current increment.
    pub increment_elapsed_s: Option<f64>,
    /// The live watch of the current increment: constructions so far, ETA to ready.
    pub watch: Option<WatchStatus>,
    /// Device counters.
    pub counters: Counters,
    /// Its open alarms (raised by the daemon; acknowledged ones included, marked so).
    pub alarms: Vec<crate::alarms::AlarmView>,
}

/// The frame state: `offline` when no valid reading came within `stale_after` (or the bus is down), else
/// the running test's state, else `idle`.
pub fn frame_state(live: &LiveFrame, test: Option<&RunningTest>, now_us: i64, stale_after: Duration) -> String {
    let fresh = live.last_reading_us().is_some_and(|at| now_us - at <= stale_after.as_micros() as i64);
    if !fresh || !live.bus_up {
        "offline".into()
    } else {
        test.map_or_else(|| "idle".into(), |t| t.state.name().into())
    }
}

pub(crate) fn views(state: &AppState) -> Vec<FrameView> {
    let now = state.clock.now_us();
    let tests = state.lab.snapshot();
    let watches = state.hub.status();
    let alarms = state.alarms.open();
    state
        .live
        .snapshot()
        .into_iter()
        .enumerate()
        .map(|(i, f)| {
            let test = tests.get(i).cloned().flatten();
            let last = f.last_reading_us();
            FrameView {
                state: frame_state(
                    &f,
                    test.as_ref(),
                    now,
                    state.stale_after.get(i).copied().unwrap_or(Duration::from_secs(30)),
                ),
                displacement_mm: f.displacement.map(|(_, v)| v),
                load_kn: f.load.map(|(_, v)| v),
                temperature_c: f.temperature.map(|(_, v)| v),
                last_reading_at: last.map(rfc3339),
                reading_age_s: last.map(|at| (now - at) as f64 / 1e6),
                bus_up: f.bus_up,
                increment_elapsed_s: test.as_ref().and_then(|t| t.onset_us).map(|t0| (now - t0) as f64 / 1e6),
                watch: test.as_ref().and(watches.get(i)).map(|(_, w)| w.clone()),
                test,
                counters: f.counters,
                alarms: alarms.iter().filter(|a| a.frame.as_deref() == Some(f.id.as_str())).cloned().collect(),
                id: f.id,
                name: f.name,
            }
        })
        .collect()
}

/// `GET /api/frames`: built from memory at most every [`super::cache::FRAMES_TTL`] and shared by every
/// dashboard meanwhile (an operator action drops it at once).
async fn list(State(state): State<AppState>) -> Result<impl IntoResponse, ApiError> {
    let body = state.caches.frames.get_or_build(|| {
        serde_json::to_vec(&views(&state)).map(Bytes::from).map_err(|e| format!("frames overview: {e}"))
    });
    json_bytes(body.map_err(ApiError::Internal)?)
}

/// A response of already serialised JSON.
pub(crate) fn json_bytes(body: Bytes) -> Result<axum::response::Response, ApiError> {
    Ok(([(header::CONTENT_TYPE, "application/json")], body).into_response())
}

/// How a frame loads the specimen, from its configuration.
#[derive(Debug, Serialize)]
pub(crate) struct FrameConfigView {
    /// `dead-weight`, `pneumatic` or `motor`.
    pub loading: &'static str,
    /// Force on the specimen per weight on the hanger (dead-weight frames only).
    pub lever_ratio: Option<f64>,
    /// Inside area of the ring, mm².
    pub ring_area_mm2: f64,
    /// The equivalent ring diameter, mm.
    pub ring_diameter_mm: f64,
    /// Whether oedolog may ever change this frame's load: never (dead weights are put on by a person,
    /// and other systems are not commanded by this version either).
    pub load_commanded: bool,
}

/// `GET /api/frames/{id}`.
#[derive(Debug, Serialize)]
pub(crate) struct FrameDetail {
    /// The overview object.
    #[serde(flatten)]
    pub frame: FrameView,
    /// The frame's configured facts.
    pub config: FrameConfigView,
    /// The running test (else the latest) with its specimen data.
    pub test_record: Option<TestRow>,
    /// Its increments.
    pub increments: Vec<IncrementView>,
}

pub(crate) fn config_view(loading: Loading, ring_area_mm2: f64) -> FrameConfigView {
    let (name, lever_ratio) = match loading {
        Loading::DeadWeight { lever_ratio } => ("dead-weight", Some(lever_ratio)),
        Loading::Pneumatic => ("pneumatic", None),
        Loading::Motor => ("motor", None),
    };
    FrameConfigView {
        loading: name,
        lever_ratio,
        ring_area_mm2,
        ring_diameter_mm: (4.0 * ring_area_mm2 / std::f64::consts::PI).sqrt(),
        load_commanded: false,
    }
}

async fn detail(State(state): State<AppState>, Path(id): Path<String>) -> Result<Json<FrameDetail>, ApiError> {
    let index = state.frame_index(&id)?;
    let frame = views(&state).into_iter().nth(index).ok_or_else(|| ApiError::NotFound(format!("no frame `{id}`")))?;
    let config = &state.frames[index];
    let config = config_view(config.loading, config.ring_area_mm2);
    let key = state.lab.key(index);
    let (test_record, increments) = state
        .read(move |conn| {
            let test = queries::latest_test(conn, key)?;
            let increments = match &test {
                Some(t) => queries::increments(conn, t.id)?,
                None => Vec::new(),
            };
            Ok((test, increments))
        })
        .await?;
    Ok(Json(FrameDetail { frame, config, test_record, increments }))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/api/frames", get(list)).route("/api/frames/{id}", get(detail))
}
