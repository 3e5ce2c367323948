//! Publishing to a real MQTT broker (Debian's mosquitto, started here on a free loopback port) with an
//! independent consumer (`mosquitto_sub` from mosquitto-clients, a persistent QoS 1 session so the broker
//! queues for it while it is away, MQTT 3.1.1 §3.1.2.4). The daemon starts with the broker down, the
//! broker comes up, is stopped for 30 s mid-run, the daemon is killed with `kill -9` while it owes the
//! broker that backlog and restarted, the broker returns, and the daemon is killed again while it publishes
//! live: after de-duplication by sequence number the consumer holds every stored reading of each
//! channel, in order, with no gap; the retained status is the last will `offline` after the kill and the
//! retained states name every frame.

use std::collections::HashMap;
use std::fs::File;
use std::process::{Child, Command, Stdio};

use oedolog_tests::{ChildGuard, Simulator, Stream, temp_dir};
use serde_json::Value;

use super::*;

/// A process killed when dropped (mosquitto_sub writes to a file, so no pipes).
pub(super) struct Killed(pub(super) Child);

impl Drop for Killed {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

pub(super) fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

/// mosquitto on `port`, persisting its sessions in `dir` (saved on SIGTERM); waits for its `running` line.
pub(super) fn broker(dir: &Path, port: u16) -> ChildGuard {
    let conf = dir.join("mosquitto.conf");
    let text = format!(
        "listener {port} 127.0.0.1\nallow_anonymous true\npersistence true\npersistence_location {}/\nlog_dest stderr\n",
        dir.display()
    );
    std::fs::write(&conf, text).unwrap();
    let mut command = Command::new(oedolog_tests::peer_program("mosquitto"));
    command.arg("-c").arg(&conf);
    let mut guard = ChildGuard::spawn("mosquitto", command).unwrap();
    guard.wait_for_line(Stream::Stderr, Duration::from_secs(10), |l| l.contains(" running")).unwrap();
    guard
}

pub(super) fn stop_broker(guard: ChildGuard) {
    let status = Command::new("kill").args(["-TERM", &guard.id().to_string()]).status().unwrap();
    assert!(status.success());
    guard.wait_for_exit(Duration::from_secs(10)).unwrap();
}

fn subscriber(port: u16, out: &Path, extra: &[&str]) -> Killed {
    let file = File::create(out).unwrap();
    let child = Command::new("stdbuf")
        .arg("-oL")
        .arg(oedolog_tests::peer_program("mosquitto_sub"))
        .args(["-h", "127.0.0.1", "-p", &port.to_string(), "-q", "1", "-v"])
        .args(extra)
        .stdout(Stdio::from(file))
        .stderr(Stdio::null())
        .spawn()
        .expect("start mosquitto_sub");
    Killed(child)
}

/// The metric `name{broker=…}` from `/metrics`.
fn metric(daemon: &Daemon, name: &str) -> f64 {
    let text = daemon.get("/metrics").unwrap();
    text.lines()
        .find(|l| l.starts_with(&format!("{name}{{")))
        .and_then(|l| l.rsplit(' ').next())
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("no {name} in /metrics"))
}

/// The open `publish-lag` alarm on `/healthz`'s lab-wide alarms, if any.
fn lab_alarm(daemon: &Daemon) -> Option<Value> {
    let health: Value = serde_json::from_str(&daemon.get("/healthz").unwrap()).unwrap();
    health["lab_alarms"].as_array()?.iter().find(|a| a["code"] == "publish-lag").cloned()
}

pub(super) fn wait_until(what: &str, timeout: Duration, ready: impl Fn() -> bool) {
    let deadline = Instant::now() + timeout;
    while !ready() {
        assert!(Instant::now() < deadline, "{what}: not within {timeout:?}");
        std::thread::sleep(Duration::from_millis(100));
    }
}

