//! The command line: `check-config` (exit status, every problem with line and field), `backup` while
//! the daemon runs, `--version`.

use std::process::Command;
use std::time::Duration;

use oedolog_tests::{Simulator, run_to_end, temp_dir, workspace_binary};

use super::*;

#[test]
fn check_config_accepts_the_sample_and_refuses_a_broken_file_with_line_and_field() {
    let sample = oedolog_tests::workspace_root().join("daemon/oedolog.sample.toml");
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("check-config").arg(&sample);
    let ok = run_to_end("oedolog check-config", command).unwrap();
    assert!(ok.status.success(), "{}", ok.stderr);
    assert!(ok.stdout.contains("valid") && ok.stdout.contains("3 frame(s), 3 bus(es)"), "{}", ok.stdout);

    let dir = temp_dir();
    let broken = std::fs::read_to_string(&sample)
        .unwrap()
        .replace("baud = 19200", "baud = 19000")
        .replace("unit = 1 ", "unit = 300 ");
    let path = dir.path().join("broken.toml");
    std::fs::write(&path, broken).unwrap();
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("check-config").arg(&path);
    let bad = run_to_end("oedolog check-config", command).unwrap();
    assert_eq!(bad.status.code(), Some(1));
    assert!(bad.stderr.contains("bus[0].baud: 19000 is not allowed (allowed: 1200, 2400"), "{}", bad.stderr);
    assert!(bad.stderr.contains("frame[0].unit: 300 is not allowed (allowed 1 to 247"), "{}", bad.stderr);
    let text = std::fs::read_to_string(&sample).unwrap();
    let baud_line = text.lines().position(|l| l.starts_with("baud = 19200")).unwrap() + 1;
    assert!(bad.stderr.contains(&format!("line {baud_line}, column 8")), "the baud line of the sample: {}", bad.stderr);
}

#[test]
fn check_config_accepts_the_fleet_sample_and_names_what_the_board_reads() {
    let sample = oedolog_tests::workspace_root().join("daemon/fleet.sample.toml");
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("check-config").arg(&sample);
    let ok = run_to_end("oedolog check-config", command).unwrap();
    assert!(ok.status.success(), "{}", ok.stderr);
    assert!(ok.stdout.contains("reads soil-labs/+/status and soil-labs/+/+/state"), "{}", ok.stdout);
    // A wildcard in the prefix is refused with its line and field, as in a lab's file.
    let dir = temp_dir();
    let text = std::fs::read_to_string(&sample).unwrap();
    let path = dir.path().join("fleet.toml");
    std::fs::write(&path, text.replace("topic_prefix = \"soil-labs\"", "topic_prefix = \"soil-labs/#\"")).unwrap();
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("check-config").arg(&path);
    let bad = run_to_end("oedolog check-config", command).unwrap();
    assert_eq!(bad.status.code(), Some(1), "{}", bad.stdout);
    let line = text.lines().position(|l| l.starts_with("topic_prefix")).unwrap() + 1;
    assert!(bad.stderr.contains("topic_prefix") && bad.stderr.contains(&format!("line {line}")), "{}", bad.stderr);
}

#[test]
fn backup_while_the_daemon_runs_gives_a_consistent_copy() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "2", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    text += &sim_frame("F1", "tcp", 1, 10);
    text += &sim_frame("F2", "tcp", 2, 10);
    let config = write_config(dir.path(), &text);
    let daemon = Daemon::start(&config, &[]).unwrap();
    daemon.wait_frames(Duration::from_secs(20), |f| f.iter().all(|f| counter(f, "readings") >= 50)).unwrap();
    assert!(wait_stored(dir.path(), 100) >= 100);
    let dest = dir.path().join("copy.sqlite");
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("backup").arg(&dest).arg("--config").arg(&config);
    let done = run_to_end("oedolog backup", command).unwrap();
    assert!(done.status.success(), "{}", done.stderr);
    let copy = rusqlite::Connection::open(&dest).unwrap();
    let check: String = copy.query_row("PRAGMA integrity_check", [], |r| r.get(0)).unwrap();
    assert_eq!(check, "ok");
    let rows: i64 = copy.query_row("SELECT count(*) FROM readings", [], |r| r.get(0)).unwrap();
    assert!(rows >= 100, "{rows}");
    // A second backup to the same file is refused rather than overwriting it.
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("backup").arg(&dest).arg("--config").arg(&config);
    let again = run_to_end("oedolog backup", command).unwrap();
    assert!(!again.status.success() && again.stderr.contains("exists"), "{}", again.stderr);
}

