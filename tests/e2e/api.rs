//! The HTTP API end to end: `oedolog run` against the simulator with two users; credentials, a viewer
//! refused, an operator starting a test, arming by hanger mass and adding a note (journalled under the
//! user's name), the event stream resuming after `Last-Event-ID`, `/metrics`; and an open address
//! without users refused at start.

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::process::Command;
use std::time::{Duration, Instant};

use anyhow::{Context, Result};
use oedolog_tests::{Simulator, run_to_end, temp_dir, workspace_binary};

use crate::daemon::{Daemon, config_head, counter, open_db, sim_frame, write_config};

const OPERATOR: &str = "Bearer e2e-operator-token-0123";
/// base64("vic:e2e-viewer-token-01234") for HTTP Basic.
const VIEWER: &str = "Basic dmljOmUyZS12aWV3ZXItdG9rZW4tMDEyMzQ=";

/// One HTTP/1.1 request with `Connection: close`: (status, head, body).
pub(crate) fn http(
    addr: SocketAddr,
    method: &str,
    path: &str,
    auth: Option<&str>,
    body: Option<&str>,
) -> Result<(u16, String, String)> {
    let mut stream = TcpStream::connect(addr)?;
    stream.set_read_timeout(Some(Duration::from_secs(10)))?;
    let mut head = format!("{method} {path} HTTP/1.1\r\nHost: {addr}\r\nConnection: close\r\n");
    if let Some(a) = auth {
        head += &format!("Authorization: {a}\r\n");
    }
    let body = body.unwrap_or("");
    if !body.is_empty() {
        head += &format!("Content-Type: application/json\r\nContent-Length: {}\r\n", body.len());
    } else if method == "POST" {
        head += "Content-Length: 0\r\n";
    }
    write!(stream, "{head}\r\n{body}")?;
    let mut response = String::new();
    stream.read_to_string(&mut response)?;
    let (head, body) = response.split_once("\r\n\r\n").context("an HTTP response")?;
    let status = head.split(' ').nth(1).context("a status")?.parse()?;
    Ok((status, head.to_string(), body.to_string()))
}

/// Reads the SSE stream from `path` until `done` holds for what came, with a deadline.
fn read_stream(addr: SocketAddr, auth: &str, last_event_id: i64, done: impl Fn(&str) -> bool) -> Result<String> {
    let mut stream = TcpStream::connect(addr)?;
    stream.set_read_timeout(Some(Duration::from_secs(10)))?;
    write!(
        stream,
        "GET /api/stream HTTP/1.1\r\nHost: {addr}\r\nAuthorization: {auth}\r\nLast-Event-ID: {last_event_id}\r\n\r\n"
    )?;
    let deadline = Instant::now() + Duration::from_secs(15);
    let mut text = String::new();
    let mut buffer = [0u8; 4096];
    while !done(&text) {
        anyhow::ensure!(Instant::now() < deadline, "the stream never delivered: {text}");
        let n = stream.read(&mut buffer)?;
        anyhow::ensure!(n > 0, "the stream closed: {text}");
        text += &String::from_utf8_lossy(&buffer[..n]);
    }
    Ok(text)
}

