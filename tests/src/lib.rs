//! Shared helpers (`util`) for oedolog's end-to-end tests: a temp folder per test, the workspace
//! binaries, child processes awaited on a readiness line, socat pty pairs and the peer programs.
//!
//! It must not sleep to wait for a start, use fixed ports, or skip a test when a peer is missing: a
//! missing peer is a failure that says what to install.

use std::collections::VecDeque;
use std::ffi::OsStr;
use std::fmt::Write as _;
use std::io::{BufRead, BufReader, Read, Write};
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdin, Command, ExitStatus, Stdio};
use std::sync::mpsc::{self, Receiver, RecvTimeoutError, Sender};
use std::thread;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, anyhow, bail};
pub use tempfile::TempDir;

/// How long a child gets to print its readiness line. Generous: a debug build on a loaded 2-core CI
/// machine, and python importing pymodbus, both take a few seconds.
pub const READY_TIMEOUT: Duration = Duration::from_secs(20);

/// How long a one-shot peer (a client script, mbpoll) gets to run to its end.
pub const RUN_TIMEOUT: Duration = Duration::from_secs(30);

/// The pinned pymodbus version the peer suites are written against (its API changes between minor releases).
pub const PYMODBUS_VERSION: &str = "3.16.1";

/// A fresh temp folder for one test, removed when dropped.
pub fn temp_dir() -> TempDir {
    tempfile::Builder::new().prefix("oedolog-e2e-").tempdir().expect("create a temp folder for the test")
}

/// The workspace root (the folder above `tests/`).
pub fn workspace_root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).parent().expect("tests/ sits inside the workspace").to_path_buf()
}

/// The folder the workspace binaries are built into: `target/<profile>/`, the parent of the `deps/`
/// folder that holds this test executable.
pub fn binary_dir() -> PathBuf {
    let exe = std::env::current_exe().expect("the test executable's path");
    let deps = exe.parent().expect("the test executable has a folder");
    if deps.file_name() == Some(OsStr::new("deps")) {
        deps.parent().expect("deps/ has a parent").to_path_buf()
    } else {
        deps.to_path_buf()
    }
}

/// The path of a workspace binary (`oedolog`, `oedolog-sim`); panics with what to run if it is missing.
pub fn workspace_binary(name: &str) -> PathBuf {
    let path = binary_dir().join(format!("{name}{}", std::env::consts::EXE_SUFFIX));
    assert!(
        path.is_file(),
        "workspace binary {} is missing: build them with cargo build --workspace --bins",
        path.display()
    );
    path
}

/// The python interpreter of the peer venv: `OEDOLOG_PEER_PYTHON`, else
/// `<workspace>/target/peers-venv/bin/python`. Panics with what to run if neither exists or its
/// pymodbus is not the pinned version.
pub fn peer_python() -> PathBuf {
    let hint = format!("run tests/run.sh to install the peers (pymodbus {PYMODBUS_VERSION})");
    let path = match std::env::var_os("OEDOLOG_PEER_PYTHON") {
        Some(path) => {
            let path = PathBuf::from(path);
            assert!(path.is_file(), "OEDOLOG_PEER_PYTHON={} does not exist: {hint}", path.display());
            path
        }
        None => {
            let path = workspace_root().join("target/peers-venv/bin/python");
            assert!(path.is_file(), "no peer python (OEDOLOG_PEER_PYTHON unset, {} missing): {hint}", path.display());
            path
        }
    };
    let probe = Command::new(&path)
        .args(["-c", "from importlib.metadata import version; print(version('pymodbus'))"])
        .output()
        .unwrap_or_else(|error| panic!("cannot run {}: {error}; {hint}", path.display()));
    let found = String::from_utf8_lossy(&probe.stdout).trim().to_string();
    assert!(
        probe.status.success() && found == PYMODBUS_VERSION,
        "{} has pymodbus {found:?}, the suites need {PYMODBUS_VERSION}: {hint}",
        path.display()
    );
    path
}

/// A peer script under `tests/peers/`.
pub fn peer_script(name: &str) -> PathBuf {
    let path = workspace_root().join("tests/peers").join(name);
    assert!(path.is_file(), "peer script {} is missing", path.display());
    path
}

