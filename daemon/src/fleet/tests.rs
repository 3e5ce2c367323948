//! The fleet state fed payloads as the publisher sends them (README, "Publishing to MQTT"), at chosen
//! instants: the order across labs, a last will, a quiet lab, and untrusted input ignored and counted.

use std::time::Duration;

use super::*;

const P: &str = "soil-labs";
const S: i64 = 1_000_000;
/// 2026-12-04T00:00:00Z in µs (computed: 20 791 days × 86 400 s).
const T0: i64 = 1_796_342_400 * S;

fn status(lab: &str, status: &str) -> Vec<u8> {
    format!(r#"{{"status":"{status}","lab":"{lab}","dashboard":"http://{lab}.example:8321/","frames":[]}}"#)
        .into_bytes()
}

fn state(state: &str, attention: &[&str]) -> Vec<u8> {
    serde_json::json!({
        "lab": "x", "frame": "f", "name": "Frame", "state": state, "attention": attention,
        "test": {"specimen": "BH1-3", "load_step": 4, "stress_kpa": 200.0},
        "alarms": if attention.contains(&"alarm") {
            serde_json::json!([{"code": "travel", "message": "gauge near its end", "acknowledged_by": null}])
        } else { serde_json::json!([]) },
    })
    .to_string()
    .into_bytes()
}

fn order(fleet: &Fleet, now: i64) -> Vec<String> {
    fleet.view(now).frames.iter().map(|f| format!("{}/{}", f.lab, f.frame)).collect()
}

fn board() -> Fleet {
    Fleet::new(Duration::from_secs(300))
}

#[test]
fn frames_are_ordered_ready_then_alarm_then_offline_then_the_rest_across_labs_longest_first() {
    let mut f = board();
    for lab in ["north", "south"] {
        f.accept(P, &format!("{P}/{lab}/status"), &status(lab, "online"), T0).unwrap();
    }
    f.accept(P, &format!("{P}/north/f1/state"), &state("loading", &[]), T0).unwrap();
    f.accept(P, &format!("{P}/south/f2/state"), &state("loading", &["alarm"]), T0 + S).unwrap();
    f.accept(P, &format!("{P}/north/f3/state"), &state("ready", &["ready"]), T0 + 2 * S).unwrap();
    f.accept(P, &format!("{P}/south/f4/state"), &state("offline", &["offline"]), T0 + 3 * S).unwrap();
    f.accept(P, &format!("{P}/south/f5/state"), &state("ready", &["ready"]), T0 + S).unwrap();
    f.accept(P, &format!("{P}/north/f6/state"), &state("loading", &["alarm"]), T0).unwrap();
    let now = T0 + 10 * S;
    assert_eq!(
        order(&f, now),
        ["south/f5", "north/f3", "north/f6", "south/f2", "south/f4", "north/f1"],
        "ready (longest first), alarms, offline, the rest"
    );
    let v = f.view(now);
    assert_eq!(v.frames[0].rank, 0);
    assert_eq!(v.frames[2].open_alarms, ["travel: gauge near its end"]);
    assert_eq!(v.frames[0].dashboard.as_deref(), Some("http://south.example:8321/"));
    assert!(v.labs.iter().all(|l| l.status == "online"), "{:?}", v.labs);
    // A repeat of the same state keeps its since; a change restarts it.
    f.accept(P, &format!("{P}/north/f3/state"), &state("ready", &["ready"]), now).unwrap();
    assert_eq!(f.view(now).frames[1].since_us, T0 + 2 * S);
    f.accept(P, &format!("{P}/south/f5/state"), &state("loading", &[]), now).unwrap();
    assert_eq!(order(&f, now)[0], "north/f3");
}

#[test]
fn a_last_will_makes_the_lab_offline_and_its_frames_come_after_ready_and_alarms() {
    let mut f = board();
    f.accept(P, &format!("{P}/a/status"), &status("a", "online"), T0).unwrap();
    f.accept(P, &format!("{P}/b/status"), &status("b", "online"), T0).unwrap();
    f.accept(P, &format!("{P}/a/f/state"), &state("ready", &["ready"]), T0).unwrap();
    f.accept(P, &format!("{P}/b/f/state"), &state("loading", &[]), T0).unwrap();
    assert_eq!(order(&f, T0 + S), ["a/f", "b/f"]);
    // The broker publishes the will when the daemon vanishes (MQTT 3.1.1 §3.1.2.5).
    f.accept(P, &format!("{P}/a/status"), &status("a", "offline"), T0 + 5 * S).unwrap();
    let v = f.view(T0 + 6 * S);
    let a = v.labs.iter().find(|l| l.lab == "a").unwrap();
    assert_eq!((a.status, a.since_us), ("offline", T0 + 5 * S));
    let fa = v.frames.iter().find(|x| x.lab == "a").unwrap();
    assert_eq!((fa.rank, fa.lab_status), (2, "offline"));
    assert!(fa.needs.contains(&"lab-offline"), "{:?}", fa.needs);
    f.accept(P, &format!("{P}/b/f/state"), &state("loading", &["alarm"]), T0 + 6 * S).unwrap();
    assert_eq!(order(&f, T0 + 7 * S), ["b/f", "a/f"], "an alarm of a live lab before a dead lab");
    // Back online: ready again first.
    f.accept(P, &format!("{P}/a/status"), &status("a", "online"), T0 + 8 * S).unwrap();
    f.accept(P, &format!("{P}/a/f/state"), &state("ready", &["ready"]), T0 + 8 * S).unwrap();
    assert_eq!(order(&f, T0 + 9 * S), ["a/f", "b/f"]);
}

#[test]
fn a_lab_with_no_state_for_quiet_after_is_quiet_and_not_a_second_before() {
    let mut f = board();
    f.accept(P, &format!("{P}/a/status"), &status("a", "online"), T0).unwrap();
    f.accept(P, &format!("{P}/a/f/state"), &state("loading", &[]), T0 + 10 * S).unwrap();
    let lab = |f: &Fleet, now| f.view(now).labs[0].status;
    assert_eq!(lab(&f, T0 + 309 * S), "online");
    assert_eq!(lab(&f, T0 + 310 * S), "quiet");
    let v = f.view(T0 + 310 * S);
    assert_eq!(v.labs[0].since_us, T0 + 10 * S, "quiet since the last state");
    assert!(v.frames[0].needs.contains(&"lab-quiet"));
    f.accept(P, &format!("{P}/a/f/state"), &state("loading", &[]), T0 + 311 * S).unwrap();
    assert_eq!(lab(&f, T0 + 312 * S), "online");
    // A lab that said online but never sent a state goes quiet from its status.
    f.accept(P, &format!("{P}/b/status"), &status("b", "online"), T0 + 400 * S).unwrap();
    assert_eq!(f.view(T0 + 700 * S).labs[1].status, "quiet");
}

#[test]
fn malformed_payloads_are_ignored_and_counted_and_change_nothing() {
    let mut f = board();
    f.accept(P, &format!("{P}/a/f/state"), &state("loading", &[]), T0).unwrap();
    let before = f.view(T0 + S);
    let bad: [&[u8]; 6] = [
        b"not json",
        br#"{"state": 3}"#,
        br#"{"attention": []}"#,
        br#"{"state": "<script>alert(1)</script>"}"#,
        br#"{"status": "maybe"}"#,
        &[0xff, 0xfe],
    ];
    for payload in bad {
        let r = f.accept(P, &format!("{P}/a/f/state"), payload, T0 + S);
        assert!(matches!(r, Err(Ignored::Malformed(_))), "{payload:?}: {r:?}");
    }
    assert!(matches!(f.accept(P, &format!("{P}/a/status"), br#"{"status": "maybe"}"#, T0), Err(Ignored::Malformed(_))));
    let huge = vec![b' '; MAX_PAYLOAD_BYTES + 1];
    assert!(matches!(f.accept(P, &format!("{P}/a/f/state"), &huge, T0), Err(Ignored::Malformed(_))));
    assert_eq!(f.ignored().malformed, 8);
    let mut after = f.view(T0 + S);
    after.ignored = before.ignored;
    assert_eq!(after, before);
}

#[test]
fn topics_of_an_unexpected_shape_are_ignored_and_counted() {
    let mut f = board();
    let ok = state("loading", &[]);
    for topic in [
        "soil-labs/a/f/readings",
        "soil-labs/a/events",
        "soil-labs/a/f/g/state",
        "soil-labs/status",
        "other/a/f/state",
        "soil-labsx/a/f/state",
        "soil-labs//f/state",
        "soil-labs/a b/f/state",
        "soil-labs/a/<i>/state",
    ] {
        assert_eq!(f.accept(P, topic, &ok, T0), Err(Ignored::UnexpectedTopic), "{topic}");
    }
    assert_eq!(f.ignored().unexpected_topic, 9);
    assert!(f.view(T0).frames.is_empty() && f.view(T0).labs.is_empty());
}

#[test]
fn an_empty_retained_payload_clears_the_frame_and_unsafe_links_are_dropped() {
    let mut f = board();
    f.accept(P, &format!("{P}/a/f/state"), &state("loading", &[]), T0).unwrap();
    f.accept(P, &format!("{P}/a/f/state"), b"", T0 + S).unwrap();
    assert!(f.view(T0 + S).frames.is_empty(), "MQTT 3.1.1 §3.3.1.3: a zero-byte retained message clears it");
    for link in ["javascript:alert(1)", "http://x\" onmouseover=\"a", "http:///path", "ftp://x/"] {
        let payload = serde_json::json!({"status": "online", "dashboard": link}).to_string();
        f.accept(P, &format!("{P}/a/status"), payload.as_bytes(), T0).unwrap();
        assert_eq!(f.view(T0).labs[0].dashboard, None, "{link}");
    }
}

#[test]
fn the_page_escapes_every_string_from_the_broker() {
    let mut f = board();
    let payload = serde_json::json!({
        "state": "loading", "name": "<img src=x onerror=alert(1)>", "attention": ["alarm"],
        "test": {"specimen": "\"><script>x()</script>"},
        "alarms": [{"code": "c&d", "message": "<b>bold</b>"}],
    })
    .to_string();
    f.accept(P, &format!("{P}/a/f/state"), payload.as_bytes(), T0).unwrap();
    let html = board::render(&f.view(T0 + S));
    assert!(!html.contains("<script>") && !html.contains("<img") && !html.contains("<b>bold"), "{html}");
    assert!(html.contains("&lt;img src=x onerror=alert(1)&gt;") && html.contains("c&amp;d: &lt;b&gt;bold"));
    assert!(html.contains(r#"<meta http-equiv="refresh" content="10">"#));
}

async fn call(router: axum::Router, method: &str, path: &str, auth: Option<&str>) -> axum::response::Response {
    use tower::ServiceExt;
    let mut req = axum::http::Request::builder().method(method).uri(path).header("host", "127.0.0.1:8321");
    if let Some(a) = auth {
        req = req.header("authorization", a);
    }
    router.oneshot(req.body(axum::body::Body::empty()).unwrap()).await.unwrap()
}

fn board_state(users: Vec<crate::config::User>) -> board::BoardState {
    let mut f = board();
    f.accept(P, &format!("{P}/a/status"), &status("a", "online"), T0).unwrap();
    f.accept(P, &format!("{P}/a/f/state"), &state("ready", &["ready"]), T0).unwrap();
    board::BoardState {
        fleet: std::sync::Arc::new(std::sync::Mutex::new(f)),
        clock: std::sync::Arc::new(crate::clock::ManualClock::new(T0 + S)),
        users: std::sync::Arc::new(users),
        guard: std::sync::Arc::new(crate::http::Guard::new("127.0.0.1:8321".parse().unwrap(), Vec::new())),
        rendered: Default::default(),
    }
}

#[tokio::test]
async fn the_board_reads_only_asks_every_role_to_sign_in_and_sends_the_security_headers() {
    use crate::config::{Role, User};
    use axum::http::StatusCode;
    let users = vec![User { name: "vic".into(), role: Role::Viewer, token: "view-token-0123456789".into() }];
    let router = board::router(board_state(users));
    let r = call(router.clone(), "GET", "/api/fleet", Some("Bearer view-token-0123456789")).await;
    assert_eq!(r.status(), StatusCode::OK);
    assert_eq!(r.headers()["x-frame-options"], "DENY");
    assert!(r.headers()["content-security-policy"].to_str().unwrap().contains("frame-ancestors 'none'"));
    let body = axum::body::to_bytes(r.into_body(), 1 << 20).await.unwrap();
    let v: serde_json::Value = serde_json::from_slice(&body).unwrap();
    assert_eq!(v["frames"][0]["needs"][0], "ready");
    assert_eq!(v["labs"][0]["status"], "online");
    assert_eq!(call(router.clone(), "GET", "/", None).await.status(), StatusCode::UNAUTHORIZED);
    for method in ["POST", "PUT", "DELETE", "PATCH"] {
        let r = call(router.clone(), method, "/api/fleet", Some("Bearer view-token-0123456789")).await;
        assert_eq!(r.status(), StatusCode::METHOD_NOT_ALLOWED, "{method}");
        assert_eq!(r.headers()["allow"], "GET, HEAD");
    }
    let r = call(router.clone(), "GET", "/", Some("Bearer view-token-0123456789")).await;
    assert_eq!(r.status(), StatusCode::OK);
    let html = String::from_utf8(axum::body::to_bytes(r.into_body(), 1 << 20).await.unwrap().to_vec()).unwrap();
    assert!(html.contains("load step looks complete") && html.contains("http://a.example:8321/"), "{html}");
}

#[tokio::test]
async fn a_foreign_host_is_refused() {
    use tower::ServiceExt;
    let router = board::router(board_state(Vec::new()));
    let req =
        axum::http::Request::get("/api/fleet").header("host", "evil.example:8321").body(axum::body::Body::empty());
    let r = router.oneshot(req.unwrap()).await.unwrap();
    assert_eq!(r.status(), axum::http::StatusCode::MISDIRECTED_REQUEST);
}

#[test]
fn the_board_s_own_broker_link_is_shown_with_since_when_it_last_changed() {
    let mut f = board();
    f.broker_link("mqtt://b", P, false, T0);
    f.broker_link("mqtt://b", P, true, T0 + S);
    f.broker_link("mqtt://b", P, true, T0 + 2 * S);
    let v = f.view(T0 + 3 * S);
    assert_eq!((v.brokers[0].connected, v.brokers[0].since_us), (true, T0 + S));
    assert!(!board::render(&v).contains("not connected"));
    f.broker_link("mqtt://b", P, false, T0 + 4 * S);
    assert!(board::render(&f.view(T0 + 5 * S)).contains("The board itself is not connected to mqtt://b"));
}

#[tokio::test]
async fn the_board_renders_once_per_second_while_nothing_changes_and_at_once_when_a_message_comes() {
    let clock = std::sync::Arc::new(crate::clock::ManualClock::new(T0 + S));
    let board_state = board::BoardState { clock: clock.clone(), ..board_state(Vec::new()) };
    let fleet = board_state.fleet.clone();
    let router = board::router(board_state);
    let body = |r: axum::response::Response| async move {
        let bytes = axum::body::to_bytes(r.into_body(), usize::MAX).await.unwrap();
        serde_json::from_slice::<serde_json::Value>(&bytes).unwrap()
    };
    let first = body(call(router.clone(), "GET", "/api/fleet", None).await).await;
    assert_eq!(first["frames"].as_array().unwrap().len(), 1);
    // The same second and nothing new: the same view (its `at_us` did not move with the clock).
    clock.advance_us(300_000);
    let again = body(call(router.clone(), "GET", "/api/fleet", None).await).await;
    assert_eq!(again["at_us"], first["at_us"]);
    // A message from a broker shows on the next read, within the same second.
    fleet.lock().unwrap().accept(P, &format!("{P}/a/g/state"), &state("primary", &[]), T0 + S).unwrap();
    let after = body(call(router.clone(), "GET", "/api/fleet", None).await).await;
    assert_eq!(after["frames"].as_array().unwrap().len(), 2, "{after}");
    let page = call(router.clone(), "GET", "/", None).await;
    let html = axum::body::to_bytes(page.into_body(), usize::MAX).await.unwrap();
    assert!(String::from_utf8_lossy(&html).matches("<tr").count() >= 2);
    // The next second: made again, with the clock's time.
    clock.advance_us(1_000_000);
    let later = body(call(router, "GET", "/api/fleet", None).await).await;
    assert_eq!(later["at_us"].as_i64().unwrap(), T0 + S + 1_300_000);
}