#[test]
fn version_and_help_answer() {
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("--version");
    let v = run_to_end("oedolog --version", command).unwrap();
    assert!(v.status.success() && v.stdout.starts_with("oedolog "), "{}", v.stdout);
    let mut command = Command::new(workspace_binary("oedolog"));
    command.arg("--help");
    let h = run_to_end("oedolog --help", command).unwrap();
    for sub in ["run", "demo", "check-config", "backup"] {
        assert!(h.stdout.contains(sub), "{}", h.stdout);
    }
}

#[test]
fn log_lines_on_a_pipe_carry_no_colour_codes() {
    let dir = temp_dir();
    let sim = Simulator::start_tcp(&["--frames", "1", "--schedule", "manual"]).unwrap();
    let mut text = config_head(dir.path());
    text += &format!("[[bus]]\nid = \"tcp\"\nkind = \"modbus-tcp\"\naddress = \"{}\"\n", sim.tcp_addr().unwrap());
    text += &sim_frame("F1", "tcp", 1, 10);
    let config = write_config(dir.path(), &text);
    let mut daemon = Daemon::start(&config, &[]).unwrap();
    // The bus coming up is logged at info on stderr, which is a pipe here (as under systemd or `2> file`).
    let line = daemon
        .process
        .wait_for_line(oedolog_tests::Stream::Stderr, Duration::from_secs(20), |l| l.contains("bus"))
        .unwrap();
    let log = daemon.process.output_log();
    assert!(!log.contains('\u{1b}'), "an escape code in piped log output: {line:?}\n{log}");
    assert!(line.contains("INFO"), "the level is still written out: {line:?}");
}

#[test]
fn a_demo_refused_for_a_busy_port_creates_no_database() {
    let dir = temp_dir();
    let taken = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
    let port = taken.local_addr().unwrap().port();
    let db = dir.path().join("refused.sqlite");
    let mut command = Command::new(workspace_binary("oedolog"));
    command.args(["demo", "--frames", "1", "--listen", &format!("127.0.0.1:{port}"), "--db"]).arg(&db);
    let finished = run_to_end("oedolog demo", command).unwrap();
    assert!(!finished.status.success(), "{}", finished.stderr);
    assert!(
        finished.stderr.contains("Address already in use") || finished.stderr.contains("cannot listen"),
        "{}",
        finished.stderr
    );
    assert!(!db.exists(), "the refused start left {}", db.display());
    assert!(!finished.stderr.contains("writer has stopped"), "no bus was started: {}", finished.stderr);
}

#[test]
fn a_demo_on_every_interface_prints_an_address_a_browser_can_open() {
    let dir = temp_dir();
    let config = write_config(
        dir.path(),
        "[[http.user]]\nname = \"ana\"\nrole = \"operator\"\ntoken = \"e2e-operator-token-0123\"\n",
    );
    let mut command = Command::new(workspace_binary("oedolog"));
    command.args(["demo", "--frames", "1", "--listen", "0.0.0.0:0", "--config"]).arg(&config).arg("--db");
    command.arg(dir.path().join("open.sqlite"));
    let mut demo = oedolog_tests::ChildGuard::spawn("oedolog demo", command).unwrap();
    let line = demo
        .wait_for_line(oedolog_tests::Stream::Stdout, oedolog_tests::READY_TIMEOUT, |l| l.starts_with("dashboard at "))
        .unwrap();
    let url = line.trim_start_matches("dashboard at ").trim();
    assert!(url.starts_with("http://127.0.0.1:") && url.ends_with('/'), "{line}");
    let addr: std::net::SocketAddr = url.trim_start_matches("http://").trim_end_matches('/').parse().unwrap();
    let (status, head, _) =
        crate::api::http(addr, "GET", "/api/frames", Some("Bearer e2e-operator-token-0123"), None).unwrap();
    assert_eq!(status, 200, "{head}");
}