/// A command running `tests/peers/<script>` with the peer python.
pub fn python_peer(script: &str) -> Command {
    let mut command = Command::new(peer_python());
    // -u: unbuffered, so readiness lines arrive as they are printed.
    command.arg("-u").arg(peer_script(script));
    command
}

/// A program on PATH (`socat`, `mbpoll`); panics with what to install if it is missing.
pub fn peer_program(name: &str) -> PathBuf {
    let path_var = std::env::var_os("PATH").unwrap_or_default();
    std::env::split_paths(&path_var)
        .map(|dir| dir.join(name))
        .find(|candidate| candidate.is_file())
        .unwrap_or_else(|| panic!("{name} is not on PATH: install the Debian package {name} (tests/run.sh does it)"))
}

/// Which output stream of a child a line came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Stream {
    /// Standard output.
    Stdout,
    /// Standard error.
    Stderr,
}

enum Event {
    Line(Stream, String),
    Closed(Stream),
}

/// What a child process left when it ended.
#[derive(Debug)]
pub struct Finished {
    /// Its exit status.
    pub status: ExitStatus,
    /// Everything it printed on stdout.
    pub stdout: String,
    /// Everything it printed on stderr.
    pub stderr: String,
}

/// A child process with piped stdin/stdout/stderr whose lines are read on background threads;
/// it is killed when dropped, so a failing test leaves no process behind.
pub struct ChildGuard {
    name: String,
    child: Child,
    stdin: Option<ChildStdin>,
    events: Receiver<Event>,
    /// Lines read but not yet taken by a wait, per stream, in order.
    pending: VecDeque<(Stream, String)>,
    /// Every line seen so far, for failure messages.
    output_log: Vec<(Stream, String)>,
    stdout_open: bool,
    stderr_open: bool,
}

fn forward_lines(stream: Stream, reader: impl Read, events: Sender<Event>) {
    let mut reader = BufReader::new(reader);
    let mut raw = Vec::new();
    loop {
        raw.clear();
        match reader.read_until(b'\n', &mut raw) {
            Ok(0) | Err(_) => break,
            Ok(_) => {
                let text = String::from_utf8_lossy(&raw).trim_end_matches(['\r', '\n']).to_string();
                if events.send(Event::Line(stream, text)).is_err() {
                    return;
                }
            }
        }
    }
    let _ = events.send(Event::Closed(stream));
}

impl ChildGuard {
    /// Starts `command` with all three standard streams piped.
    pub fn spawn(name: &str, mut command: Command) -> Result<ChildGuard> {
        command.stdin(Stdio::piped()).stdout(Stdio::piped()).stderr(Stdio::piped());
        let mut child = command.spawn().with_context(|| format!("start {name}: {command:?}"))?;
        let (sender, events) = mpsc::channel();
        let stdout = child.stdout.take().context("child stdout is piped")?;
        let stderr = child.stderr.take().context("child stderr is piped")?;
        let out_sender = sender.clone();
        thread::spawn(move || forward_lines(Stream::Stdout, stdout, out_sender));
        thread::spawn(move || forward_lines(Stream::Stderr, stderr, sender));
        Ok(ChildGuard {
            name: name.to_string(),
            stdin: child.stdin.take(),
            child,
            events,
            pending: VecDeque::new(),
            output_log: Vec::new(),
            stdout_open: true,
            stderr_open: true,
        })
    }

    /// Starts `command` and waits until it prints a stdout line starting with `prefix`; returns the
    /// guard and that line.
    pub fn spawn_ready(name: &str, command: Command, prefix: &str) -> Result<(ChildGuard, String)> {
        let mut guard = ChildGuard::spawn(name, command)?;
        let line = guard.wait_for_line(Stream::Stdout, READY_TIMEOUT, |line| line.starts_with(prefix))?;
        Ok((guard, line))
    }

    /// The process id, for messages.
    pub fn id(&self) -> u32 {
        self.child.id()
    }

    fn record(&mut self, event: Event) {
        match event {
            Event::Line(stream, text) => {
                self.output_log.push((stream, text.clone()));
                self.pending.push_back((stream, text));
            }
            Event::Closed(Stream::Stdout) => self.stdout_open = false,
            Event::Closed(Stream::Stderr) => self.stderr_open = false,
        }
    }

