//! The fleet board against a real broker (Debian's mosquitto on a free loopback port): two stand-in labs
//! publish retained statuses and frame states with `mosquitto_pub -r` in the publisher's shapes (README,
//! "Publishing to MQTT"), one of them holding a `mosquitto_sub` connection whose last will is its
//! `offline` status. `oedolog fleet` must list both labs and every frame, who needs a person first, ignore a
//! malformed payload and an odd topic, refuse a write, and show the lab offline once that connection is
//! killed and the broker publishes the will (MQTT 3.1.1 §3.1.2.5). Then the same with a real `oedolog demo`
//! publishing as a lab: its payloads all parse, and a `kill -9` shows the lab offline. Stopping the broker
//! shows the board's own link down.

use std::process::{Command, Stdio};

use oedolog_tests::temp_dir;
use serde_json::{Value, json};

use super::mqtt::{Killed, broker, free_port, stop_broker, wait_until};
use super::*;

const PREFIX: &str = "soil-labs";

/// `mosquitto_pub -r`: a retained message, as a lab's daemon leaves it (MQTT 3.1.1 §3.3.1.3).
fn retain(port: u16, topic: &str, payload: &str) {
    let status = Command::new(oedolog_tests::peer_program("mosquitto_pub"))
        .args(["-h", "127.0.0.1", "-p", &port.to_string(), "-q", "1", "-r", "-t", topic, "-m", payload])
        .status()
        .expect("run mosquitto_pub");
    assert!(status.success(), "mosquitto_pub {topic}");
}

fn lab_status(lab: &str, status: &str) -> String {
    json!({"status": status, "lab": lab, "at": "2026-12-04T00:00:00Z", "dashboard": format!("http://{lab}.lab.example:8321/"),
        "frames": ["f1", "f2"], "simulated_time": false, "version": "test"})
    .to_string()
}

fn frame_state(lab: &str, frame: &str, state: &str, attention: &[&str]) -> String {
    json!({"lab": lab, "frame": frame, "name": format!("{lab} {frame}"), "state": state, "attention": attention,
        "test": {"specimen": "BH2-4", "load_step": 3, "stress_kpa": 100.0, "from_kpa": 50.0, "onset_at": null,
            "ready_at": null, "plan_finished": false},
        "ready_eta": null, "t90_min": null,
        "alarms": if attention.contains(&"alarm") {
            json!([{"code": "travel", "message": "gauge <near> its end", "raised_at": "2026-12-04T00:00:00Z", "acknowledged_by": null}])
        } else { json!([]) },
        "bus_up": true, "at": "2026-12-04T00:00:00Z", "last_reading": null, "simulated_time": false})
    .to_string()
}

fn fleet_view(board: &Daemon) -> Value {
    serde_json::from_str(&board.get("/api/fleet").unwrap()).unwrap()
}

fn order(v: &Value) -> Vec<String> {
    v["frames"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| format!("{}/{}", f["lab"].as_str().unwrap(), f["frame"].as_str().unwrap()))
        .collect()
}

fn lab<'a>(v: &'a Value, name: &str) -> &'a Value {
    v["labs"].as_array().unwrap().iter().find(|l| l["lab"] == name).unwrap_or_else(|| panic!("no lab {name} in {v}"))
}

/// The status line of a request with `method` (HTTP/1.0, the server closes when done).
fn status_of(board: &Daemon, method: &str, path: &str) -> String {
    let mut stream = TcpStream::connect(board.http).unwrap();
    write!(
        stream,
        "{method} {path} HTTP/1.0\r\nHost: {}\r\nContent-Type: application/json\r\nContent-Length: 2\r\n\r\n{{}}",
        board.http
    )
    .unwrap();
    let mut response = String::new();
    stream.read_to_string(&mut response).unwrap();
    response.lines().next().unwrap_or("").to_string()
}

/// `oedolog fleet` on a free loopback port reading `PREFIX` on the broker at `port`, its file checked first.
fn start_board(dir: &Path, port: u16) -> Daemon {
    let config = dir.join("fleet.toml");
    std::fs::write(
        &config,
        format!(
            "[fleet]\nquiet_after_s = 600\n\n[[fleet.broker]]\nurl = \"mqtt://127.0.0.1:{port}\"\nclient_id = \"fleetboard1\"\ntopic_prefix = \"{PREFIX}\"\n\n[http]\nlisten = \"127.0.0.1:0\"\n"
        ),
    )
    .unwrap();
    let check = Command::new(workspace_binary("oedolog")).arg("check-config").arg(&config).output().unwrap();
    assert!(check.status.success(), "{}", String::from_utf8_lossy(&check.stderr));
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("fleet").arg("--config").arg(&config);
    Daemon::start_command(command, READY_TIMEOUT).unwrap()
}

