//! The fleet board over HTTP: `GET /api/fleet` (JSON) and `GET /` (a page rendered here, no scripts,
//! reloading itself every 10 s). Read-only: every method but GET and HEAD is refused with 405 before
//! anything else runs. The same `[[http.user]]` tables let people in (every role may read), the same `Host`
//! check and security headers as the daemon's own HTTP apply. Every string on the page came from a broker
//! and is HTML-escaped; links are only the `http(s)://` ones [`super`] kept.

use std::sync::{Arc, Mutex};

use axum::Router;
use axum::body::Bytes;
use axum::extract::{Request, State};
use axum::http::{HeaderValue, Method, StatusCode, header};
use axum::middleware::Next;
use axum::response::{Html, IntoResponse, Json, Response};
use axum::routing::get;

use super::{Fleet, FleetView, FrameView, LabView};
use crate::clock::Clock;
use crate::config::User;
use crate::http::{ApiError, Guard, authenticate, check_request, escape_html, security_headers};

/// What the board's handlers share.
#[derive(Clone)]
pub struct BoardState {
    /// The latest of every lab, filled by the subscribers.
    pub fleet: Arc<Mutex<Fleet>>,
    /// Now, for quiet labs and "since".
    pub clock: Arc<dyn Clock>,
    /// `[[http.user]]`; none: open (loopback only, as the daemon).
    pub users: Arc<Vec<User>>,
    /// The `Host` check.
    pub guard: Arc<Guard>,
    /// The last view and its renderings, shared by every request while they are current.
    pub rendered: Arc<Mutex<Rendered>>,
}

/// The board's last view, its JSON and its page, for as long as nothing new came from a broker and the
/// clock is in the same second: 50 clients reloading a board of 1 600 frames then cost one rendering, not
/// 50 (each is about 3 ms of CPU and 0.5 MB of page; `tests/bench/mqtt-fleet.sh` measured the p99 of `GET /`
/// at 50 connections near 50 renderings long without it).
#[derive(Default)]
pub struct Rendered {
    /// (fleet changes, second of the clock) of the view.
    key: Option<(u64, i64)>,
    view: Option<Arc<FleetView>>,
    json: Option<Bytes>,
    html: Option<Bytes>,
}

impl BoardState {
    /// The current view, made again only when something changed or the second turned.
    fn view(&self, rendered: &mut Rendered) -> Arc<FleetView> {
        let now = self.clock.now_us();
        let fleet = self.fleet.lock().expect("the fleet board");
        let key = (fleet.changes(), now.div_euclid(1_000_000));
        if rendered.key != Some(key) || rendered.view.is_none() {
            *rendered = Rendered { key: Some(key), view: Some(Arc::new(fleet.view(now))), json: None, html: None };
        }
        rendered.view.clone().expect("made above")
    }

    fn json(&self) -> Bytes {
        let mut rendered = self.rendered.lock().expect("the board's renderings");
        let view = self.view(&mut rendered);
        rendered.json.get_or_insert_with(|| Bytes::from(serde_json::to_vec(&*view).unwrap_or_default())).clone()
    }

    fn html(&self) -> Bytes {
        let mut rendered = self.rendered.lock().expect("the board's renderings");
        let view = self.view(&mut rendered);
        rendered.html.get_or_insert_with(|| Bytes::from(render(&view))).clone()
    }
}

/// `GET /`, `GET /api/fleet`, `GET /healthz`, behind the read-only, host and access checks.
pub fn router(state: BoardState) -> Router {
    Router::new()
        .route("/", get(page))
        .route("/api/fleet", get(api))
        .route("/healthz", get(|| async { "ok" }))
        .layer(axum::middleware::from_fn_with_state(state.clone(), require_user))
        .layer(axum::middleware::from_fn_with_state(state.clone(), refuse_foreign))
        // Outermost check: a write is refused whoever sends it.
        .layer(axum::middleware::from_fn(read_only))
        .layer(axum::middleware::from_fn(security_headers))
        // The page of a big fleet is mostly repeated markup: gzip makes it a phone's download.
        .layer(tower_http::compression::CompressionLayer::new())
        .with_state(state)
}