    /// Waits up to `timeout` for a line on `stream` that `matches`, and returns it. Lines before it on
    /// that stream are passed over (they stay in the output_log). Fails if the stream closes first.
    pub fn wait_for_line(
        &mut self,
        stream: Stream,
        timeout: Duration,
        matches: impl Fn(&str) -> bool,
    ) -> Result<String> {
        let deadline = Instant::now() + timeout;
        loop {
            if let Some(index) = self.pending.iter().position(|(s, text)| *s == stream && matches(text)) {
                // Lines of this stream before the match are passed over; later ones stay pending.
                let mut kept = VecDeque::with_capacity(self.pending.len());
                let mut found = String::new();
                for (position, (s, text)) in self.pending.drain(..).enumerate() {
                    if position == index {
                        found = text;
                    } else if s != stream || position > index {
                        kept.push_back((s, text));
                    }
                }
                self.pending = kept;
                return Ok(found);
            }
            let open = match stream {
                Stream::Stdout => self.stdout_open,
                Stream::Stderr => self.stderr_open,
            };
            if !open {
                let status = self.exit_status_soon();
                bail!(
                    "{} closed its {stream:?} (exit: {status:?}) before the awaited line\n{}",
                    self.name,
                    self.output_log()
                );
            }
            let left = deadline.saturating_duration_since(Instant::now());
            match self.events.recv_timeout(left) {
                Ok(event) => self.record(event),
                Err(RecvTimeoutError::Timeout) => bail!(
                    "{} printed no awaited line on {stream:?} within {timeout:?}\n{}",
                    self.name,
                    self.output_log()
                ),
                Err(RecvTimeoutError::Disconnected) => {
                    self.stdout_open = false;
                    self.stderr_open = false;
                }
            }
        }
    }

    /// The exit status, if the child exits within a moment (its output just closed, so it is ending).
    fn exit_status_soon(&mut self) -> Option<ExitStatus> {
        let deadline = Instant::now() + Duration::from_secs(2);
        loop {
            match self.child.try_wait() {
                Ok(Some(status)) => return Some(status),
                Ok(None) if Instant::now() < deadline => thread::sleep(Duration::from_millis(10)),
                _ => return None,
            }
        }
    }

    /// Writes one line to the child's stdin.
    pub fn send_line(&mut self, line: &str) -> Result<()> {
        let stdin = self.stdin.as_mut().ok_or_else(|| anyhow!("{} stdin is closed", self.name))?;
        writeln!(stdin, "{line}").and_then(|()| stdin.flush()).with_context(|| format!("write to {} stdin", self.name))
    }

    /// Everything the child printed so far, one line each, tagged by stream.
    pub fn output_log(&self) -> String {
        let mut text = format!("--- output of {} (pid {}) ---\n", self.name, self.child.id());
        for (stream, line) in &self.output_log {
            let tag = match stream {
                Stream::Stdout => "out",
                Stream::Stderr => "err",
            };
            let _ = writeln!(text, "[{tag}] {line}");
        }
        text
    }

    /// Closes stdin and waits up to `timeout` for the child to close its output and exit.
    pub fn wait_for_exit(mut self, timeout: Duration) -> Result<Finished> {
        self.stdin = None;
        let deadline = Instant::now() + timeout;
        while self.stdout_open || self.stderr_open {
            let left = deadline.saturating_duration_since(Instant::now());
            match self.events.recv_timeout(left) {
                Ok(event) => self.record(event),
                Err(RecvTimeoutError::Timeout) => {
                    bail!("{} did not finish within {timeout:?}\n{}", self.name, self.output_log())
                }
                Err(RecvTimeoutError::Disconnected) => break,
            }
        }
        // Both pipes are closed, so the process is exiting; poll briefly for its status.
        let status = loop {
            if let Some(status) = self.child.try_wait().context("wait for child")? {
                break status;
            }
            if Instant::now() >= deadline {
                bail!("{} closed its output but did not exit within {timeout:?}", self.name);
            }
            thread::sleep(Duration::from_millis(5));
        };
        let collect = |wanted: Stream| {
            self.output_log.iter().filter(|(stream, _)| *stream == wanted).fold(String::new(), |mut all, (_, line)| {
                all.push_str(line);
                all.push('\n');
                all
            })
        };
        Ok(Finished { status, stdout: collect(Stream::Stdout), stderr: collect(Stream::Stderr) })
    }
}

