//! Power loss: `kill -9` the daemon at random moments during ingest, 20 times. After each kill the file
//! passes `PRAGMA integrity_check` and holds every reading the store had reported committed.
//!
//! How the test learns what was committed: `oedolog run --report-commits` prints
//! `committed batch=B readings=N total=T last=FRAME:CHANNEL:AT_US` on stdout *after* each commit has
//! returned (WAL + synchronous=FULL: durable). The sum of N over every run is a lower bound on the rows
//! the file must hold (rows are only ever added, and duplicate keys are not counted), and each printed
//! `last` row must be present.

use std::time::Duration;

use oedolog_tests::{Simulator, Stream, temp_dir};
use rusqlite::params;

use super::*;

/// One `committed …` line of `oedolog run --report-commits`.
pub(crate) struct Commit {
    /// Readings the commit inserted.
    pub(crate) readings: i64,
    /// Its last reading: (frame key, channel, at_us).
    pub(crate) last: Option<(i64, i64, i64)>,
}

/// Parses a `committed batch=B readings=N total=T last=FRAME:CHANNEL:AT_US` line (`None` for any other).
pub(crate) fn parse_commit(line: &str) -> Option<Commit> {
    let mut readings = None;
    let mut last = None;
    for word in line.strip_prefix("committed ")?.split_whitespace() {
        match word.split_once('=')? {
            ("readings", n) => readings = n.parse().ok(),
            ("last", "-") => {}
            ("last", v) => {
                let parts: Vec<i64> = v.split(':').filter_map(|p| p.parse().ok()).collect();
                last = (parts.len() == 3).then(|| (parts[0], parts[1], parts[2]));
            }
            _ => {}
        }
    }
    Some(Commit { readings: readings?, last })
}

/// A tiny deterministic generator, so a failing run can be repeated (xorshift64).
struct Dice(u64);

impl Dice {
    fn below(&mut self, n: u64) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0 % n
    }
}

#[test]
fn kill_dash_nine_twenty_times_never_loses_a_reported_commit_or_corrupts_the_file() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "4", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    for unit in 1..=4 {
        text += &sim_frame(&format!("F{unit}"), "tcp", unit, 10);
    }
    let config = write_config(dir.path(), &text);
    let mut dice = Dice(0x0EDD_0106);
    let mut acknowledged = 0i64;
    for round in 0..20 {
        let mut daemon = Daemon::start(&config, &["--report-commits"]).unwrap();
        // Let it ingest for a random while (at least one commit), then pull the plug.
        let first = daemon
            .process
            .wait_for_line(Stream::Stdout, Duration::from_secs(20), |l| l.starts_with("committed "))
            .unwrap();
        let mut lines = vec![first];
        let stop = std::time::Instant::now() + Duration::from_millis(50 + dice.below(1200));
        while let Ok(line) = daemon.process.wait_for_line(
            Stream::Stdout,
            stop.saturating_duration_since(std::time::Instant::now()),
            |l| l.starts_with("committed "),
        ) {
            lines.push(line);
        }
        let pid = daemon.process.id();
        let status = std::process::Command::new("kill").args(["-9", &pid.to_string()]).status().unwrap();
        assert!(status.success());
        // Lines already in the pipe when the process died still arrive; collect them too.
        while let Ok(line) =
            daemon.process.wait_for_line(Stream::Stdout, Duration::from_millis(300), |l| l.starts_with("committed "))
        {
            lines.push(line);
        }
        drop(daemon);
        let commits: Vec<Commit> = lines.iter().filter_map(|l| parse_commit(l)).collect();
        acknowledged += commits.iter().map(|c| c.readings).sum::<i64>();

        let db = open_db(dir.path());
        let check: String = db.query_row("PRAGMA integrity_check", [], |r| r.get(0)).unwrap();
        assert_eq!(check, "ok", "round {round}: the file is damaged");
        let stored: i64 = db.query_row("SELECT count(*) FROM readings", [], |r| r.get(0)).unwrap();
        assert!(stored >= acknowledged, "round {round}: {stored} rows stored, {acknowledged} reported committed");
        if let Some((frame, channel, at)) = commits.iter().rev().find_map(|c| c.last) {
            let present: i64 = db
                .query_row(
                    "SELECT count(*) FROM readings WHERE frame_key = ?1 AND channel = ?2 AND at_us = ?3",
                    params![frame, channel, at],
                    |r| r.get(0),
                )
                .unwrap();
            assert_eq!(present, 1, "round {round}: the last reported reading is missing");
        }
    }
    assert!(acknowledged > 500, "the rounds ingested too little to mean anything: {acknowledged}");
}

#[test]
fn a_restart_resumes_the_running_test_and_journals_the_gap() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "1", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    text += &sim_frame("F1", "tcp", 1, 50);
    let config = write_config(dir.path(), &text);
    {
        let daemon = Daemon::start(&config, &[]).unwrap();
        daemon.wait_frames(Duration::from_secs(20), |f| counter(&f[0], "readings") >= 5).unwrap();
    }
    // A test with an increment under way, as the operator actions of the dashboard would leave it.
    {
        let db = rusqlite::Connection::open(dir.path().join("lab.sqlite")).unwrap();
        db.execute(
            "INSERT INTO tests (frame_key, specimen, height_mm, diameter_mm, state, started_us) VALUES (1, 'RS-1', 20, 63.5, 'primary', 1)",
            [],
        )
        .unwrap();
        db.execute("INSERT INTO increments (test_id, seq, stress_kpa, onset_us) VALUES (1, 1, 50, 2)", []).unwrap();
    }
    let mut daemon = Daemon::start(&config, &[]).unwrap();
    let frames = daemon.wait_frames(Duration::from_secs(20), |f| counter(&f[0], "readings") >= 5).unwrap();
    assert_eq!(frames[0]["state"], "primary", "a frame with a running test never shows idle after a restart");
    assert_eq!(frames[0]["test"]["stress_kpa"], 50.0);
    // kill -9 and start again: still resumed.
    let pid = daemon.process.id();
    std::process::Command::new("kill").args(["-9", &pid.to_string()]).status().unwrap();
    let _ = daemon.process.wait_for_line(Stream::Stdout, Duration::from_millis(200), |_| false);
    drop(daemon);
    let daemon = Daemon::start(&config, &[]).unwrap();
    let frames = daemon.wait_frames(Duration::from_secs(20), |f| counter(&f[0], "readings") >= 1).unwrap();
    assert_eq!(frames[0]["state"], "primary");
    let db = open_db(dir.path());
    let resumed: i64 =
        db.query_row("SELECT count(*) FROM events WHERE kind = 'test-resumed'", [], |r| r.get(0)).unwrap();
    assert_eq!(resumed, 2, "one gap event per restart");
    let gap: String = db
        .query_row("SELECT message FROM events WHERE kind = 'test-resumed' ORDER BY id DESC", [], |r| r.get(0))
        .unwrap();
    assert!(gap.contains("s since the last reading"), "{gap}");
}
