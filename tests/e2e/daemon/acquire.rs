//! Acquisition end to end: the daemon polls the simulator over Modbus TCP and over RTU through a pty
//! pair, several frames on one line; faults on one bus are counted and never stored, and never reach
//! another bus; a serial device that vanishes and comes back is reopened.

use std::time::Duration;

use oedolog_tests::{Simulator, pty_pair, temp_dir};

use super::*;

/// Every stored reading is finite and inside its channel's configured range (nothing invalid stored).
fn assert_all_readings_valid(dir: &std::path::Path) -> i64 {
    let db = open_db(dir);
    let bad: i64 = db
        .query_row(
            "SELECT count(*) FROM readings WHERE NOT (
                (channel = 0 AND value BETWEEN -1.0 AND 30.0) OR
                (channel = 1 AND value BETWEEN -0.5 AND 20.0) OR
                (channel = 2 AND value BETWEEN -20.0 AND 80.0))",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(bad, 0, "readings outside their ranges were stored");
    db.query_row("SELECT count(*) FROM readings", [], |r| r.get(0)).unwrap()
}

#[test]
fn daemon_reads_every_frame_of_the_simulator_over_modbus_tcp() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "3", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!(
        "[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\ntimeout_ms = 500\n",
        sim.tcp_addr().unwrap()
    );
    for unit in 1..=3 {
        text += &sim_frame(&format!("F{unit}"), "tcp", unit, 50);
    }
    let daemon = Daemon::start(&write_config(dir.path(), &text), &[]).unwrap();
    let frames = daemon
        .wait_frames(Duration::from_secs(20), |f| f.len() == 3 && f.iter().all(|f| counter(f, "readings") >= 30))
        .unwrap();
    for frame in &frames {
        // Frames start under the seating load (6.25 kPa over the specimen's ring, scenario.rs): load > 0.
        assert!(frame["load_kn"].as_f64().unwrap() > 0.0, "{frame}");
        // The standard gauge reads its 1 mm offset under seating (sensors.rs), to within noise.
        assert!((frame["displacement_mm"].as_f64().unwrap() - 1.0).abs() < 0.05, "{frame}");
        assert_eq!(frame["state"], "idle", "no test runs on it");
        assert!(frame["last_reading_at"].as_str().unwrap().ends_with('Z'), "RFC 3339 UTC");
        assert_eq!(counter(frame, "timeouts") + counter(frame, "crc_errors"), 0);
    }
    assert!(wait_stored(dir.path(), 90) >= 90);
    assert_all_readings_valid(dir.path());
    let health = daemon.get("/healthz").unwrap();
    assert!(health.contains("\"status\":\"ok\""), "{health}");
}