impl Drop for ChildGuard {
    fn drop(&mut self) {
        // Already exited is fine; either way reap it so no zombie outlives the test.
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Runs a one-shot command to its end (stdin closed), with [`RUN_TIMEOUT`] as the deadline.
pub fn run_to_end(name: &str, command: Command) -> Result<Finished> {
    ChildGuard::spawn(name, command)?.wait_for_exit(RUN_TIMEOUT)
}

/// A pair of linked pseudo-terminals made by socat, standing in for a serial line: bytes written to
/// one end come out of the other. socat is killed when this is dropped.
pub struct PtyPair {
    /// The symlink to one end (give it to the device/server side).
    pub device_end: PathBuf,
    /// The symlink to the other end (give it to the master/client side).
    pub master_end: PathBuf,
    _socat: ChildGuard,
}

/// Starts `socat -d -d pty,raw,echo=0,link=DIR/a pty,raw,echo=0,link=DIR/b` and waits on its stderr
/// for the two "PTY is /dev/pts/N" notices and the start of its transfer loop (the links exist then).
pub fn pty_pair(dir: &Path) -> Result<PtyPair> {
    let device_end = dir.join("pty-device");
    let master_end = dir.join("pty-master");
    let mut command = Command::new(peer_program("socat"));
    command
        .arg("-d")
        .arg("-d")
        .arg(format!("pty,raw,echo=0,link={}", device_end.display()))
        .arg(format!("pty,raw,echo=0,link={}", master_end.display()));
    let mut socat = ChildGuard::spawn("socat", command)?;
    for _ in 0..2 {
        socat.wait_for_line(Stream::Stderr, READY_TIMEOUT, |line| line.contains("PTY is /dev/"))?;
    }
    socat.wait_for_line(Stream::Stderr, READY_TIMEOUT, |line| line.contains("starting data transfer loop"))?;
    for link in [&device_end, &master_end] {
        if !link.exists() {
            bail!("socat reported its ptys but {} does not exist\n{}", link.display(), socat.output_log());
        }
    }
    Ok(PtyPair { device_end, master_end, _socat: socat })
}

/// A running `oedolog-sim`, killed when dropped.
pub struct Simulator {
    /// The process; send `apply …` control lines with [`ChildGuard::send_line`].
    pub process: ChildGuard,
    /// Where it listens for Modbus TCP, when started with `--tcp`.
    pub tcp: Option<SocketAddr>,
    /// The serial device it serves Modbus RTU on, when started with `--rtu`.
    pub rtu: Option<PathBuf>,
}

impl Simulator {
    /// Starts `oedolog-sim` serving Modbus TCP on a port the OS picks (`--tcp 127.0.0.1:0`), plus
    /// `extra_args`, and waits for its `listening on tcp` line.
    pub fn start_tcp(extra_args: &[&str]) -> Result<Simulator> {
        Simulator::start_tcp_with(&workspace_binary("oedolog-sim"), extra_args)
    }

    /// [`Simulator::start_tcp`] with the `oedolog-sim` binary at `binary` (a release build, say).
    pub fn start_tcp_with(binary: &Path, extra_args: &[&str]) -> Result<Simulator> {
        let mut command = Command::new(binary);
        command.args(["--tcp", "127.0.0.1:0"]).args(extra_args);
        let (process, line) = ChildGuard::spawn_ready("oedolog-sim", command, "listening on tcp ")?;
        let address = line["listening on tcp ".len()..].trim();
        let tcp = address.parse().with_context(|| format!("simulator readiness line {line:?}"))?;
        Ok(Simulator { process, tcp: Some(tcp), rtu: None })
    }

    /// Starts `oedolog-sim` serving Modbus RTU on `path` with no parity (a pty cannot take even parity
    /// from pyserial; DEVELOPERS.md, Testing), plus `extra_args`, and waits for `listening on rtu`.
    pub fn start_rtu(path: &Path, extra_args: &[&str]) -> Result<Simulator> {
        let mut command = Command::new(workspace_binary("oedolog-sim"));
        command.arg("--rtu").arg(path).args(["--parity", "none"]).args(extra_args);
        let (process, line) = ChildGuard::spawn_ready("oedolog-sim", command, "listening on rtu ")?;
        let reported = PathBuf::from(line["listening on rtu ".len()..].trim());
        if reported != path {
            bail!("simulator serves {} but was asked for {}", reported.display(), path.display());
        }
        Ok(Simulator { process, tcp: None, rtu: Some(reported) })
    }

    /// The TCP address; fails if the simulator was not started with `--tcp`.
    pub fn tcp_addr(&self) -> Result<SocketAddr> {
        self.tcp.ok_or_else(|| anyhow!("simulator was not started with --tcp"))
    }
}

/// Decodes a 32-bit signed value sent as two registers, high word first (the simulator's map).
pub fn i32_high_word_first(high: u16, low: u16) -> i32 {
    ((u32::from(high) << 16) | u32::from(low)) as i32
}

/// Decodes a 32-bit unsigned value sent as two registers, high word first.
pub fn u32_high_word_first(high: u16, low: u16) -> u32 {
    (u32::from(high) << 16) | u32::from(low)
}

/// Packs ASCII text into registers two bytes each, first byte in the high half (the Modbus convention
/// for strings, from memory), padded with spaces to `registers` words.
pub fn ascii_words(text: &str, registers: usize) -> Vec<u16> {
    let mut bytes = text.as_bytes().to_vec();
    bytes.resize(registers * 2, b' ');
    bytes.chunks(2).map(|pair| u16::from_be_bytes([pair[0], pair[1]])).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    // Values worked by hand: 0xFFFF_0001 is -65535 in two's complement.
    #[test]
    fn i32_high_word_first_puts_the_first_register_in_the_high_half() {
        assert_eq!(i32_high_word_first(0xFFFF, 0x0001), -65535);
        assert_eq!(i32_high_word_first(0x0001, 0x0000), 65536);
        assert_eq!(u32_high_word_first(0x0001, 0x0002), 0x0001_0002);
    }

    // "AB" is 0x41 0x42 in ASCII (ISO 646).
    #[test]
    fn ascii_words_pads_with_spaces_and_puts_the_first_byte_high() {
        assert_eq!(ascii_words("ABC", 3), vec![0x4142, 0x4320, 0x2020]);
    }

    #[test]
    fn child_guard_returns_the_awaited_line_and_keeps_earlier_ones_in_the_output_log() {
        let mut command = Command::new("sh");
        command.args(["-c", "echo starting; echo oops >&2; echo 'ready at 42'; read _"]);
        let (guard, line) = ChildGuard::spawn_ready("sh", command, "ready at").unwrap();
        assert_eq!(line, "ready at 42");
        assert!(guard.output_log().contains("[out] starting"), "{}", guard.output_log());
    }

    #[test]
    fn child_guard_keeps_lines_after_the_awaited_one_for_the_next_wait() {
        let mut command = Command::new("sh");
        command.args(["-c", "echo 'listening on tcp x'; echo 'listening on rtu y'; read _"]);
        let (mut guard, first) = ChildGuard::spawn_ready("sh", command, "listening on tcp").unwrap();
        assert_eq!(first, "listening on tcp x");
        let second = guard.wait_for_line(Stream::Stdout, READY_TIMEOUT, |line| line.starts_with("listening on rtu"));
        assert_eq!(second.unwrap(), "listening on rtu y");
    }

    #[test]
    fn child_guard_fails_when_the_child_exits_without_the_line() {
        let mut command = Command::new("sh");
        command.args(["-c", "echo something else"]);
        let error = ChildGuard::spawn_ready("sh", command, "ready").err().expect("no readiness line");
        assert!(error.to_string().contains("closed its Stdout"), "{error:#}");
    }

    #[test]
    fn run_to_end_collects_both_streams_and_the_status() {
        let mut command = Command::new("sh");
        command.args(["-c", "echo out; echo err >&2; exit 3"]);
        let finished = run_to_end("sh", command).unwrap();
        assert_eq!(finished.status.code(), Some(3));
        assert_eq!(finished.stdout, "out\n");
        assert_eq!(finished.stderr, "err\n");
    }
}
