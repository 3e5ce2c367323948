//! The load and the consumer of `tests/bench/mqtt-fleet.sh`, both through a real broker with rumqttc (no
//! MQTT framing here).
//!
//! `gen` publishes as many labs as asked, each its own connection (as each lab PC is), with the topics and
//! payloads of `daemon/src/publish` (README, "Publishing to MQTT"): `PREFIX/LAB/status` retained `online`
//! (last will `offline`), `PREFIX/LAB/FRAME/state` retained every 10 s, `PREFIX/LAB/FRAME/readings` once a
//! period per frame with one reading per channel (displacement, load, temperature), `PREFIX/LAB/events` once
//! a minute. Its labs are told from a daemon's by their names (`lab01`…) and by `"version": "mqtt_load"` in
//! their status. QoS 1, as the daemon's default.
//!
//! `consume` subscribes to `PREFIX/#` (QoS 1), keeps the first payload of each topic kind from LAB and from
//! lab01 as KEEP/LAB-KIND.json, and writes, for every reading of lab LAB's readings messages,
//! `receive_us at_us frame channel seq` to SAMPLES (receive time from the system clock, `at_us` from the
//! payload), and every second (and on SIGTERM) the messages and readings received per lab to COUNTS as JSON.
//! `gen` writes its own published counts to COUNTS the same way. Neither counts status messages.
//!
//! ```text
//! mqtt_load gen --port P --prefix X --first 1 --labs 49 --frames 32 --period-ms 1000 --counts FILE
//! mqtt_load consume --port P --prefix X --lab lab00 --samples FILE --keep DIR --counts FILE
//! ```

use std::collections::{BTreeMap, HashMap};
use std::io::Write;
use std::sync::{Arc, Mutex};
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use rumqttc::{AsyncClient, Event, LastWill, MqttOptions, Packet, QoS};
use serde_json::json;

fn now_us() -> i64 {
    SystemTime::now().duration_since(UNIX_EPOCH).expect("clock after 1970").as_micros() as i64
}

fn rfc3339(us: i64) -> String {
    chrono::DateTime::from_timestamp_micros(us)
        .expect("a time in range")
        .to_rfc3339_opts(chrono::SecondsFormat::Micros, true)
}

/// `--name value` pairs.
fn args() -> (String, HashMap<String, String>) {
    let mut it = std::env::args().skip(1);
    let mode = it.next().unwrap_or_default();
    let mut map = HashMap::new();
    while let Some(k) = it.next() {
        let key = k.strip_prefix("--").unwrap_or_else(|| usage(&format!("unexpected `{k}`"))).to_string();
        let value = it.next().unwrap_or_else(|| usage(&format!("--{key} needs a value")));
        map.insert(key, value);
    }
    (mode, map)
}

fn usage(why: &str) -> ! {
    eprintln!(
        "mqtt_load: {why}\nusage: mqtt_load gen --port P --prefix X --first N --labs N --frames N --period-ms MS --counts FILE\n       mqtt_load consume --port P --prefix X --lab LAB --samples FILE --keep DIR --counts FILE"
    );
    std::process::exit(2)
}

fn get<T: std::str::FromStr>(map: &HashMap<String, String>, key: &str) -> T {
    map.get(key)
        .unwrap_or_else(|| usage(&format!("--{key} is missing")))
        .parse()
        .unwrap_or_else(|_| usage(&format!("--{key}: not a valid value")))
}

fn options(client_id: &str, port: u16) -> MqttOptions {
    let mut o = MqttOptions::new(client_id, "127.0.0.1", port);
    o.set_keep_alive(Duration::from_secs(30));
    o.set_clean_session(true);
    o.set_max_packet_size(1 << 20, 1 << 20);
    o.set_inflight(1000);
    o
}

/// Per lab: (messages, readings).
type Counts = Arc<Mutex<BTreeMap<String, (u64, u64)>>>;

fn write_counts(path: &str, counts: &Counts) {
    let map = counts.lock().expect("counts").clone();
    let body: serde_json::Map<String, serde_json::Value> =
        map.into_iter().map(|(lab, (m, r))| (lab, json!({ "messages": m, "readings": r }))).collect();
    let tmp = format!("{path}.tmp");
    std::fs::write(&tmp, serde_json::Value::Object(body).to_string()).expect("write counts");
    std::fs::rename(&tmp, path).expect("rename counts");
}