/// (topic, payload) of each line `mosquitto_sub -v` wrote.
fn messages(path: &Path) -> Vec<(String, Value)> {
    std::fs::read_to_string(path)
        .unwrap_or_default()
        .lines()
        .filter_map(|l| l.split_once(' '))
        .filter_map(|(t, p)| serde_json::from_str(p).ok().map(|v| (t.to_string(), v)))
        .collect()
}

#[test]
fn a_broker_away_at_start_stopped_mid_run_and_a_kill_dash_nine_lose_no_reading_and_repeat_only_by_seq() {
    let dir = temp_dir();
    let port = free_port();
    let sim = Simulator::start_tcp(&["--frames", "2", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    for (i, id) in ["F1", "F2"].into_iter().enumerate() {
        text += &sim_frame(id, "tcp", i as u8 + 1, 100);
    }
    text += &format!(
        "\n[[publish.mqtt]]\nurl = \"mqtt://127.0.0.1:{port}\"\nclient_id = \"e2elab\"\ntopic_prefix = \"e2e/soil\"\nlab = \"lab-a\"\nlag_alarm_s = 10\n"
    );
    let config = write_config(dir.path(), &text);
    let sub_path = dir.path().join("sub.txt");

    // The consumer's persistent session exists before the daemon's first connection.
    let first = broker(dir.path(), port);
    let _sub = subscriber(port, &sub_path, &["-c", "-i", "e2econsumer", "-t", "e2e/soil/#"]);
    std::thread::sleep(Duration::from_millis(500)); // mosquitto_sub has no readiness line; the session is made on connect
    stop_broker(first);

    // 1. The broker is down when the daemon starts: acquisition goes on, publishing waits.
    let daemon = Daemon::start(&config, &[]).unwrap();
    let stored = wait_stored(dir.path(), 60);
    assert!(stored >= 60, "readings are stored while the broker is down ({stored})");
    assert_eq!(metric(&daemon, "oedolog_publish_connected"), 0.0);
    wait_until("a failed connection counted", Duration::from_secs(10), || {
        metric(&daemon, "oedolog_publish_errors_total") >= 1.0
    });

    // 2. The broker comes up: the daemon connects and catches up.
    let second = broker(dir.path(), port);
    wait_until("connected", Duration::from_secs(30), || metric(&daemon, "oedolog_publish_connected") == 1.0);
    wait_until("caught up", Duration::from_secs(30), || metric(&daemon, "oedolog_publish_lag_seconds") < 2.0);

    // 3. The broker is stopped for 30 s mid-run (as the issue asks), then restarted.
    stop_broker(second);
    std::thread::sleep(Duration::from_secs(30));
    // 30 s behind a 10 s limit: the publish-lag alarm, about the broker, for every page's banner.
    wait_until("the publish-lag alarm", Duration::from_secs(15), || lab_alarm(&daemon).is_some());
    let alarm = lab_alarm(&daemon).unwrap();
    assert_eq!(alarm["outlet"], format!("mqtt://127.0.0.1:{port} e2elab"), "{alarm}");
    assert!(alarm["frame"].is_null() && alarm["bus"].is_null(), "{alarm}");
    let words = alarm["message"].as_str().unwrap();
    assert!(words.contains(&format!("MQTT broker mqtt://127.0.0.1:{port} (lab lab-a)")), "{words}");
    assert!(words.contains("behind the store by more than its limit of 10 s"), "{words}");
    assert_eq!(metric(&daemon, "oedolog_publish_lag_alarm"), 1.0);

    // 4. kill -9 of the daemon while it owes the broker 30 s of readings: the restarted daemon takes the
    //    catch-up from its persisted cursors (nothing skipped, nothing sent twice beyond QoS 1), and the
    //    alarm left open by the killed run is cleared by the new one once it has caught up.
    let killed_us = chrono_now_us();
    let status = Command::new("kill").args(["-KILL", &daemon.process.id().to_string()]).status().unwrap();
    assert!(status.success());
    drop(daemon);
    let daemon = Daemon::start(&config, &[]).unwrap();
    wait_until("still behind after the restart", Duration::from_secs(15), || {
        metric(&daemon, "oedolog_publish_lag_seconds") > 10.0
    });
    assert_eq!(metric(&daemon, "oedolog_publish_readings_total"), 0.0, "nothing published with the broker away");
    let third = broker(dir.path(), port);
    wait_until("reconnected", Duration::from_secs(60), || metric(&daemon, "oedolog_publish_connected") == 1.0);
    wait_until("caught up again", Duration::from_secs(30), || metric(&daemon, "oedolog_publish_lag_seconds") < 2.0);
    assert!(
        metric(&daemon, "oedolog_publish_readings_total") >= 300.0,
        "the restarted daemon sent the backlog (2 frames × 3 channels × 10 polls/s × 30 s and more)"
    );
    wait_until("the publish-lag alarm cleared", Duration::from_secs(20), || lab_alarm(&daemon).is_none());

    // 5. kill -9 of the daemon while it publishes live; it resumes from its cursors.
    let status = Command::new("kill").args(["-KILL", &daemon.process.id().to_string()]).status().unwrap();
    assert!(status.success());
    drop(daemon);
    let daemon = Daemon::start(&config, &[]).unwrap();
    wait_until("connected after the restart", Duration::from_secs(30), || {
        metric(&daemon, "oedolog_publish_connected") == 1.0
    });
    wait_until("caught up after the restart", Duration::from_secs(30), || {
        metric(&daemon, "oedolog_publish_readings_total") > 0.0 && metric(&daemon, "oedolog_publish_lag_seconds") < 2.0
    });

    // 6. Retained state of each frame and the last will after a second kill -9 (MQTT 3.1.1 §3.1.2.5, §3.3.1.3).
    let status = Command::new("kill").args(["-KILL", &daemon.process.id().to_string()]).status().unwrap();
    assert!(status.success());
    drop(daemon);
    let will_path = dir.path().join("status.txt");
    wait_until("the last will retained", Duration::from_secs(10), || {
        let _once = subscriber(port, &will_path, &["-t", "e2e/soil/lab-a/status", "-C", "1", "-W", "3"]);
        std::thread::sleep(Duration::from_millis(300));
        messages(&will_path).first().is_some_and(|(_, v)| v["status"] == "offline")
    });
    let state_path = dir.path().join("state.txt");
    let mut once = subscriber(port, &state_path, &["-t", "e2e/soil/lab-a/+/state", "-C", "2", "-W", "5"]);
    let _ = once.0.wait();
    let states = messages(&state_path);
    let mut frames: Vec<&str> = states.iter().filter_map(|(_, v)| v["frame"].as_str()).collect();
    frames.sort_unstable();
    assert_eq!(frames, ["F1", "F2"], "a retained state per frame: {states:?}");
    assert!(states.iter().all(|(_, v)| v["lab"] == "lab-a" && v["last_reading"]["at"].is_string()), "{states:?}");

    std::thread::sleep(Duration::from_millis(500));
    drop(_sub);
    stop_broker(third);

    // What the consumer holds, by (frame, channel): drop repeats by seq; what is new must come next.
    let mut got: HashMap<(String, String), Vec<(i64, i64)>> = HashMap::new();
    let mut repeats = 0usize;
    for (topic, v) in messages(&sub_path).into_iter().filter(|(t, _)| t.ends_with("/readings")) {
        let frame = v["frame"].as_str().unwrap().to_string();
        assert_eq!(topic, format!("e2e/soil/lab-a/{frame}/readings"));
        for r in v["readings"].as_array().unwrap() {
            let key = (frame.clone(), r["channel"].as_str().unwrap().to_string());
            let (seq, at_us) = (r["seq"].as_i64().unwrap(), r["at_us"].as_i64().unwrap());
            let list = got.entry(key.clone()).or_default();
            match list.last() {
                Some(&(last, _)) if seq <= last => {
                    repeats += 1;
                    assert_eq!(list[(seq - 1) as usize], (seq, at_us), "{key:?}: a repeat carries its first content");
                }
                Some(&(last, _)) => assert_eq!(seq, last + 1, "{key:?}: no gap"),
                None => assert_eq!(seq, 1, "{key:?}: starts at the first reading"),
            }
            if list.last().is_none_or(|&(last, _)| seq > last) {
                list.push((seq, at_us));
            }
        }
    }
    let db = open_db(dir.path());
    let keys: Vec<(i64, String)> = db
        .prepare("SELECT key, id FROM frames ORDER BY key")
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    let mut total = 0usize;
    for (key, id) in keys {
        for (code, channel) in [(0, "displacement"), (1, "load"), (2, "temperature")] {
            let stored: Vec<i64> = db
                .prepare("SELECT at_us FROM readings WHERE frame_key = ?1 AND channel = ?2 ORDER BY at_us")
                .unwrap()
                .query_map([key, code], |r| r.get(0))
                .unwrap()
                .collect::<Result<_, _>>()
                .unwrap();
            let received: Vec<i64> = got
                .get(&(id.clone(), channel.to_string()))
                .cloned()
                .unwrap_or_default()
                .into_iter()
                .map(|(_, at)| at)
                .collect();
            assert!(
                received.len() * 10 >= stored.len() * 9,
                "{id} {channel}: {} of {} stored",
                received.len(),
                stored.len()
            );
            assert_eq!(received[..], stored[..received.len()], "{id} {channel}: the store's readings in order");
            // Acquisition never paused while the broker was away: 100 ms polls, no gap over 2 s before the kill.
            let gaps = stored.windows(2).filter(|w| w[1] < killed_us).map(|w| w[1] - w[0]).max().unwrap_or(0);
            assert!(gaps < 2_000_000, "{id} {channel}: a {gaps} µs gap in the stamps");
            total += received.len();
        }
    }
    assert!(total > 300, "{total} readings received");
    eprintln!("mqtt e2e: {total} distinct readings received, {repeats} repeats dropped by seq");
    // The journal too: entry ids, repeats dropped, in order with no gap.
    let mut last = 0i64;
    for (_, v) in messages(&sub_path).into_iter().filter(|(t, _)| t == "e2e/soil/lab-a/events") {
        let seq = v["seq"].as_i64().unwrap();
        if seq > last {
            assert!(last == 0 || seq == last + 1, "journal seq {seq} after {last}");
            last = seq;
        }
    }
    assert!(last > 0, "journal entries published");
    // Every payload names the database its seq numbers belong to, the same across the kill -9 restart.
    let stores: std::collections::BTreeSet<String> = messages(&sub_path)
        .into_iter()
        .filter(|(t, _)| t.ends_with("/readings") || t.ends_with("/events"))
        .map(|(_, v)| v["store"].as_str().unwrap_or("missing").to_string())
        .collect();
    assert_eq!(stores.len(), 1, "one database, one identity: {stores:?}");
    // Every payload the consumer got (status, state, readings, events) against the README's JSON Schemas
    // (docs/mqtt/), checked by a general-purpose validator outside the project (python-jsonschema 4.26.0,
    // Draft 2020-12).
    let checked = Command::new(oedolog_tests::peer_python())
        .arg(oedolog_tests::workspace_root().join("tests/peers/check_mqtt_payloads.py"))
        .arg(oedolog_tests::workspace_root().join("docs/mqtt"))
        .arg(&sub_path)
        .output()
        .unwrap();
    let counts = String::from_utf8_lossy(&checked.stdout);
    assert!(checked.status.success(), "payloads off their schemas: {}", String::from_utf8_lossy(&checked.stderr));
    for kind in ["status", "state", "readings", "events"] {
        assert!(!counts.contains(&format!("{kind}=0")), "no {kind} payload checked: {counts}");
    }
    eprintln!("mqtt e2e: payloads valid against docs/mqtt schemas: {}", counts.trim());
    let id = stores.first().unwrap();
    assert!(id.len() == 32 && id.bytes().all(|b| b.is_ascii_hexdigit() && !b.is_ascii_uppercase()), "{id}");
}

fn chrono_now_us() -> i64 {
    std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_micros() as i64
}