#[test]
fn users_act_by_role_and_the_journal_and_stream_show_it() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "1", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += "[[http.user]]\nname = \"ana\"\nrole = \"operator\"\ntoken = \"e2e-operator-token-0123\"\n";
    text += "[[http.user]]\nname = \"vic\"\nrole = \"viewer\"\ntoken = \"e2e-viewer-token-01234\"\n";
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    text += &sim_frame("F1", "tcp", 1, 100);
    let config = write_config(dir.path(), &text);
    let daemon = Daemon::start(&config, &[]).unwrap();
    let addr = daemon.http;

    let (status, head, _) = http(addr, "GET", "/api/frames", None, None).unwrap();
    assert_eq!(status, 401);
    assert!(head.to_ascii_lowercase().contains("www-authenticate: basic realm=\"oedolog\""), "{head}");
    let (status, _, body) = http(addr, "GET", "/api/frames", Some(VIEWER), None).unwrap();
    assert_eq!(status, 200, "{body}");
    let specimen = r#"{"specimen":"E2E-1","height_mm":20,"diameter_mm":63.5,"dry_mass_g":95,"specific_gravity":2.7,"seating_kpa":5}"#;
    assert_eq!(http(addr, "POST", "/api/frames/F1/tests", Some(VIEWER), Some(specimen)).unwrap().0, 403);
    let (status, _, body) = http(addr, "POST", "/api/frames/F1/tests", Some(OPERATOR), Some(specimen)).unwrap();
    assert_eq!(status, 201, "{body}");
    let (status, _, body) =
        http(addr, "POST", "/api/frames/F1/increments", Some(OPERATOR), Some(r#"{"hanger_mass_kg": 5}"#)).unwrap();
    assert_eq!(status, 201, "{body}");
    let armed: serde_json::Value = serde_json::from_str(&body).unwrap();
    // 5 kg × 9.80665 m/s² × lever 1 (the default) / 3166.92 mm² = 0.015483 MPa.
    assert!((armed["stress_kpa"].as_f64().unwrap() - 15.483).abs() < 0.001, "{armed}");
    let (status, _, body) =
        http(addr, "POST", "/api/frames/F1/notes", Some(OPERATOR), Some(r#"{"text": "weights on by hand"}"#)).unwrap();
    assert_eq!(status, 201, "{body}");
    let note: serde_json::Value = serde_json::from_str(&body).unwrap();
    let note_id = note["id"].as_i64().unwrap();

    let db = open_db(dir.path());
    let actor: Option<String> =
        db.query_row("SELECT actor FROM events WHERE id = ?1", [note_id], |r| r.get(0)).unwrap();
    assert_eq!(actor.as_deref(), Some("ana"));
    let armed_by: Option<String> =
        db.query_row("SELECT actor FROM events WHERE kind = 'armed'", [], |r| r.get(0)).unwrap();
    assert_eq!(armed_by.as_deref(), Some("ana"));

    // Resume from just before the note: the note is the first journal event sent.
    let stream = read_stream(addr, VIEWER, note_id - 1, |t| t.contains("weights on by hand")).unwrap();
    let first_id = stream.lines().find_map(|l| l.strip_prefix("id: ")).unwrap();
    assert_eq!(first_id.trim(), note_id.to_string(), "{stream}");
    assert!(stream.contains("event: journal"));

    let frames = daemon.wait_frames_as(VIEWER, |f| counter(&f[0], "readings") >= 3);
    assert!(frames.is_ok(), "{frames:?}");
    let (status, _, metrics) = http(addr, "GET", "/metrics", Some(VIEWER), None).unwrap();
    assert_eq!(status, 200);
    assert!(metrics.lines().any(|l| l.starts_with("oedolog_readings_total{frame=\"F1\"} ")), "{metrics}");
    drop(sim);
}

impl Daemon {
    /// Polls `/api/frames` with credentials until `ready` holds.
    fn wait_frames_as(
        &self,
        auth: &str,
        ready: impl Fn(&[serde_json::Value]) -> bool,
    ) -> Result<Vec<serde_json::Value>> {
        let deadline = Instant::now() + Duration::from_secs(20);
        loop {
            let (_, _, body) = http(self.http, "GET", "/api/frames", Some(auth), None)?;
            let frames: Vec<serde_json::Value> = serde_json::from_str(&body)?;
            if ready(&frames) || Instant::now() > deadline {
                return Ok(frames);
            }
            std::thread::sleep(Duration::from_millis(100));
        }
    }
}

#[test]
fn an_open_address_without_users_is_refused_at_start() {
    let dir = temp_dir();
    let text = config_head(dir.path()).replace("127.0.0.1:0", "0.0.0.0:0")
        + "[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"127.0.0.1:9\"\n"
        + &sim_frame("F1", "tcp", 1, 100);
    let config = write_config(dir.path(), &text);
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("run").arg("--config").arg(&config);
    let finished = run_to_end("oedolog run", command).unwrap();
    assert!(!finished.status.success());
    let said = format!("{}{}", finished.stdout, finished.stderr);
    assert!(said.contains("http.listen") && said.contains("[[http.user]]"), "{said}");
}