#[tokio::main(flavor = "multi_thread", worker_threads = 2)]
async fn main() {
    let (mode, map) = args();
    let counts: Counts = Arc::new(Mutex::new(BTreeMap::new()));
    let counts_path: String = get(&map, "counts");
    match mode.as_str() {
        "gen" => {
            let (port, prefix): (u16, String) = (get(&map, "port"), get(&map, "prefix"));
            let (first, labs, frames, period): (usize, usize, usize, u64) =
                (get(&map, "first"), get(&map, "labs"), get(&map, "frames"), get(&map, "period-ms"));
            for i in first..first + labs {
                let lab = format!("lab{i:02}");
                // Spread the labs over the period, as independent PCs would be.
                let offset = Duration::from_millis(period * (i - first) as u64 / labs as u64);
                tokio::spawn(run_lab(
                    port,
                    prefix.clone(),
                    lab,
                    frames,
                    Duration::from_millis(period),
                    offset,
                    counts.clone(),
                ));
            }
        }
        "consume" => {
            let (port, prefix, lab): (u16, String, String) = (get(&map, "port"), get(&map, "prefix"), get(&map, "lab"));
            let (samples, keep): (String, String) = (get(&map, "samples"), get(&map, "keep"));
            tokio::spawn(consume(port, prefix, lab, samples, keep, counts.clone()));
        }
        other => usage(&format!("unknown mode `{other}`")),
    }
    let mut term = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()).expect("SIGTERM");
    let mut every = tokio::time::interval(Duration::from_secs(1));
    loop {
        tokio::select! {
            _ = every.tick() => write_counts(&counts_path, &counts),
            _ = term.recv() => break,
        }
    }
    // Let the consumer's last lines out (it flushes every 100 ms).
    tokio::time::sleep(Duration::from_millis(300)).await;
    write_counts(&counts_path, &counts);
}

/// FNV-1a of a lab's name (the low half of its made-up database identity).
fn lab_hash(lab: &str) -> u64 {
    lab.bytes().fold(0xcbf2_9ce4_8422_2325, |h, b| (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01b3))
}

/// One lab: a connection of its own, its status, and its frames' states, readings and a journal entry.
async fn run_lab(
    port: u16,
    prefix: String,
    lab: String,
    frames: usize,
    period: Duration,
    offset: Duration,
    counts: Counts,
) {
    let topic = format!("{prefix}/{lab}");
    // A database identity of 128 bits in hex, as `store_identity` (distinct per lab and per run).
    let store = format!("{:016x}{:016x}", now_us() as u64, lab_hash(&lab));
    let ids: Vec<String> = (1..=frames).map(|f| format!("F{f}")).collect();
    let status = |s: &str| {
        json!({
            "status": s, "lab": lab, "store": store, "at": rfc3339(now_us()), "dashboard": null, "frames": ids,
            "simulated_time": false, "version": "mqtt_load",
        })
        .to_string()
    };
    let mut o = options(&format!("load{lab}"), port);
    o.set_last_will(LastWill::new(format!("{topic}/status"), status("offline"), QoS::AtLeastOnce, true));
    let (client, mut events) = AsyncClient::new(o, frames * 2 + 16);
    tokio::spawn(async move {
        loop {
            if let Err(e) = events.poll().await {
                eprintln!("mqtt_load: {e}");
                tokio::time::sleep(Duration::from_secs(1)).await;
            }
        }
    });
    let publish = |t: String, retain: bool, body: String| {
        let client = client.clone();
        async move { client.publish(t, QoS::AtLeastOnce, retain, body).await.expect("the request channel") }
    };
    tokio::time::sleep(offset).await;
    publish(format!("{topic}/status"), true, status("online")).await;
    let mut seq = vec![0i64; frames];
    let mut event_id = 0i64;
    let mut tick = tokio::time::interval(period);
    for round in 0u64.. {
        tick.tick().await;
        let at = now_us();
        let mut messages = 0u64;
        let mut readings = 0u64;
        if round % 60 == 0 {
            event_id += 1;
            let body = json!({
                "lab": lab, "store": store, "seq": event_id, "kind": "note", "frame": null, "frame_name": null,
                "at": rfc3339(at), "at_us": at, "message": "load generator running", "actor": "mqtt_load",
                "details": {},
            });
            publish(format!("{topic}/events"), false, body.to_string()).await;
            messages += 1;
        }
        for (f, id) in ids.iter().enumerate() {
            seq[f] += 1;
            let s = seq[f];
            let d = 2.0 + 0.001 * (s as f64).sqrt();
            let list: Vec<serde_json::Value> =
                [("displacement", d, "mm", 1e-4), ("load", 1.55, "kN", 1e-4), ("temperature", 20.5, "°C", 0.01)]
                    .iter()
                    .map(|(channel, value, unit, gain)| {
                        json!({ "channel": channel, "seq": s, "at": rfc3339(at), "at_us": at, "value": value,
                            "unit": unit, "raw": (value / gain).round() })
                    })
                    .collect();
            let body = json!({ "lab": lab, "store": store, "frame": id, "readings": list });
            publish(format!("{topic}/{id}/readings"), false, body.to_string()).await;
            messages += 1;
            readings += 3;
            if round % 10 == 0 {
                // A few frames want a person, as on a real floor: every 8th ready, every 16th from the 6th an alarm.
                let (state, attention, alarms) = if f % 8 == 0 {
                    ("ready", json!(["ready"]), json!([]))
                } else if f % 16 == 5 {
                    (
                        "primary",
                        json!(["alarm"]),
                        json!([{ "code": "load-drift", "message": "load drifted", "raised_at": rfc3339(at), "acknowledged_by": null }]),
                    )
                } else {
                    ("primary", json!([]), json!([]))
                };
                let body = json!({
                    "lab": lab, "frame": id, "name": format!("Frame {}", f + 1), "state": state, "attention": attention,
                    "test": { "specimen": format!("{lab}-S{}", f + 1), "load_step": 3, "stress_kpa": 100.0,
                              "from_kpa": 50.0, "onset_at": rfc3339(at), "ready_at": null, "plan_finished": false },
                    "ready_eta": null, "t90_min": null, "alarms": alarms, "bus_up": true, "at": rfc3339(at),
                    "last_reading": { "at": rfc3339(at), "displacement_mm": d, "load_kn": 1.55, "temperature_c": 20.5 },
                    "simulated_time": false,
                });
                publish(format!("{topic}/{id}/state"), true, body.to_string()).await;
                messages += 1;
            }
        }
        let mut c = counts.lock().expect("counts");
        let e = c.entry(lab.clone()).or_default();
        e.0 += messages;
        e.1 += readings;
    }
}