async fn read_only(request: Request, next: Next) -> Response {
    if matches!(*request.method(), Method::GET | Method::HEAD) {
        return next.run(request).await;
    }
    let body = serde_json::json!({
        "error": format!("{} refused: the fleet board is read-only; act on the lab's own dashboard", request.method()),
        "field": "method",
        "allowed": "GET, HEAD",
    });
    let mut response = (StatusCode::METHOD_NOT_ALLOWED, Json(body)).into_response();
    response.headers_mut().insert(header::ALLOW, HeaderValue::from_static("GET, HEAD"));
    response
}

async fn refuse_foreign(State(state): State<BoardState>, request: Request, next: Next) -> Response {
    match check_request(&state.guard, &request) {
        Ok(()) => next.run(request).await,
        Err(error) => error.into_response(),
    }
}

async fn require_user(State(state): State<BoardState>, request: Request, next: Next) -> Response {
    if state.users.is_empty() {
        return next.run(request).await;
    }
    let authorization = request.headers().get(header::AUTHORIZATION).and_then(|v| v.to_str().ok());
    // Every role reads; there is nothing else to do here.
    match authenticate(&state.users, authorization) {
        Some(_) => next.run(request).await,
        None => ApiError::Unauthorized.into_response(),
    }
}

async fn api(State(state): State<BoardState>) -> Response {
    let body = tokio::task::spawn_blocking(move || state.json()).await.unwrap_or_default();
    ([(header::CONTENT_TYPE, HeaderValue::from_static("application/json"))], body).into_response()
}

async fn page(State(state): State<BoardState>) -> Html<Bytes> {
    Html(tokio::task::spawn_blocking(move || state.html()).await.unwrap_or_default())
}

/// A span of time for a person: `45 s`, `12 min`, `3 h 05 min`, `2 d 4 h`.
pub fn span(us: i64) -> String {
    let s = us.max(0) / 1_000_000;
    match s {
        0..60 => format!("{s} s"),
        60..3_600 => format!("{} min", s / 60),
        3_600..86_400 => format!("{} h {:02} min", s / 3_600, s % 3_600 / 60),
        _ => format!("{} d {} h", s / 86_400, s % 86_400 / 3_600),
    }
}

/// What a need asks of a person, in the board's words.
fn need_text(need: &str, f: &FrameView, quiet_after_s: u64) -> String {
    match need {
        "ready" => "load step looks complete: review it on the lab's dashboard".into(),
        "schedule-finished" => "last load step of the schedule reached".into(),
        "alarm" if f.open_alarms.is_empty() => "open alarm".into(),
        "alarm" => format!("open alarm: {}", f.open_alarms.join("; ")),
        "offline" => "frame not answering during a test".into(),
        "lab-offline" => "lab PC off the broker (its last will): this state may be stale".into(),
        "lab-quiet" => format!("no word from the lab for over {quiet_after_s} s: this state may be stale"),
        other => other.to_string(),
    }
}

fn link(dashboard: Option<&str>) -> String {
    match dashboard {
        Some(url) => format!("<a href=\"{}\" rel=\"noreferrer\">lab dashboard</a>", escape_html(url)),
        None => "<span class=\"dim\">no link given</span>".into(),
    }
}

fn lab_row(l: &LabView, now_us: i64) -> String {
    let (class, sign) = match l.status {
        "offline" => ("down", "OFFLINE — last will from the broker"),
        "quiet" => ("down", "QUIET — no state lately"),
        _ => ("up", "online"),
    };
    format!(
        "<tr class=\"{class}\"><td>{}</td><td class=\"dim\">{}</td><td><b>{sign}</b></td><td>{} ago<br><span class=\"dim\">{}</span></td><td>{}</td><td>{}</td></tr>\n",
        escape_html(&l.lab),
        escape_html(&l.prefix),
        span(now_us - l.since_us),
        escape_html(&crate::http::minute_text(&l.since)),
        l.frames,
        link(l.dashboard.as_deref()),
    )
}