#[test]
fn the_fleet_board_reads_a_real_demo_s_publications_and_shows_the_lab_offline_after_a_kill() {
    let dir = temp_dir();
    let port = free_port();
    let _broker = broker(dir.path(), port);
    let demo_config = dir.path().join("demo.toml");
    std::fs::write(
        &demo_config,
        format!(
            "[[publish.mqtt]]\nurl = \"mqtt://127.0.0.1:{port}\"\nclient_id = \"eastlab\"\ntopic_prefix = \"{PREFIX}\"\nlab = \"east\"\ndashboard_url = \"http://east.lab.example:8321/\"\n"
        ),
    )
    .unwrap();
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("demo").args(["--frames", "3", "--speed", "300", "--listen", "127.0.0.1:0", "--db"]);
    command.arg(dir.path().join("demo.sqlite")).arg("--config").arg(&demo_config);
    let (demo, _line) =
        oedolog_tests::ChildGuard::spawn_ready("oedolog demo", command, "dashboard at http://").unwrap();
    let board = start_board(dir.path(), port);
    wait_until("the demo's three frames on the board", Duration::from_secs(30), || {
        fleet_view(&board)["frames"].as_array().is_some_and(|f| f.len() == 3)
    });
    let v = fleet_view(&board);
    let east = lab(&v, "east");
    assert_eq!((east["status"].as_str(), east["frames"].as_u64()), (Some("online"), Some(3)), "{v}");
    assert_eq!(east["dashboard"], "http://east.lab.example:8321/");
    assert_eq!(v["ignored"]["malformed"], 0, "the publisher's own payloads all parse: {v}");
    for f in v["frames"].as_array().unwrap() {
        assert!(f["state"].as_str().is_some_and(|s| !s.is_empty()) && f["lab_status"] == "online", "{f}");
    }
    // kill -9: no DISCONNECT, so the broker publishes the daemon's last will (MQTT 3.1.1 §3.1.2.5).
    drop(demo);
    wait_until("east offline after the kill", Duration::from_secs(90), || {
        lab(&fleet_view(&board), "east")["status"] == "offline"
    });
    let v = fleet_view(&board);
    assert!(v["frames"].as_array().unwrap().iter().all(|f| f["rank"] == 2 && f["lab_status"] == "offline"), "{v}");
}

#[test]
fn the_fleet_board_lists_both_labs_ready_first_and_shows_a_lab_offline_after_its_last_will() {
    let dir = temp_dir();
    let port = free_port();
    let mosquitto = broker(dir.path(), port);
    let topic = |rest: &str| format!("{PREFIX}/{rest}");
    retain(port, &topic("north/status"), &lab_status("north", "online"));
    retain(port, &topic("north/f1/state"), &frame_state("north", "f1", "loading", &[]));
    retain(port, &topic("north/f2/state"), &frame_state("north", "f2", "ready", &["ready"]));
    retain(port, &topic("south/status"), &lab_status("south", "online"));
    retain(port, &topic("south/f1/state"), &frame_state("south", "f1", "loading", &["alarm"]));
    // Untrusted input: a payload that is not a state; a topic the filters match (`+` takes any one level,
    // MQTT 3.1.1 §4.7.1.3) whose level is no lab name a publisher can have.
    retain(port, &topic("south/f9/state"), "{\"state\": 42}");
    retain(port, &topic("lab <b>/f1/state"), &frame_state("south", "f1", "ready", &["ready"]));
    // South's connection, holding its last will: the broker publishes it, retained, when the connection dies.
    let will = lab_status("south", "offline");
    let south = Killed(
        Command::new(oedolog_tests::peer_program("mosquitto_sub"))
            .args(["-h", "127.0.0.1", "-p", &port.to_string(), "-t", &topic("south/commands-unused"), "-q", "1"])
            .args(["--will-topic", &topic("south/status"), "--will-payload", &will, "--will-qos", "1", "--will-retain"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("start mosquitto_sub"),
    );

    let board = start_board(dir.path(), port);

    wait_until("both labs and three frames on the board", Duration::from_secs(15), || {
        let v = fleet_view(&board);
        // Retained messages of one subscription come in no set order: wait for the ignored ones too.
        v["labs"].as_array().is_some_and(|l| l.len() == 2)
            && v["frames"].as_array().is_some_and(|f| f.len() == 3)
            && v["ignored"]["malformed"].as_u64() >= Some(1)
            && v["ignored"]["unexpected_topic"].as_u64() >= Some(1)
    });
    let v = fleet_view(&board);
    assert_eq!(order(&v), ["north/f2", "south/f1", "north/f1"], "ready, then the alarm, then the rest: {v}");
    assert_eq!(lab(&v, "north")["status"], "online");
    assert_eq!(lab(&v, "south")["status"], "online");
    assert_eq!(v["ignored"]["malformed"], 1, "{v}");
    assert_eq!(v["ignored"]["unexpected_topic"], 1, "{v}");
    assert_eq!(v["brokers"][0]["connected"], true, "{v}");
    let page = board.get("/").unwrap();
    for text in ["north", "south", "http://north.lab.example:8321/", "gauge &lt;near&gt; its end", "content=\"10\""] {
        assert!(page.contains(text), "{text} not on the page:\n{page}");
    }
    assert!(!page.contains("<near>"), "a broker's string reached the page unescaped");
    for method in ["POST", "PUT", "DELETE"] {
        assert!(status_of(&board, method, "/api/fleet").contains(" 405 "), "{method}");
    }

    // South vanishes without DISCONNECT: its will says offline.
    drop(south);
    wait_until("south offline on the board", Duration::from_secs(15), || {
        lab(&fleet_view(&board), "south")["status"] == "offline"
    });
    let v = fleet_view(&board);
    assert_eq!(lab(&v, "north")["status"], "online");
    assert_eq!(
        order(&v),
        ["north/f2", "south/f1", "north/f1"],
        "south's frame now ranks as offline, before the rest: {v}"
    );
    let south_f1 = &v["frames"][1];
    assert_eq!(south_f1["rank"], 2, "{south_f1}");
    assert!(south_f1["needs"].as_array().unwrap().contains(&json!("lab-offline")), "{south_f1}");
    assert!(board.get("/").unwrap().contains("OFFLINE"), "no sign of the offline lab on the page");

    // The board's own broker goes away: the page says the board is cut off, not that the labs are.
    stop_broker(mosquitto);
    wait_until("the board's broker link down", Duration::from_secs(15), || {
        fleet_view(&board)["brokers"][0]["connected"] == false
    });
    assert!(board.get("/").unwrap().contains("The board itself is not connected"), "no banner for the lost broker");
    assert_eq!(lab(&fleet_view(&board), "north")["status"], "online", "north's last word stands");
}