/// Everything under `PREFIX/#`, counted per lab; the readings of `lab` written with their receive time.
async fn consume(port: u16, prefix: String, lab: String, samples: String, keep: String, counts: Counts) {
    let (client, mut events) = AsyncClient::new(options("benchconsumer", port), 64);
    client.subscribe(format!("{prefix}/#"), QoS::AtLeastOnce).await.expect("subscribe");
    let mut out = std::io::BufWriter::new(std::fs::File::create(&samples).expect("create the samples file"));
    let mut flush = tokio::time::interval(Duration::from_millis(100));
    let want = format!("{prefix}/{lab}/");
    loop {
        tokio::select! {
            _ = flush.tick() => out.flush().expect("write samples"),
            polled = events.poll() => match polled {
                Ok(Event::Incoming(Packet::Publish(p))) => {
                    let received = now_us();
                    let Some(rest) = p.topic.strip_prefix(&format!("{prefix}/")) else { continue };
                    let from = rest.split('/').next().unwrap_or("").to_string();
                    // The first payload of each kind from LAB and from lab01, for a check against the schemas.
                    if from == lab || from == "lab01" {
                        let kind = rest.rsplit('/').next().unwrap_or("");
                        let path = format!("{keep}/{from}-{kind}.json");
                        if !std::path::Path::new(&path).exists() {
                            std::fs::write(&path, &p.payload[..]).expect("keep a payload");
                        }
                    }
                    // Status messages are not counted: the broker adds each lab's last will to them.
                    if p.topic.ends_with("/status") {
                        continue;
                    }
                    let mut readings = 0u64;
                    if p.topic.ends_with("/readings") {
                        let v: serde_json::Value = serde_json::from_slice(&p.payload).expect("readings JSON");
                        let list = v["readings"].as_array().cloned().unwrap_or_default();
                        readings = list.len() as u64;
                        if p.topic.starts_with(&want) {
                            let frame = v["frame"].as_str().unwrap_or("?");
                            for r in list {
                                writeln!(out, "{received} {} {frame} {} {}", r["at_us"], r["channel"].as_str().unwrap_or("?"), r["seq"])
                                    .expect("write samples");
                            }
                        }
                    }
                    let mut c = counts.lock().expect("counts");
                    let e = c.entry(from).or_default();
                    e.0 += 1;
                    e.1 += readings;
                }
                Ok(_) => {}
                Err(e) => {
                    eprintln!("mqtt_load consume: {e}");
                    tokio::time::sleep(Duration::from_millis(200)).await;
                }
            }
        }
    }
}
