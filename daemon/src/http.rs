//! HTTP: the JSON API and the pages, as an axum [`Router`] built by [`router`] (tests call it in-process).
//!
//! This first cut serves `GET /api/frames`, `GET /healthz` and a plain overview page at `/`; the full API
//! and dashboard build on it. Nothing here touches a port or SQL directly.

use std::sync::Arc;
use std::time::Duration;

use axum::Router;
use axum::extract::State;
use axum::http::header;
use axum::response::{Html, IntoResponse, Json};
use axum::routing::get;
use serde::Serialize;

use crate::acquire::{Counters, Live, LiveFrame};
use crate::clock::{Clock, rfc3339};
use crate::lab::{Lab, RunningTest};
use crate::watch::{Hub, WatchStatus};

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
}

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
}

/// The frame state: `offline` when no valid reading came within `stale_after` (or the bus is down), else
/// the running test's state, else `idle`.
pub fn frame_state(live: &LiveFrame, test: Option<&RunningTest>, now_us: i64, stale_after: Duration) -> String {
    let fresh = live.last_reading_us().is_some_and(|at| now_us - at <= stale_after.as_micros() as i64);
    if !fresh || !live.bus_up { "offline".into() } else { test.map_or_else(|| "idle".into(), |t| t.state.clone()) }
}

fn views(state: &AppState) -> Vec<FrameView> {
    let now = state.clock.now_us();
    let tests = state.lab.snapshot();
    let watches = state.hub.status();
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
                id: f.id,
                name: f.name,
            }
        })
        .collect()
}

async fn frames(State(state): State<AppState>) -> Json<Vec<FrameView>> {
    Json(views(&state))
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

fn escape(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// A plain overview page until the dashboard lands: every frame, its state and latest values.
async fn overview(State(state): State<AppState>) -> impl IntoResponse {
    let mut rows = String::new();
    for v in views(&state) {
        let value = |x: Option<f64>, digits: usize| x.map_or("—".to_string(), |x| format!("{x:.digits$}"));
        rows += &format!(
            "<tr><td>{}</td><td class=\"s-{}\">{}</td><td>{}</td><td>{} mm</td><td>{} kN</td><td>{}</td><td>{}</td></tr>\n",
            escape(&v.name),
            escape(&v.state),
            escape(&v.state),
            v.test.as_ref().map_or("—".to_string(), |t| format!(
                "{} · step {} · {} kPa",
                escape(&t.specimen),
                t.increment,
                value(t.stress_kpa, 1)
            )),
            value(v.displacement_mm, 3),
            value(v.load_kn, 4),
            match (v.state.as_str(), v.watch.as_ref().and_then(|w| w.ready_eta_us)) {
                ("ready", _) => "ready for the next load".to_string(),
                (_, Some(eta)) if eta > state.clock.now_us() => format!(
                    "{} · ready in ~{:.1} h",
                    v.increment_elapsed_s.map_or("—".to_string(), |s| format!("{:.1} h", s / 3600.0)),
                    (eta - state.clock.now_us()) as f64 / 3.6e9
                ),
                _ => v.increment_elapsed_s.map_or("—".to_string(), |s| format!("{:.1} h", s / 3600.0)),
            },
            v.reading_age_s.map_or("never".to_string(), |s| format!("{s:.0} s ago")),
        );
    }
    let banner = if state.clock.is_simulated() {
        format!(
            "<p class=\"sim\">Simulated time: the clock runs {}× faster than real time. Frames are emulated.</p>",
            state.clock.speed()
        )
    } else {
        String::new()
    };
    let page = format!(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<meta http-equiv=\"refresh\" content=\"2\"><title>oedolog — frames</title><style>\
body{{font-family:system-ui,sans-serif;margin:1.5rem;color:#1d2a30;background:#f6f4ef}}table{{border-collapse:collapse;width:100%}}\
td,th{{padding:.45rem .6rem;border-bottom:1px solid #d9d4c7;text-align:left}}th{{font-weight:600;color:#4a5a60}}\
.sim{{background:#fff3c4;border:1px solid #e0c860;padding:.5rem .8rem;border-radius:.3rem}}\
.s-offline{{color:#9b2c2c}}.s-ready{{color:#1f6f43;font-weight:700}}.s-primary{{color:#2b5d8a}}</style></head><body>\
<h1>oedolog</h1>{banner}<p>Now: {}</p><table><thead><tr><th>Frame</th><th>State</th><th>Test</th><th>Settlement gauge</th><th>Load</th>\
<th>Into increment</th><th>Last reading</th></tr></thead><tbody>{rows}</tbody></table>\
<p><small>Results are proposals for a qualified engineer to review. oedolog never changes the load on a frame.</small></p></body></html>",
        rfc3339(state.clock.now_us()),
    );
    ([(header::CACHE_CONTROL, "no-store")], Html(page))
}

/// The whole HTTP surface.
pub fn router(state: AppState) -> Router {
    Router::new()
        .route("/", get(overview))
        .route("/api/frames", get(frames))
        .route("/healthz", get(healthz))
        .with_state(state)
}
