//! The daemon end to end: `oedolog run` against the simulator over Modbus TCP and RTU (pty pairs),
//! faults, a vanishing serial device, power loss by `kill -9`, restart resume, `check-config`, `backup`,
//! webhook notifications from `demo --config`, publishing to a real MQTT broker, the fleet board reading one.

mod acquire;
mod cli;
mod fleet;
mod mqtt;
mod notify;
pub(crate) mod power;

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, bail};
use oedolog_tests::{ChildGuard, READY_TIMEOUT, Stream, workspace_binary};

/// A frame block in the simulator's register map (README): displacement i32 0.1 µm at input 0, load i32
/// 0.1 N at input 2, temperature i16 0.01 °C at input 4.
pub(crate) fn sim_frame(id: &str, bus: &str, unit: u8, poll_ms: u64) -> String {
    format!(
        r#"
[[frame]]
id = "{id}"
bus = "{bus}"
unit = {unit}
ring_diameter_mm = 63.5
poll_ms = {poll_ms}
fast_poll_ms = {poll_ms}
[frame.displacement]
register = {{ table = "input", address = 0, type = "i32" }}
calibration = {{ gain = 0.0001 }}
range = [-1.0, 30.0]
[frame.load]
register = {{ table = "input", address = 2, type = "i32" }}
calibration = {{ gain = 0.0001 }}
range = [-0.5, 20.0]
[frame.temperature]
register = {{ table = "input", address = 4, type = "i16" }}
calibration = {{ gain = 0.01 }}
"#
    )
}

/// The head of a config: a store in `dir`, HTTP on any free loopback port, fast commits.
pub(crate) fn config_head(dir: &Path) -> String {
    format!(
        "[store]\npath = \"{}\"\nflush_ms = 100\n\n[http]\nlisten = \"127.0.0.1:0\"\n\n[log]\nlevel = \"info\"\n",
        dir.join("lab.sqlite").display()
    )
}

/// Writes `text` to `dir/oedolog.toml` and returns the path.
pub(crate) fn write_config(dir: &Path, text: &str) -> PathBuf {
    let path = dir.join("oedolog.toml");
    std::fs::write(&path, text).expect("write the config");
    path
}

/// A running `oedolog run`, killed when dropped.
pub(crate) struct Daemon {
    pub(crate) process: ChildGuard,
    pub(crate) http: SocketAddr,
}

impl Daemon {
    /// Starts `oedolog run --config FILE` (plus `extra`) and waits for its `listening on http://` line.
    pub(crate) fn start(config: &Path, extra: &[&str]) -> Result<Daemon> {
        Daemon::start_with(&workspace_binary("oedolog"), config, extra, READY_TIMEOUT)
    }

    /// [`Daemon::start`] with the `oedolog` binary at `binary`, waiting up to `ready_timeout` for the line.
    pub(crate) fn start_with(binary: &Path, config: &Path, extra: &[&str], ready_timeout: Duration) -> Result<Daemon> {
        let mut command = Command::new(binary);
        command.arg("run").arg("--config").arg(config).args(extra);
        Daemon::start_command(command, ready_timeout)
    }

    /// Runs `command` (an `oedolog run` however wrapped) and waits up to `ready_timeout` for its
    /// `listening on http://` line.
    pub(crate) fn start_command(command: Command, ready_timeout: Duration) -> Result<Daemon> {
        let mut process = ChildGuard::spawn("oedolog", command)?;
        let line =
            process.wait_for_line(Stream::Stdout, ready_timeout, |line| line.starts_with("listening on http://"))?;
        let addr = line.trim_start_matches("listening on http://").trim_end_matches('/');
        Ok(Daemon { process, http: addr.parse().with_context(|| format!("readiness line {line:?}"))? })
    }

    /// GET `path`, returning the body (HTTP/1.0, so the server closes when done).
    pub(crate) fn get(&self, path: &str) -> Result<String> {
        let mut stream = TcpStream::connect(self.http)?;
        stream.set_read_timeout(Some(Duration::from_secs(10)))?;
        write!(stream, "GET {path} HTTP/1.0\r\nHost: {}\r\n\r\n", self.http)?;
        let mut response = String::new();
        stream.read_to_string(&mut response)?;
        let (head, body) = response.split_once("\r\n\r\n").context("an HTTP response")?;
        if !head.starts_with("HTTP/1.0 200") && !head.starts_with("HTTP/1.1 200") {
            bail!("GET {path}: {head}");
        }
        Ok(body.to_string())
    }

    /// `GET /api/frames` as JSON.
    pub(crate) fn frames(&self) -> Result<Vec<serde_json::Value>> {
        Ok(serde_json::from_str(&self.get("/api/frames")?)?)
    }

    /// Waits until `ready` holds for `/api/frames`, polling every 100 ms (a state, not a start: the
    /// daemon is already up); returns the frames then.
    pub(crate) fn wait_frames(
        &self,
        timeout: Duration,
        ready: impl Fn(&[serde_json::Value]) -> bool,
    ) -> Result<Vec<serde_json::Value>> {
        let deadline = Instant::now() + timeout;
        loop {
            let frames = self.frames()?;
            if ready(&frames) {
                return Ok(frames);
            }
            if Instant::now() > deadline {
                bail!("frames never reached the awaited state: {}", serde_json::to_string_pretty(&frames)?);
            }
            std::thread::sleep(Duration::from_millis(100));
        }
    }
}

/// A counter of frame `f` in `/api/frames`.
pub(crate) fn counter(frame: &serde_json::Value, name: &str) -> u64 {
    frame["counters"][name].as_u64().unwrap_or(0)
}

/// Opens the database read-only for checks.
pub(crate) fn open_db(dir: &Path) -> rusqlite::Connection {
    rusqlite::Connection::open_with_flags(dir.join("lab.sqlite"), rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
        .expect("open the database")
}

/// Waits until the database holds at least `rows` readings (the store commits every `flush_ms`).
pub(crate) fn wait_stored(dir: &Path, rows: i64) -> i64 {
    let deadline = Instant::now() + Duration::from_secs(10);
    loop {
        let stored: i64 =
            open_db(dir).query_row("SELECT count(*) FROM readings", [], |r| r.get(0)).expect("count readings");
        if stored >= rows || Instant::now() > deadline {
            return stored;
        }
        std::thread::sleep(Duration::from_millis(50));
    }
}