fn frame_row(f: &FrameView, now_us: i64, quiet_after_s: u64) -> String {
    let needs = if f.needs.is_empty() {
        "<span class=\"dim\">nothing asked</span>".to_string()
    } else {
        f.needs.iter().map(|n| escape_html(&need_text(n, f, quiet_after_s))).collect::<Vec<_>>().join("<br>")
    };
    let test = match (&f.specimen, f.load_step, f.stress_kpa) {
        (None, None, None) => "<span class=\"dim\">no test</span>".to_string(),
        (specimen, step, stress) => {
            let mut parts = Vec::new();
            if let Some(s) = specimen {
                parts.push(escape_html(s));
            }
            match step {
                Some(0) => parts.push("seating".to_string()),
                Some(n) => parts.push(format!("load step {n}")),
                None => {}
            }
            if let Some(kpa) = stress {
                parts.push(format!("{kpa:.1} kPa"));
            }
            if let Some(eta) = &f.ready_eta {
                parts.push(format!("ready expected {}", escape_html(eta)));
            }
            parts.join(" · ")
        }
    };
    let class = match f.rank {
        0 => "r0",
        1 => "r1",
        2 => "r2",
        _ => "r3",
    };
    let frame = match &f.name {
        Some(name) if !name.is_empty() && *name != f.frame => {
            format!("{} <span class=\"dim\">({})</span>", escape_html(name), escape_html(&f.frame))
        }
        _ => escape_html(&f.frame),
    };
    format!(
        "<tr class=\"{class}\"><td>{}</td><td>{frame}</td><td><b>{}</b></td><td>{needs}</td><td>{} ago<br><span class=\"dim\">{}</span></td><td>{test}</td><td>{}</td></tr>\n",
        escape_html(&f.lab),
        // The dashboard's words for the lab's state codes (an unknown code shows as sent, escaped).
        escape_html(crate::http::state_word(&f.state)),
        span(now_us - f.since_us),
        escape_html(&crate::http::minute_text(&f.since)),
        link(f.dashboard.as_deref()),
    )
}

const STYLE: &str = "body{font:15px/1.4 system-ui,sans-serif;margin:1.2rem;color:#1d232a}\
table{border-collapse:collapse;width:100%;margin-bottom:1.6rem}th,td{padding:.35rem .6rem;text-align:left;\
vertical-align:top;border-bottom:1px solid #d5d9de}th{font-size:.8rem;text-transform:uppercase;color:#56606b}\
.dim{color:#6b7580;font-size:.85rem}tr.down td{background:#fde3e0}tr.r0 td:first-child{border-left:6px solid #2f7d32}\
tr.r1 td:first-child{border-left:6px solid #c62828}tr.r2 td:first-child{border-left:6px solid #8a6d00}\
tr.r3 td:first-child{border-left:6px solid #c9ced4}\
.alert{background:#fde3e0;border:2px solid #c62828;padding:.5rem .8rem;font-weight:600}\
@media (max-width:600px){body{margin:.6rem}thead{display:none}table,tbody,tr,td{display:block}\
tr{border-bottom:1px solid #d5d9de;padding:.3rem 0}td{border:none;padding:.1rem .4rem}td:first-child{font-weight:600}}";

