//! The plain server-rendered overview at `/overview`: every frame, its state and latest values, refreshed
//! every 2 s. It stays useful until the dashboard in `web/` lands, and for screens without JavaScript.

use axum::Router;
use axum::extract::State;
use axum::http::header;
use axum::response::{Html, IntoResponse};
use axum::routing::get;

use super::AppState;
use super::frames::views;
use super::words;
use crate::clock::rfc3339;

/// Frame ids are `[A-Za-z0-9_-]` (the config checks), so nothing needs escaping in a link; anything else is
/// percent-encoded all the same.
fn url_path_escape(id: &str) -> String {
    id.bytes()
        .map(|b| {
            if b.is_ascii_alphanumeric() || b == b'-' || b == b'_' {
                (b as char).to_string()
            } else {
                format!("%{b:02X}")
            }
        })
        .collect()
}

pub(crate) fn escape(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// A date and time to the minute, for a person: "2026-12-03 10:41 UTC".
pub(crate) fn minute(us: i64) -> String {
    minute_text(&rfc3339(us))
}

/// An RFC 3339 stamp of the API to the minute, as [`minute`] writes it.
pub(crate) fn minute_text(stamp: &str) -> String {
    match (stamp.get(..10), stamp.get(11..16)) {
        (Some(day), Some(time)) => format!("{day} {time} UTC"),
        _ => stamp.to_string(),
    }
}

/// The plain overview: every frame with the board's state words, its load step and latest values, each
/// linking to its frame page.
async fn overview(State(state): State<AppState>) -> impl IntoResponse {
    let mut rows = String::new();
    let now = state.clock.now_us();
    for v in views(&state) {
        let value = |x: Option<f64>, digits: usize| x.map_or("—".to_string(), |x| format!("{x:.digits$}"));
        let step = match v.test.as_ref() {
            None => "—".to_string(),
            Some(t) if t.increment == 0 => format!("{} · seating", escape(&t.specimen)),
            Some(t) => format!("{} · load step {} · {} kPa", escape(&t.specimen), t.increment, value(t.stress_kpa, 1)),
        };
        let into = v.increment_elapsed_s.map(words::span);
        let timing = match (v.state.as_str(), v.watch.as_ref()) {
            ("ready", Some(w)) => {
                let done =
                    if v.test.as_ref().is_some_and(|t| t.plan_finished) { "load schedule finished · " } else { "" };
                match w.ready_us {
                    Some(at) => format!("{done}ready for {}", words::span((now - at) as f64 / 1e6)),
                    None => format!("{done}ready"),
                }
            }
            (_, Some(w)) if w.ready_eta_us.is_some_and(|eta| eta > now) => format!(
                "{} in · end of primary in ~{}",
                into.clone().unwrap_or_else(|| "—".into()),
                words::span((w.ready_eta_us.unwrap_or(now) - now) as f64 / 1e6)
            ),
            _ => into.map_or("—".to_string(), |i| format!("{i} in")),
        };
        rows += &format!(
            "<tr><td><a href=\"/frame.html?id={id}\">{}</a></td><td class=\"s-{}\" title=\"{}\">{}</td><td>{step}</td><td>{} mm</td><td>{} kN</td><td>{timing}</td><td>{}</td></tr>\n",
            escape(&v.name),
            escape(&v.state),
            escape(words::state_hint(&v.state)),
            escape(words::state_word(&v.state)),
            value(v.displacement_mm, 3),
            value(v.load_kn, 4),
            v.reading_age_s.map_or("never".to_string(), |s| format!("{} ago", words::span(s))),
            id = url_path_escape(&v.id),
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
<h1>oedolog</h1>{banner}<p>Now: {}</p><table><thead><tr><th>Frame</th><th>State</th><th>Test and load step</th><th>Gauge reading</th><th>Load</th>\
<th>Time in the load step</th><th>Last reading</th></tr></thead><tbody>{rows}</tbody></table>\
<p><small>Results are proposals for a qualified engineer to review. oedolog never changes the load on a frame.</small></p></body></html>",
        minute(state.clock.now_us()),
    );
    ([(header::CACHE_CONTROL, "no-store")], Html(page))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/overview", get(overview))
}