#[test]
fn daemon_reads_several_frames_on_one_rtu_line_through_a_pty_pair() {
    let dir = temp_dir();
    let pty = pty_pair(dir.path()).unwrap();
    let _sim = Simulator::start_rtu(&pty.device_end, &["--frames", "3", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!(
        "[[bus]]\nid = \"line\"\nkind = \"modbus-rtu\"\ndevice = \"{}\"\nbaud = 19200\nparity = \"none\"\ntimeout_ms = 300\n",
        pty.master_end.display()
    );
    for unit in 1..=3 {
        text += &sim_frame(&format!("F{unit}"), "line", unit, 50);
    }
    let daemon = Daemon::start(&write_config(dir.path(), &text), &[]).unwrap();
    let frames =
        daemon.wait_frames(Duration::from_secs(30), |f| f.iter().all(|f| counter(f, "readings") >= 30)).unwrap();
    for frame in &frames {
        assert!(frame["load_kn"].as_f64().unwrap() > 0.0, "{frame}");
        assert_eq!(frame["bus_up"], true);
    }
    assert_all_readings_valid(dir.path());
}

#[test]
fn faults_are_counted_never_stored_never_felt_by_another_bus_and_recovered_from() {
    let dir = temp_dir();
    // Bus "rough": every wire fault the simulator has, about 20 % of requests in all.
    let mut rough = Simulator::start_tcp(&[
        "--frames",
        "2",
        "--schedule",
        "manual",
        "--delay-ms",
        "400",
        "--fault",
        "drop=0.05",
        "--fault",
        "delay=0.03",
        "--fault",
        "bad-crc=0.03",
        "--fault",
        "noise=0.03",
        "--fault",
        "split=0.03",
        "--fault",
        "exception=0.03",
    ])
    .unwrap();
    let clean = Simulator::start_tcp(&["--frames", "2", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!(
        "[[bus]]\nid = \"rough\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\ntimeout_ms = 200\nretries = 0\n",
        rough.tcp_addr().unwrap()
    );
    text += &format!(
        "[[bus]]\nid = \"clean\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\ntimeout_ms = 200\n",
        clean.tcp_addr().unwrap()
    );
    text += &sim_frame("R1", "rough", 1, 20);
    text += &sim_frame("R2", "rough", 2, 20);
    text += &sim_frame("C1", "clean", 1, 20);
    text += &sim_frame("C2", "clean", 2, 20);
    let daemon = Daemon::start(&write_config(dir.path(), &text), &[]).unwrap();
    let frames = daemon
        .wait_frames(Duration::from_secs(40), |f| {
            let rough: Vec<_> = f.iter().filter(|f| f["id"].as_str().unwrap().starts_with('R')).collect();
            rough.iter().map(|f| counter(f, "timeouts")).sum::<u64>() >= 3
                && rough.iter().map(|f| counter(f, "exceptions")).sum::<u64>() >= 3
                && rough.iter().map(|f| counter(f, "crc_errors")).sum::<u64>() >= 1
                && rough.iter().all(|f| counter(f, "readings") >= 60)
        })
        .unwrap();
    for frame in frames.iter().filter(|f| f["id"].as_str().unwrap().starts_with('C')) {
        assert_eq!(
            counter(frame, "timeouts")
                + counter(frame, "crc_errors")
                + counter(frame, "exceptions")
                + counter(frame, "bad_frames"),
            0,
            "the clean bus felt the other's faults: {frame}"
        );
    }
    assert_all_readings_valid(dir.path());

    // Faults off: the rough bus recovers and its counters stop growing.
    for kind in ["drop", "delay", "bad-crc", "noise", "split", "exception"] {
        rough.process.send_line(&format!("fault all {kind} 0")).unwrap();
        rough
            .process
            .wait_for_line(oedolog_tests::Stream::Stdout, Duration::from_secs(5), |l| l.starts_with("ok fault"))
            .unwrap();
    }
    std::thread::sleep(Duration::from_millis(1500)); // let requests already delayed drain out
    let errors = |f: &[serde_json::Value]| -> (u64, u64) {
        let r: Vec<_> = f.iter().filter(|f| f["id"].as_str().unwrap().starts_with('R')).collect();
        (
            r.iter().map(|f| counter(f, "timeouts") + counter(f, "crc_errors") + counter(f, "exceptions")).sum(),
            r.iter().map(|f| counter(f, "readings")).sum(),
        )
    };
    let (errors_before, readings_before) = errors(&daemon.frames().unwrap());
    let after = daemon.wait_frames(Duration::from_secs(20), |f| errors(f).1 >= readings_before + 150).unwrap();
    assert_eq!(errors(&after).0, errors_before, "no new faults once the simulator stopped injecting them");
    assert_all_readings_valid(dir.path());
}

#[test]
fn a_serial_device_that_vanishes_and_comes_back_is_reopened() {
    let dir = temp_dir();
    let pty = pty_pair(dir.path()).unwrap();
    let device_end = pty.device_end.clone();
    let _sim = Simulator::start_rtu(&device_end, &["--frames", "1", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!(
        "[[bus]]\nid = \"usb\"\nkind = \"modbus-rtu\"\ndevice = \"{}\"\nparity = \"none\"\ntimeout_ms = 200\n",
        pty.master_end.display()
    );
    text += &sim_frame("F1", "usb", 1, 50);
    let daemon = Daemon::start(&write_config(dir.path(), &text), &[]).unwrap();
    daemon.wait_frames(Duration::from_secs(20), |f| counter(&f[0], "readings") >= 15).unwrap();

    // Unplug: the pty pair disappears (socat killed, links gone).
    drop(pty);
    daemon.wait_frames(Duration::from_secs(20), |f| f[0]["bus_up"] == false).unwrap();
    let before = counter(&daemon.frames().unwrap()[0], "readings");

    // Plug back in: same device paths; the daemon (back-off 1 s, 2 s, …) and the simulator reopen them.
    let _pty = pty_pair(dir.path()).unwrap();
    let frames = daemon
        .wait_frames(Duration::from_secs(40), |f| f[0]["bus_up"] == true && counter(&f[0], "readings") >= before + 15)
        .unwrap();
    assert!(counter(&frames[0], "readings") > before);
    let db = open_db(dir.path());
    let downs: i64 = db.query_row("SELECT count(*) FROM events WHERE kind = 'bus-down'", [], |r| r.get(0)).unwrap();
    let ups: i64 = db.query_row("SELECT count(*) FROM events WHERE kind = 'bus-up'", [], |r| r.get(0)).unwrap();
    assert!(downs >= 1 && ups >= 2, "bus-down {downs}, bus-up {ups}");
}

#[test]
fn a_line_output_gauge_is_read_on_request_and_its_noise_never_stored() {
    use std::io::{Read, Write};
    let dir = temp_dir();
    let pty = pty_pair(dir.path()).unwrap();
    // The gauge: answers each `?` with a reading that grows by 1 µm; every fourth answer comes after a
    // noise line (non-UTF-8 bytes, then a line too long for any indicator).
    let mut gauge =
        serialport::new(pty.device_end.to_string_lossy(), 9600).timeout(Duration::from_millis(200)).open().unwrap();
    let worker = std::thread::spawn(move || {
        let mut buf = [0u8; 64];
        let mut n = 0u32;
        loop {
            match gauge.read(&mut buf) {
                Ok(0) => return n,
                Ok(k) => {
                    for _ in buf[..k].iter().filter(|b| **b == b'?') {
                        if n % 4 == 3 {
                            let _ = gauge.write_all(b"\xff\xfe\x80 garbage\r\n");
                            let _ = gauge.write_all(&[b'9'; 200]);
                            let _ = gauge.write_all(b"\r\n");
                        }
                        let _ = gauge.write_all(format!("  {:.3} mm\r\n", 12.0 + f64::from(n) * 0.001).as_bytes());
                        n += 1;
                    }
                }
                Err(e) if e.kind() == std::io::ErrorKind::TimedOut => {
                    if n > 200 {
                        return n;
                    }
                }
                Err(_) => return n,
            }
        }
    });
    let mut text = config_head(dir.path());
    text += &format!(
        "[[bus]]\nid = \"dial\"\nkind = \"line-gauge\"\ndevice = \"{}\"\nbaud = 9600\nrequest = \"?\\r\"\ntimeout_ms = 500\n",
        pty.master_end.display()
    );
    text += "[[frame]]\nid = \"G1\"\nbus = \"dial\"\nring_diameter_mm = 50.0\npoll_ms = 20\nfast_poll_ms = 20\n[frame.displacement]\nrange = [0.0, 25.4]\n";
    let daemon = Daemon::start(&write_config(dir.path(), &text), &[]).unwrap();
    let frames = daemon.wait_frames(Duration::from_secs(20), |f| counter(&f[0], "readings") >= 20).unwrap();
    let shown = frames[0]["displacement_mm"].as_f64().unwrap();
    assert!((12.0..12.3).contains(&shown), "{shown}");
    assert!(counter(&frames[0], "bad_frames") >= 2, "noise lines are counted: {}", frames[0]);
    wait_stored(dir.path(), 20);
    let db = open_db(dir.path());
    let (count, min, max): (i64, f64, f64) = db
        .query_row("SELECT count(*), min(value), max(value) FROM readings", [], |r| {
            Ok((r.get(0)?, r.get(1)?, r.get(2)?))
        })
        .unwrap();
    assert!(count >= 20 && min >= 12.0 && max < 12.3, "only the gauge's readings are stored: {count} {min} {max}");
    drop(daemon);
    drop(pty);
    let answered = worker.join().unwrap();
    assert!(answered >= 20);
}