/// The board as one HTML page.
pub fn render(view: &FleetView) -> String {
    let now_us = view.at_us;
    let down = view.labs.iter().filter(|l| l.status != "online").count();
    let mut out = String::with_capacity(4096 + 600 * view.frames.len());
    out += "<!doctype html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
<meta http-equiv=\"refresh\" content=\"10\"><meta name=\"viewport\" content=\"width=device-width\">\
<title>oedolog fleet</title><style>";
    out += STYLE;
    out += "</style></head><body>\n";
    out += &format!(
        "<h1>oedolog fleet</h1>\n<p class=\"dim\">{} lab(s), {} frame(s), {down} lab(s) not online · as of {} · reloads every 10 s · read-only: act on each lab's own dashboard</p>\n",
        view.labs.len(),
        view.frames.len(),
        escape_html(&crate::http::minute_text(&view.at)),
    );
    for b in view.brokers.iter().filter(|b| !b.connected) {
        out += &format!(
            "<p class=\"alert\">The board itself is not connected to {} (prefix {}) since {}: labs read there only look quiet.</p>\n",
            escape_html(&b.url),
            escape_html(&b.prefix),
            escape_html(&crate::http::minute_text(&b.since)),
        );
    }
    out += "<h2>Frames, who needs a person first</h2>\n<table><thead><tr><th>Lab</th><th>Frame</th><th>State</th><th>What needs doing</th><th>Since</th><th>Test</th><th>Link</th></tr></thead><tbody>\n";
    for f in &view.frames {
        out += &frame_row(f, now_us, view.quiet_after_s);
    }
    if view.frames.is_empty() {
        out += "<tr><td colspan=\"7\" class=\"dim\">no frame state heard yet</td></tr>\n";
    }
    out += "</tbody></table>\n<h2>Labs</h2>\n<table><thead><tr><th>Lab</th><th>Prefix</th><th>Status</th><th>Since</th><th>Frames</th><th>Link</th></tr></thead><tbody>\n";
    for l in &view.labs {
        out += &lab_row(l, now_us);
    }
    out += "</tbody></table>\n";
    let i = view.ignored;
    if i.unexpected_topic + i.malformed + i.over_limit > 0 {
        out += &format!(
            "<p class=\"dim\">messages ignored: {} on unexpected topics, {} malformed, {} over the limits</p>\n",
            i.unexpected_topic, i.malformed, i.over_limit
        );
    }
    out += "</body></html>\n";
    out
}

/// A fleet board serving and its subscribers running.
pub struct RunningBoard {
    /// Where the board listens (the real port when the configuration said 0).
    pub http_addr: std::net::SocketAddr,
    tasks: Vec<tokio::task::JoinHandle<()>>,
}

impl RunningBoard {
    /// Stops the server and the subscribers.
    pub fn stop(self) {
        for t in self.tasks {
            t.abort();
        }
    }
}

/// Starts the subscribers of `config.fleet` and the board on `config.http.listen`. Without
/// `[[http.user]]` only a loopback address is allowed, as for the daemon.
pub async fn start(config: &crate::config::Config) -> anyhow::Result<RunningBoard> {
    let fleet_config = config.fleet.as_ref().ok_or_else(|| anyhow::anyhow!("the configuration has no [fleet]"))?;
    let listen = config.http.listen;
    if config.http.users.is_empty() && !listen.ip().is_loopback() {
        anyhow::bail!(
            "http.listen = {listen} is not a loopback address and no [[http.user]] is configured: listen on 127.0.0.1 (or ::1), or add [[http.user]] tables with name, role and token"
        );
    }
    let clock: Arc<dyn Clock> = Arc::new(crate::clock::SteadyClock::system());
    let fleet = Arc::new(Mutex::new(Fleet::new(fleet_config.quiet_after)));
    let listener = tokio::net::TcpListener::bind(listen)
        .await
        .map_err(|e| anyhow::anyhow!("http.listen = {listen}: cannot listen ({e})"))?;
    let http_addr = listener.local_addr()?;
    let guard = Guard::new(listen, config.http.public_origins.clone());
    guard.bound(http_addr);
    let state = BoardState {
        fleet: fleet.clone(),
        clock: clock.clone(),
        users: Arc::new(config.http.users.clone()),
        guard: Arc::new(guard),
        rendered: Default::default(),
    };
    let mut tasks = super::subscribe::start(&fleet_config.brokers, fleet, clock);
    let app = router(state);
    // The daemon's server: a cap on connections (the quietest gives way), deadlines for headers and idle
    // keep-alive.
    let connections = Arc::new(crate::http::ConnectionCount::default());
    tasks.push(tokio::spawn(crate::http::serve(listener, app, crate::http::ServeLimits::default(), connections)));
    Ok(RunningBoard { http_addr, tasks })
}
