//! `/metrics` in the Prometheus text exposition format (version 0.0.4): readings per frame, bus errors by
//! frame and kind, frames by state, the store's backlog, uptime. Read-only; counters come from the live
//! view, so they restart at zero with the daemon.

use std::fmt::Write;

use axum::Router;
use axum::extract::State;
use axum::http::header;
use axum::response::IntoResponse;
use axum::routing::get;

use super::AppState;
use super::frames::views;

/// Every state a frame can be in, so each series exists even at zero.
pub(crate) const STATES: [&str; 7] = ["offline", "idle", "seating", "armed", "primary", "ready", "finished"];

/// A label value escaped as the exposition format says: backslash, double quote and line feed.
fn label(value: &str) -> String {
    value.replace('\\', "\\\\").replace('"', "\\\"").replace('\n', "\\n")
}

pub(crate) fn render(state: &AppState) -> String {
    let frames = views(state);
    let mut out = String::new();
    let _ = writeln!(out, "# HELP oedolog_readings_total Valid readings handed to the store since the daemon started.");
    let _ = writeln!(out, "# TYPE oedolog_readings_total counter");
    for f in &frames {
        let _ = writeln!(out, "oedolog_readings_total{{frame=\"{}\"}} {}", label(&f.id), f.counters.readings);
    }
    let _ = writeln!(out, "# HELP oedolog_bus_requests_total Requests sent to the frame's devices (each attempt).");
    let _ = writeln!(out, "# TYPE oedolog_bus_requests_total counter");
    for f in &frames {
        let _ = writeln!(out, "oedolog_bus_requests_total{{frame=\"{}\"}} {}", label(&f.id), f.counters.requests);
    }
    let _ = writeln!(out, "# HELP oedolog_bus_errors_total Failed requests and refused values, by kind.");
    let _ = writeln!(out, "# TYPE oedolog_bus_errors_total counter");
    for f in &frames {
        let c = &f.counters;
        for (kind, n) in [
            ("timeout", c.timeouts),
            ("crc", c.crc_errors),
            ("exception", c.exceptions),
            ("bad_frame", c.bad_frames),
            ("refused_value", c.refused_values),
        ] {
            let _ = writeln!(out, "oedolog_bus_errors_total{{frame=\"{}\",kind=\"{kind}\"}} {n}", label(&f.id));
        }
    }
    let _ = writeln!(out, "# HELP oedolog_frames Frames in each state.");
    let _ = writeln!(out, "# TYPE oedolog_frames gauge");
    for s in STATES {
        let n = frames.iter().filter(|f| f.state == s).count();
        let _ = writeln!(out, "oedolog_frames{{state=\"{s}\"}} {n}");
    }
    let _ = writeln!(out, "# HELP oedolog_store_backlog_readings Readings queued for the store but not yet committed.");
    let _ = writeln!(out, "# TYPE oedolog_store_backlog_readings gauge");
    let _ = writeln!(out, "oedolog_store_backlog_readings {}", state.writer.backlog());
    let open = state.alarms.open();
    let counts = state.alarms.counts();
    let _ = writeln!(out, "# HELP oedolog_alarms_open Open alarms by code and whether someone acknowledged them.");
    let _ = writeln!(out, "# TYPE oedolog_alarms_open gauge");
    for code in oedolog_core::alarms::Code::ALL {
        for acknowledged in [false, true] {
            let n =
                open.iter().filter(|a| a.code == code.name() && a.acknowledged_by.is_some() == acknowledged).count();
            let _ =
                writeln!(out, "oedolog_alarms_open{{code=\"{}\",acknowledged=\"{acknowledged}\"}} {n}", code.name());
        }
    }
    for (name, help, map) in [
        ("oedolog_alarms_raised_total", "Alarms raised since the daemon started, by code.", &counts.raised),
        ("oedolog_alarms_cleared_total", "Alarms cleared since the daemon started, by code.", &counts.cleared),
    ] {
        let _ = writeln!(out, "# HELP {name} {help}");
        let _ = writeln!(out, "# TYPE {name} counter");
        for code in oedolog_core::alarms::Code::ALL {
            let _ = writeln!(out, "{name}{{code=\"{}\"}} {}", code.name(), map.get(code.name()).copied().unwrap_or(0));
        }
    }
    if let Some(offset) = state.clock.wall_offset_s() {
        let _ = writeln!(
            out,
            "# HELP oedolog_clock_wall_offset_seconds System clock minus the steady clock the readings are stamped with (a step shows here and as a clock-step journal entry)."
        );
        let _ = writeln!(out, "# TYPE oedolog_clock_wall_offset_seconds gauge");
        let _ = writeln!(out, "oedolog_clock_wall_offset_seconds {offset}");
    }
    let _ = writeln!(
        out,
        "# HELP oedolog_http_connections_open HTTP connections open now (capped; at the cap the quietest gives way)."
    );
    let _ = writeln!(out, "# TYPE oedolog_http_connections_open gauge");
    let _ = writeln!(out, "oedolog_http_connections_open {}", state.connections.get());
    let _ = writeln!(
        out,
        "# HELP oedolog_http_connections_evicted_total Quiet HTTP connections closed to make room for new ones."
    );
    let _ = writeln!(out, "# TYPE oedolog_http_connections_evicted_total counter");
    let _ = writeln!(out, "oedolog_http_connections_evicted_total {}", state.connections.evicted());
    let _ = writeln!(
        out,
        "# HELP oedolog_http_connections_refused_total HTTP connections answered 503 because every open one was busy."
    );
    let _ = writeln!(out, "# TYPE oedolog_http_connections_refused_total counter");
    let _ = writeln!(out, "oedolog_http_connections_refused_total {}", state.connections.refused());
    let _ = writeln!(out, "# HELP oedolog_event_streams_open Event streams (/api/stream) open now.");
    let _ = writeln!(out, "# TYPE oedolog_event_streams_open gauge");
    let _ = writeln!(out, "oedolog_event_streams_open {}", state.streams.open());
    render_publish(state, &mut out);
    let _ = writeln!(out, "# HELP oedolog_uptime_seconds Clock seconds since the daemon started.");
    let _ = writeln!(out, "# TYPE oedolog_uptime_seconds gauge");
    let _ = writeln!(out, "oedolog_uptime_seconds {}", (state.clock.now_us() - state.started_us) as f64 / 1e6);
    out
}

