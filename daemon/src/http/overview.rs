//! The plain server-rendered overview at `/overview`: every frame, its state and latest values, refreshed
//! every 2 s. It stays useful until the dashboard in `web/` lands, and for screens without JavaScript.

use axum::Router;
use axum::extract::State;
use axum::http::header;
use axum::response::{Html, IntoResponse};
use axum::routing::get;

use super::AppState;
use super::frames::views;
use crate::clock::rfc3339;

pub(crate) fn escape(text: &str) -> String {
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

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/overview", get(overview))
}