/// Each `[[publish.mqtt]]` broker: connected, acknowledged messages and readings, failures, lag, alarm.
fn render_publish(state: &AppState, out: &mut String) {
    if state.publish.brokers.is_empty() {
        return;
    }
    type Series = (&'static str, &'static str, &'static str, fn(&crate::publish::BrokerStats) -> f64);
    let series: [Series; 6] = [
        ("oedolog_publish_connected", "gauge", "1 while a session with the MQTT broker is up.", |b| {
            f64::from(u8::from(b.connected()))
        }),
        (
            "oedolog_publish_messages_total",
            "counter",
            "Messages the broker acknowledged since the daemon started.",
            |b| b.messages() as f64,
        ),
        (
            "oedolog_publish_readings_total",
            "counter",
            "Readings the broker acknowledged since the daemon started.",
            |b| b.readings() as f64,
        ),
        ("oedolog_publish_errors_total", "counter", "Failed connections and sessions since the daemon started.", |b| {
            b.errors() as f64
        }),
        (
            "oedolog_publish_lag_seconds",
            "gauge",
            "Real seconds since the oldest stored reading or journal entry the broker has not acknowledged was stored (0: caught up).",
            |b| b.lag_s(),
        ),
        (
            "oedolog_publish_lag_alarm",
            "gauge",
            "1 while the publish-lag alarm is raised (lag over lag_alarm_s).",
            |b| f64::from(u8::from(b.lag_alarm())),
        ),
    ];
    for (name, kind, help, value) in series {
        let _ = writeln!(out, "# HELP {name} {help}");
        let _ = writeln!(out, "# TYPE {name} {kind}");
        for b in &state.publish.brokers {
            let _ = writeln!(out, "{name}{{broker=\"{}\"}} {}", label(&b.name), value(b));
        }
    }
}

async fn metrics(State(state): State<AppState>) -> impl IntoResponse {
    ([(header::CONTENT_TYPE, "text/plain; version=0.0.4; charset=utf-8")], render(&state))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/metrics", get(metrics))
}
