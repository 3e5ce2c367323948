//! Soak: 32 simulated frames at high speed — the simulator and `oedolog run --simulated-clock` at the same
//! speed, so a 30-minute run is weeks of clock time — with over 5 % of requests faulted and the daemon killed
//! with SIGKILL every few seconds and restarted on the same database. The harness is the technician: it
//! starts a test on every frame, then arms and puts on the next load of a ladder whenever a frame is ready.
//! At the end it checks the daemon's failure promises (no acknowledged reading lost, the file never corrupt,
//! every frame still logging after the restarts) and writes a JSON report: readings acknowledged vs stored, the file's
//! integrity, memory and CPU over time, alarms raised and cleared, and each `ready` against the simulator's
//! truth (t100).
//!
//! The default run holds a ~25 s smoke; `tests/soak.sh` drives the same code for 30 minutes with release
//! binaries through the `OEDOLOG_SOAK_*` variables ([`Settings`]). It never sleeps to synchronise: every
//! wait polls a condition with a deadline.

use std::collections::BTreeMap;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

use anyhow::{Context, Result, anyhow, bail, ensure};
use oedolog_sim::scenario::{SEATING_KPA, specimen_for_frame};
use oedolog_sim::sensors::Gauge;
use oedolog_tests::{Finished, Simulator, Stream, TempDir, binary_dir, temp_dir};
use rusqlite::params;
use serde_json::{Value, json};

use crate::api::http;
use crate::daemon::power::parse_commit;
use crate::daemon::{Daemon, counter, open_db};

/// Simulated frames, unit ids 1..=32.
const FRAMES: usize = 32;
/// Frames per Modbus TCP link (16 links to the one simulator, as a lab with several gateways): one request
/// is outstanding per bus and a faulted one costs its link a whole timeout, which at high speed is many
/// polls of clock time, so links are kept short.
const FRAMES_PER_BUS: usize = 2;
/// Faults on every frame, probability per request: 5.5 % of requests in all.
const FAULTS: [(&str, f64); 3] = [("drop", 0.03), ("exception", 0.015), ("delay", 0.01)];
/// How late a delayed reply comes, ms: past [`BUS_TIMEOUT_MS`], so it counts as a timeout.
const DELAY_MS: u64 = 300;
/// The daemon's reply deadline on each link, ms.
const BUS_TIMEOUT_MS: u64 = 150;
/// Poll periods in clock time: steady, fast, and how long the fast polls last after a load change (s).
const POLL_STEADY_S: u64 = 30;
const POLL_FAST_S: u64 = 5;
const FAST_WINDOW_S: u64 = 900;
/// Channels read per poll (displacement, load, temperature).
const CHANNELS: usize = 3;
/// The technician's stresses, kPa: doubling from 12.5 (load increment ratio 1, common practice) to 1600,
/// then an unload–reload cycle repeated for as long as the soak lasts.
const LADDER_KPA: [f64; 8] = [12.5, 25.0, 50.0, 100.0, 200.0, 400.0, 800.0, 1600.0];
const CYCLE_KPA: [f64; 4] = [400.0, 100.0, 400.0, 1600.0];
/// How often the harness looks at the frames (a poll interval, not a synchronisation).
const LOOK_EVERY: Duration = Duration::from_millis(100);
/// How often memory and CPU are sampled.
const SAMPLE_EVERY: Duration = Duration::from_secs(5);
/// A (re)start of the daemon gets this long to say it listens (an integrity check of a large file).
const RESTART_TIMEOUT: Duration = Duration::from_secs(120);
/// A control line to the simulator gets this long to be answered.
const CONTROL_TIMEOUT: Duration = Duration::from_secs(10);
/// A frame still `armed` this long after its load went on (clock time) never found the step.
const STUCK_ARMED_CLOCK_S: f64 = 3600.0;
/// A `ready` this early against the true t100 counts as too early.
const EARLIEST_READY_RATIO: f64 = 0.9;
/// The share of too-early `ready`s the soak tolerates. At 1500× a poll is never closer than 30 s of
/// clock time after a load step and each failed request leaves a ~225 s hole, so the early √t readings the
/// constructions want are missing; on 2026-12-02 about 1 in 150 `ready`s (small early increments, t100 of
/// about an hour) still came at 0.6–0.75·t100. That is an open defect of the watch under sparse sampling
/// (at realistic polling the watch's own test finds none before t100): the soak reports every case and
/// fails when they become more than occasional.
const TOO_EARLY_SHARE: f64 = 0.02;
/// Memory bounds: the last sample under this many times the first after warm-up, and never above the cap.
const RSS_GROWTH_LIMIT: f64 = 3.0;
const RSS_CAP_MB: f64 = 200.0;
/// Samples this soon after the first start are warm-up.
const WARM_UP_S: f64 = 5.0;

/// The stress of ladder step `n` (0-based), kPa.
fn ladder_kpa(n: usize) -> f64 {
    LADDER_KPA.get(n).copied().unwrap_or_else(|| CYCLE_KPA[(n - LADDER_KPA.len()) % CYCLE_KPA.len()])
}

/// What the soak runs for, from `OEDOLOG_SOAK_*` variables.
struct Settings {
    /// `OEDOLOG_SOAK_SECS`: real seconds of soak (default 25).
    secs: f64,
    /// `OEDOLOG_SOAK_KILL_EVERY_SECS`: real seconds between kills (default 7, or 120 when SECS > 60).
    kill_every_secs: f64,
    /// `OEDOLOG_SOAK_SPEED`: clock seconds per real second, daemon and simulator (default 1500).
    speed: f64,
    /// `OEDOLOG_SOAK_BIN_DIR`: where `oedolog` and `oedolog-sim` are (default the e2e tests' target dir).
    bin_dir: PathBuf,
    /// `OEDOLOG_SOAK_REPORT`: where the JSON report goes (also printed); its folder then holds `work/`.
    report: Option<PathBuf>,
}

fn env_number(name: &str, default: f64, low: f64, high: f64) -> Result<f64> {
    match std::env::var(name) {
        Err(std::env::VarError::NotPresent) => Ok(default),
        Err(error) => bail!("{name}: {error} (allowed a number from {low} to {high})"),
        Ok(text) => text
            .trim()
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite() && (low..=high).contains(v))
            .ok_or_else(|| anyhow!("{name}={text:?}: allowed a number from {low} to {high}")),
    }
}

impl Settings {
    fn from_env() -> Result<Settings> {
        let secs = env_number("OEDOLOG_SOAK_SECS", 25.0, 5.0, 7.0 * 86_400.0)?;
        let kill_default = if secs > 60.0 { 120.0 } else { 7.0 };
        let kill_every_secs = env_number("OEDOLOG_SOAK_KILL_EVERY_SECS", kill_default, 1.0, 86_400.0)?;
        let speed = env_number("OEDOLOG_SOAK_SPEED", 1500.0, 1.0, 100_000.0)?;
        let bin_dir = std::env::var_os("OEDOLOG_SOAK_BIN_DIR").map_or_else(binary_dir, PathBuf::from);
        let report = std::env::var_os("OEDOLOG_SOAK_REPORT").map(PathBuf::from);
        Ok(Settings { secs, kill_every_secs, speed, bin_dir, report })
    }

    fn binary(&self, name: &str) -> Result<PathBuf> {
        let path = self.bin_dir.join(format!("{name}{}", std::env::consts::EXE_SUFFIX));
        ensure!(
            path.is_file(),
            "{} is missing (OEDOLOG_SOAK_BIN_DIR or the e2e target dir): cargo build --workspace --bins",
            path.display()
        );
        Ok(path)
    }
}

/// The soak's folder: beside the report when there is one (kept for a look afterwards), else a temp dir.
enum WorkDir {
    Kept(PathBuf),
    Temp(TempDir),
}

impl WorkDir {
    fn new(settings: &Settings) -> Result<WorkDir> {
        let Some(report) = &settings.report else { return Ok(WorkDir::Temp(temp_dir())) };
        let dir = report.parent().unwrap_or(Path::new(".")).join("work");
        if dir.exists() {
            std::fs::remove_dir_all(&dir).with_context(|| format!("clear {}", dir.display()))?;
        }
        std::fs::create_dir_all(&dir).with_context(|| format!("create {}", dir.display()))?;
        Ok(WorkDir::Kept(dir))
    }

    fn path(&self) -> &Path {
        match self {
            WorkDir::Kept(path) => path,
            WorkDir::Temp(dir) => dir.path(),
        }
    }
}

/// Clock time without a valid reading before `stale` is raised. At 1500× the default (ten steady polls,
/// 300 s) is 0.2 s of real time, less than one restart; an hour of clock time (2.4 s real) is an outage
/// worth a person's look at this speed, as five minutes is at 1×.
const STALE_ALARM: &str = "[alarms]\nstale_after_s = 3600\n";

/// The configuration: eight TCP links to the simulator, 32 dead-weight frames with the scenario's rings.
fn config_text(dir: &Path, sim: SocketAddr) -> String {
    let mut text = format!(
        "[store]\npath = \"{}\"\n\n[http]\nlisten = \"127.0.0.1:0\"\n\n[log]\nlevel = \"warn\"\n\n{STALE_ALARM}",
        dir.join("lab.sqlite").display()
    );
    for link in 1..=FRAMES.div_ceil(FRAMES_PER_BUS) {
        text += &format!(
            "\n[[bus]]\nid = \"link-{link}\"\nkind = \"modbus-tcp\"\naddress = \"{sim}\"\ntimeout_ms = {BUS_TIMEOUT_MS}\nretries = 1\n"
        );
    }
    // The simulator's gauge: its displacement range is the travel, so `gauge-travel` can warn.
    let travel_mm = Gauge::standard().travel_mm();
    for index in 0..FRAMES {
        let unit = index + 1;
        let specimen = specimen_for_frame(index);
        // The simulator's register map (README): 0.1 µm, 0.1 N and 0.01 °C counts.
        text += &format!(
            r#"
[[frame]]
id = "F{unit}"
name = "Frame {unit}"
bus = "link-{link}"
unit = {unit}
loading = "dead-weight"
lever_ratio = 10.0
ring_diameter_mm = {diameter}
poll_ms = {steady}
fast_poll_ms = {fast}
fast_window_s = {FAST_WINDOW_S}
[frame.displacement]
register = {{ table = "input", address = 0, type = "i32" }}
calibration = {{ gain = 0.0001 }}
range = [0.0, {travel_mm:?}]
[frame.load]
register = {{ table = "input", address = 2, type = "i32" }}
calibration = {{ gain = 0.0001 }}
range = [-0.5, 20.0]
[frame.temperature]
register = {{ table = "input", address = 4, type = "i16" }}
calibration = {{ gain = 0.01 }}
"#,
            link = index / FRAMES_PER_BUS + 1,
            diameter = specimen.diameter_mm,
            steady = POLL_STEADY_S * 1000,
            fast = POLL_FAST_S * 1000,
        );
    }
    text
}

fn wall_us() -> i64 {
    SystemTime::now().duration_since(UNIX_EPOCH).map_or(0, |d| d.as_micros() as i64)
}

/// One control line to the simulator and its answer (a line that `answer` accepts, or its error line).
fn ask(sim: &mut Simulator, line: &str, answer: impl Fn(&str) -> bool) -> Result<String> {
    sim.process.send_line(line)?;
    let reply =
        sim.process.wait_for_line(Stream::Stdout, CONTROL_TIMEOUT, |l| answer(l) || l.starts_with("error: "))?;
    ensure!(!reply.starts_with("error: "), "simulator answered `{line}` with {reply}");
    Ok(reply)
}

/// The simulator's JSON state of one unit.
fn sim_state(sim: &mut Simulator, unit: usize) -> Result<Value> {
    let line = ask(sim, &format!("state {unit}"), |l| l.starts_with('{'))?;
    Ok(serde_json::from_str(&line)?)
}

/// Memory and CPU of one process from /proc: (VmRSS MB, utime + stime in clock ticks).
fn proc_usage(pid: u32) -> Option<(f64, u64)> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let rss_kb: f64 =
        status.lines().find_map(|l| l.strip_prefix("VmRSS:"))?.trim().trim_end_matches("kB").trim().parse().ok()?;
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    // Fields after the command name in parentheses: state is field 3, utime 14, stime 15 (proc(5)).
    let fields: Vec<&str> = stat.rsplit_once(')')?.1.split_whitespace().collect();
    let ticks = fields.get(11)?.parse::<u64>().ok()? + fields.get(12)?.parse::<u64>().ok()?;
    Some((rss_kb / 1024.0, ticks))
}

/// Clock ticks per second of /proc's CPU times (`getconf CLK_TCK`; 100 on Linux when it cannot say).
fn clock_ticks_per_s() -> f64 {
    Command::new("getconf")
        .arg("CLK_TCK")
        .output()
        .ok()
        .and_then(|o| String::from_utf8_lossy(&o.stdout).trim().parse::<f64>().ok())
        .filter(|t| *t > 0.0)
        .unwrap_or(100.0)
}

/// min / median / max / count of `values` (nulls when empty).
fn spread(values: &[f64]) -> Value {
    let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    sorted.sort_by(f64::total_cmp);
    if sorted.is_empty() {
        return json!({ "count": 0, "min": null, "median": null, "max": null });
    }
    let median = if sorted.len() % 2 == 1 {
        sorted[sorted.len() / 2]
    } else {
        (sorted[sorted.len() / 2 - 1] + sorted[sorted.len() / 2]) / 2.0
    };
    json!({ "count": sorted.len(), "min": sorted[0], "median": median, "max": sorted[sorted.len() - 1] })
}

fn round(value: f64, digits: i32) -> f64 {
    let scale = 10f64.powi(digits);
    (value * scale).round() / scale
}

/// One memory/CPU sample.
struct Sample {
    /// Real seconds since the soak began.
    at_s: f64,
    /// Which daemon run (0-based).
    run: usize,
    daemon_rss_mb: f64,
    /// CPU seconds of this daemon run so far.
    daemon_cpu_s: f64,
    sim_rss_mb: f64,
    sim_cpu_s: f64,
}

/// One daemon process from start to kill (or the final stop).
struct Run {
    started_at_s: f64,
    /// Real seconds from the kill of the previous run to this one's `listening` line (0 for the first).
    restart_s: f64,
    /// Readings the store reported committed in this run.
    acknowledged: i64,
    /// The last reading it reported committed.
    last: Option<(i64, i64, i64)>,
    /// CPU seconds at the last sample before it ended.
    cpu_s: f64,
    /// How it ended: `killed`, `stopped` (SIGTERM, exit status) or still `running`.
    end: String,
}

/// A `ready` seen by the technician, with the simulator's truth for the increment.
struct Ready {
    frame: String,
    test_id: i64,
    seq: i64,
    stress_kpa: f64,
    from_kpa: f64,
    onset_us: i64,
    ready_us: i64,
    truth_onset_s: f64,
    /// The true onset on the daemon's clock, µs.
    truth_onset_us: f64,
    truth_t100_s: f64,
    virgin: bool,
}

impl Ready {
    /// (ready − the true onset) over the true t100: when `ready` came on the specimen's own timeline.
    fn ratio(&self) -> f64 {
        (self.ready_us as f64 - self.truth_onset_us) / 1e6 / self.truth_t100_s
    }

    /// (ready − the daemon's t0) over the true t100: the elapsed time the daemon itself measured (its t0
    /// can be off by a poll gap, more so at high speed with faults).
    fn ratio_from_found_onset(&self) -> f64 {
        (self.ready_us - self.onset_us) as f64 / 1e6 / self.truth_t100_s
    }
}

/// The technician's view of one frame. Increment `seq` (1, 2, …) carries ladder step `seq − 1`: loads are
/// armed in order, one at a time, so the daemon's numbers follow the ladder.
struct Bench {
    id: String,
    unit: usize,
    /// The daemon's number of the increment armed or running (0 under seating).
    seq: i64,
    /// Its `ready` is recorded (nothing to record under seating).
    recorded: bool,
    /// Its load is on in the simulator.
    applied: bool,
    /// Clock instant (daemon µs) its load went on, to spot a step the daemon never finds.
    applied_us: i64,
    /// Counted as stuck in `armed` already.
    stuck: bool,
}

/// The stress of increment `seq`, kPa.
fn increment_kpa(seq: i64) -> f64 {
    ladder_kpa(usize::try_from(seq - 1).unwrap_or(0))
}

/// The technician: arms and applies loads, records each `ready` with the truth.
struct Technician {
    benches: Vec<Bench>,
    readies: Vec<Ready>,
    /// Refused arms and truth that does not match what was applied.
    errors: Vec<String>,
    /// Frames that stayed armed with the load on: (frame, seq).
    stuck_armed: Vec<(String, i64)>,
    /// Sim seconds → daemon µs: daemon_us = offset_us + at_s × 1e6.
    offset_us: f64,
}

impl Technician {
    fn note(&mut self, error: String) {
        if self.errors.len() < 50 {
            self.errors.push(error);
        }
    }

    /// Arms the next increment of bench `b` and puts its load on in the simulator.
    fn arm_next(&mut self, b: usize, daemon: &Daemon, sim: &mut Simulator) -> Result<()> {
        let (id, seq) = (self.benches[b].id.clone(), self.benches[b].seq + 1);
        let stress_kpa = increment_kpa(seq);
        let body = json!({ "stress_kpa": stress_kpa }).to_string();
        let path = format!("/api/frames/{id}/increments");
        // The daemon may be busy: look again on the next round (an arm that landed then shows as armed).
        let Ok((status, _, answer)) = http(daemon.http, "POST", &path, None, Some(&body)) else { return Ok(()) };
        if status != 201 {
            self.note(format!("{id}: arming {stress_kpa} kPa answered {status}: {answer}"));
            return Ok(());
        }
        let armed: Value = serde_json::from_str(&answer)?;
        if armed["seq"].as_i64() != Some(seq) {
            self.note(format!("{id}: armed {stress_kpa} kPa as increment {}, expected {seq}", armed["seq"]));
        }
        self.armed(b, seq);
        self.apply(b, sim)
    }

    fn armed(&mut self, b: usize, seq: i64) {
        let bench = &mut self.benches[b];
        (bench.seq, bench.recorded, bench.applied, bench.stuck) = (seq, false, false, false);
    }

    fn apply(&mut self, b: usize, sim: &mut Simulator) -> Result<()> {
        let (unit, stress_kpa) = (self.benches[b].unit, increment_kpa(self.benches[b].seq));
        let reply = ask(sim, &format!("apply {unit} {stress_kpa}"), |l| l.starts_with("ok apply "))?;
        let onset_s: f64 = reply
            .split_whitespace()
            .find_map(|w| w.strip_prefix("onset_s="))
            .and_then(|v| v.parse().ok())
            .with_context(|| format!("onset in {reply:?}"))?;
        let bench = &mut self.benches[b];
        bench.applied = true;
        bench.applied_us = (self.offset_us + onset_s * 1e6) as i64;
        Ok(())
    }

    /// One look at the frames: records new `ready`s, arms and applies the next loads.
    fn look(&mut self, frames: &[Value], daemon: &Daemon, sim: &mut Simulator, now_us: i64) -> Result<()> {
        for b in 0..self.benches.len() {
            let Some(view) = frames.iter().find(|f| f["id"] == self.benches[b].id.as_str()) else { continue };
            let test = &view["test"];
            let state = test["state"].as_str().unwrap_or("");
            let increment = test["increment"].as_i64().unwrap_or(-1);
            let ready = state == "ready" || view["state"] == "ready";
            let bench = &self.benches[b];
            let (seq, recorded, applied, applied_us, stuck) =
                (bench.seq, bench.recorded, bench.applied, bench.applied_us, bench.stuck);
            if (ready && increment == seq) || (state == "seating" && seq == 0) {
                if !recorded {
                    self.record(b, test, sim)?;
                }
                self.arm_next(b, daemon, sim)?;
            } else if state == "armed" && increment == seq + 1 {
                // An arm whose answer was lost: it landed, so the load goes on now.
                self.armed(b, increment);
                self.apply(b, sim)?;
            } else if state == "armed" && increment == seq && !applied {
                self.apply(b, sim)?;
            } else if state == "armed"
                && increment == seq
                && !stuck
                && (now_us - applied_us) as f64 / 1e6 > STUCK_ARMED_CLOCK_S
            {
                self.stuck_armed.push((self.benches[b].id.clone(), seq));
                self.benches[b].stuck = true;
            }
        }
        Ok(())
    }

    fn record(&mut self, b: usize, test: &Value, sim: &mut Simulator) -> Result<()> {
        let (id, unit, seq) = (self.benches[b].id.clone(), self.benches[b].unit, self.benches[b].seq);
        self.benches[b].recorded = true;
        let truth = sim_state(sim, unit)?;
        let increment = &truth["increment"];
        let to_kpa = increment["to_kpa"].as_f64().unwrap_or(f64::NAN);
        if (to_kpa - increment_kpa(seq)).abs() > 1e-9 {
            self.note(format!(
                "{id} increment {seq}: the simulator runs {to_kpa} kPa, {} kPa was applied",
                increment_kpa(seq)
            ));
            return Ok(());
        }
        let (Some(onset_us), Some(ready_us)) = (test["onset_us"].as_i64(), test["ready_us"].as_i64()) else {
            self.note(format!("{id} increment {seq}: ready without onset_us/ready_us: {test}"));
            return Ok(());
        };
        self.readies.push(Ready {
            frame: id,
            test_id: test["test_id"].as_i64().unwrap_or(-1),
            seq,
            stress_kpa: to_kpa,
            from_kpa: increment["from_kpa"].as_f64().unwrap_or(f64::NAN),
            onset_us,
            ready_us,
            truth_onset_s: increment["onset_s"].as_f64().unwrap_or(f64::NAN),
            truth_onset_us: self.offset_us + increment["onset_s"].as_f64().unwrap_or(f64::NAN) * 1e6,
            truth_t100_s: increment["t100_s"].as_f64().unwrap_or(f64::NAN),
            virgin: increment["virgin"].as_bool().unwrap_or(false),
        });
        Ok(())
    }

    /// t0 found by the daemon minus the true onset, clock s.
    fn onset_error_s(&self, r: &Ready) -> f64 {
        (r.onset_us as f64 - (self.offset_us + r.truth_onset_s * 1e6)) / 1e6
    }
}

/// Sends `signal` to the daemon and collects everything it printed once it has gone.
fn end_daemon(daemon: Daemon, signal: &str, timeout: Duration) -> Result<Finished> {
    let pid = daemon.process.id().to_string();
    let status = Command::new("kill").args([signal, &pid]).status().context("run kill")?;
    ensure!(status.success(), "kill {signal} {pid} failed");
    daemon.process.wait_for_exit(timeout)
}

/// Adds the run's `committed …` lines to `run`.
fn count_commits(run: &mut Run, finished: &Finished) {
    for commit in finished.stdout.lines().filter_map(parse_commit) {
        run.acknowledged += commit.readings;
        run.last = commit.last.or(run.last);
    }
}

/// The soak itself: returns the report and the failures found (empty when every promise held).
fn soak(settings: &Settings) -> Result<(Value, Vec<String>)> {
    let oedolog = settings.binary("oedolog")?;
    let sim_binary = settings.binary("oedolog-sim")?;
    let work = WorkDir::new(settings)?;
    let dir = work.path();
    let ticks_per_s = clock_ticks_per_s();
    let started = Instant::now();
    let since = |at: Instant| at.duration_since(started).as_secs_f64();
    // The anchor of the daemon's clock, the same for every restart: clock time is continuous across kills.
    let origin_us = wall_us();
    let speed = settings.speed;
    let clock_arg = format!("{speed}@{origin_us}");
    let daemon_now_us = || origin_us + ((wall_us() - origin_us) as f64 * speed) as i64;

    let mut sim_args = vec![
        "--frames".to_string(),
        FRAMES.to_string(),
        "--speed".into(),
        speed.to_string(),
        "--schedule".into(),
        "manual".into(),
        "--seed".into(),
        "417".into(),
        "--delay-ms".into(),
        DELAY_MS.to_string(),
    ];
    for (kind, p) in FAULTS {
        sim_args.extend(["--fault".to_string(), format!("{kind}={p}")]);
    }
    let sim_args: Vec<&str> = sim_args.iter().map(String::as_str).collect();
    let mut sim = Simulator::start_tcp_with(&sim_binary, &sim_args)?;
    let sim_started = Instant::now();
    // Sim seconds → daemon clock: one `time` answer against the wall clock around it.
    let before = wall_us();
    let reply = ask(&mut sim, "time", |l| l.starts_with("ok time "))?;
    let after = wall_us();
    let sim_at_s: f64 = reply.trim_start_matches("ok time at_s=").trim().parse().context("the time answer")?;
    let middle = (before + after) / 2;
    let offset_us = origin_us as f64 + (middle - origin_us) as f64 * speed - sim_at_s * 1e6;
    let offset_uncertainty_s = (after - before) as f64 / 2.0 * speed / 1e6;
    for index in 0..FRAMES {
        let state = sim_state(&mut sim, index + 1)?;
        let expected = specimen_for_frame(index).id;
        ensure!(state["specimen"] == expected.as_str(), "simulator unit {} holds {}, not {expected}", index + 1, state);
    }

    let config = crate::daemon::write_config(dir, &config_text(dir, sim.tcp_addr()?));
    let extra = ["--report-commits", "--simulated-clock", &clock_arg];
    let start = |timeout| Daemon::start_with(&oedolog, &config, &extra, timeout);
    let daemon = start(RESTART_TIMEOUT)?;
    let mut runs = vec![Run {
        started_at_s: since(Instant::now()),
        restart_s: 0.0,
        acknowledged: 0,
        last: None,
        cpu_s: 0.0,
        end: "running".into(),
    }];
    // `--simulated-clock` reached the daemon: the dashboard says its time is simulated, at this speed.
    let overview = daemon.get("/overview")?;
    ensure!(
        overview.contains(&format!("the clock runs {speed}× faster than real time")),
        "no simulated-time banner on /overview"
    );
    // Every frame reads before its test starts, so the first load step has readings on both sides.
    daemon
        .wait_frames(Duration::from_secs(60), |f| f.len() == FRAMES && f.iter().all(|f| counter(f, "readings") >= 3))?;
    let mut technician =
        Technician { benches: Vec::new(), readies: Vec::new(), errors: Vec::new(), stuck_armed: Vec::new(), offset_us };
    for index in 0..FRAMES {
        let specimen = specimen_for_frame(index);
        let id = format!("F{}", index + 1);
        let body = json!({
            "specimen": specimen.id,
            "description": format!("{} (soak)", specimen.description),
            "height_mm": specimen.height_mm,
            "diameter_mm": specimen.diameter_mm,
            "dry_mass_g": specimen.dry_mass_g(),
            "specific_gravity": specimen.soil.gs,
            "seating_kpa": SEATING_KPA,
        });
        let (status, _, answer) =
            http(daemon.http, "POST", &format!("/api/frames/{id}/tests"), None, Some(&body.to_string()))?;
        ensure!(status == 201, "starting the test on {id} answered {status}: {answer}");
        technician.benches.push(Bench {
            id,
            unit: index + 1,
            seq: 0,
            recorded: true,
            applied: false,
            applied_us: 0,
            stuck: false,
        });
        technician.arm_next(index, &daemon, &mut sim)?;
    }

    let mut samples: Vec<Sample> = Vec::new();
    let mut sample = |daemon: &Daemon, sim: &Simulator, runs: &mut Vec<Run>| {
        let (Some((daemon_rss_mb, daemon_ticks)), Some((sim_rss_mb, sim_ticks))) =
            (proc_usage(daemon.process.id()), proc_usage(sim.process.id()))
        else {
            return;
        };
        let run = runs.len() - 1;
        runs[run].cpu_s = daemon_ticks as f64 / ticks_per_s;
        samples.push(Sample {
            at_s: since(Instant::now()),
            run,
            daemon_rss_mb,
            daemon_cpu_s: runs[run].cpu_s,
            sim_rss_mb,
            sim_cpu_s: sim_ticks as f64 / ticks_per_s,
        });
    };

    let deadline = started + Duration::from_secs_f64(settings.secs);
    let kill_every = Duration::from_secs_f64(settings.kill_every_secs);
    let mut next_kill = Instant::now() + kill_every;
    let mut next_sample = Instant::now();
    let mut failures: Vec<String> = Vec::new();
    let mut down_real_s = 0.0;
    let mut last_answer = Instant::now();
    let mut http_errors = 0u64;
    let mut kills = 0usize;
    let mut daemon = Some(daemon);
    while let Some(running) = daemon.as_ref() {
        let now = Instant::now();
        if now >= deadline {
            break;
        }
        if now >= next_sample {
            sample(running, &sim, &mut runs);
            next_sample += SAMPLE_EVERY;
        }
        if now >= next_kill {
            sample(running, &sim, &mut runs);
            let killed_at = Instant::now();
            kills += 1;
            let finished = end_daemon(daemon.take().expect("running"), "-9", Duration::from_secs(30))?;
            let run = runs.last_mut().expect("a run");
            count_commits(run, &finished);
            run.end = format!("killed ({})", finished.status);
            match start(RESTART_TIMEOUT) {
                Ok(next) => {
                    let restart_s = killed_at.elapsed().as_secs_f64();
                    down_real_s += restart_s;
                    runs.push(Run {
                        started_at_s: since(Instant::now()),
                        restart_s,
                        acknowledged: 0,
                        last: None,
                        cpu_s: 0.0,
                        end: "running".into(),
                    });
                    daemon = Some(next);
                    last_answer = Instant::now();
                    next_kill = Instant::now() + kill_every;
                }
                Err(error) => failures.push(format!("the daemon did not come back after kill {kills}: {error:#}")),
            }
            continue;
        }
        match running.frames() {
            Ok(frames) => {
                last_answer = Instant::now();
                technician.look(&frames, running, &mut sim, daemon_now_us())?;
            }
            Err(error) => {
                http_errors += 1;
                if last_answer.elapsed() > Duration::from_secs(30) {
                    failures.push(format!("GET /api/frames failed for 30 s: {error:#}"));
                    break;
                }
            }
        }
        std::thread::sleep(LOOK_EVERY);
    }
    let mut clean_stop = false;
    if let Some(running) = daemon.take() {
        sample(&running, &sim, &mut runs);
        let finished = end_daemon(running, "-TERM", Duration::from_secs(60))?;
        let run = runs.last_mut().expect("a run");
        count_commits(run, &finished);
        clean_stop = finished.status.success();
        run.end = format!("stopped ({})", finished.status);
        if !clean_stop {
            failures
                .push(format!("SIGTERM did not stop the daemon cleanly: {:?}\n{}", finished.status, finished.stderr));
        }
    }
    let real_s = started.elapsed().as_secs_f64();
    let sim_cpu_s = proc_usage(sim.process.id()).map_or(0.0, |(_, ticks)| ticks as f64 / ticks_per_s);
    let sim_real_s = sim_started.elapsed().as_secs_f64();
    drop(sim);

    // ---- the database, read-only, after the clean stop ----
    let db = open_db(dir);
    let integrity: String = db.query_row("PRAGMA integrity_check", [], |r| r.get(0))?;
    let stored: i64 = db.query_row("SELECT count(*) FROM readings", [], |r| r.get(0))?;
    let expected: i64 = runs.iter().map(|r| r.acknowledged).sum();
    let lost = (expected - stored).max(0);
    let mut missing_last = Vec::new();
    for (i, run) in runs.iter().enumerate() {
        if let Some((frame, channel, at)) = run.last {
            let present: i64 = db.query_row(
                "SELECT count(*) FROM readings WHERE frame_key = ?1 AND channel = ?2 AND at_us = ?3",
                params![frame, channel, at],
                |r| r.get(0),
            )?;
            if present != 1 {
                missing_last.push(format!("run {i}: {frame}:{channel}:{at}"));
            }
        }
    }
    let mut per_frame: BTreeMap<String, i64> = BTreeMap::new();
    {
        let mut statement = db.prepare(
            "SELECT f.id, count(r.at_us) FROM frames f LEFT JOIN readings r ON r.frame_key = f.key GROUP BY f.id",
        )?;
        for row in statement.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))? {
            let (id, n) = row?;
            per_frame.insert(id, n);
        }
    }
    let mut alarms: BTreeMap<String, BTreeMap<&str, i64>> = BTreeMap::new();
    {
        let mut statement = db.prepare(
            "SELECT coalesce(json_extract(data, '$.alarm'), '?'), kind, count(*) FROM events
             WHERE kind IN ('alarm-raised', 'alarm-cleared') GROUP BY 1, 2",
        )?;
        for row in
            statement.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, String>(1)?, r.get::<_, i64>(2)?)))?
        {
            let (code, kind, n) = row?;
            let key = if kind == "alarm-raised" { "raised" } else { "cleared" };
            *alarms.entry(code).or_default().entry(key).or_default() += n;
        }
        let mut statement = db.prepare("SELECT code, count(*) FROM alarms WHERE cleared_us IS NULL GROUP BY code")?;
        for row in statement.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))? {
            let (code, n) = row?;
            *alarms.entry(code).or_default().entry("open_at_end").or_default() += n;
        }
    }
    let mut journal: BTreeMap<String, i64> = BTreeMap::new();
    {
        let mut statement = db.prepare("SELECT kind, count(*) FROM events GROUP BY kind")?;
        for row in statement.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))? {
            let (kind, n) = row?;
            journal.insert(kind, n);
        }
    }
    let ready_in_db: i64 =
        db.query_row("SELECT count(*) FROM increments WHERE ready_us IS NOT NULL", [], |r| r.get(0))?;
    // What the API said at the time against what the store holds now.
    let mut instants_differ = Vec::new();
    for r in &technician.readies {
        let stored: Option<(Option<i64>, Option<i64>)> = db
            .query_row(
                "SELECT onset_us, ready_us FROM increments WHERE test_id = ?1 AND seq = ?2",
                params![r.test_id, r.seq],
                |row| Ok((row.get(0)?, row.get(1)?)),
            )
            .ok();
        if stored != Some((Some(r.onset_us), Some(r.ready_us))) {
            instants_differ
                .push(format!("{} #{}: API {}/{} vs store {stored:?}", r.frame, r.seq, r.onset_us, r.ready_us));
        }
    }
    drop(db);

    // ---- the numbers ----
    let ratios: Vec<f64> = technician.readies.iter().map(Ready::ratio).collect();
    let from_found: Vec<f64> = technician.readies.iter().map(Ready::ratio_from_found_onset).collect();
    let loading: Vec<f64> = technician.readies.iter().filter(|r| r.stress_kpa > r.from_kpa).map(Ready::ratio).collect();
    let unloading: Vec<f64> =
        technician.readies.iter().filter(|r| r.stress_kpa < r.from_kpa).map(Ready::ratio).collect();
    let virgin: Vec<f64> = technician.readies.iter().filter(|r| r.virgin).map(Ready::ratio).collect();
    let before_t100 = ratios.iter().filter(|r| **r < 1.0).count();
    let too_early: Vec<String> = technician
        .readies
        .iter()
        .filter(|r| r.ratio() < EARLIEST_READY_RATIO)
        .map(|r| {
            format!(
                "{} #{} {}→{} kPa: ready {:.0} s after the true onset ({:.0} s after the found t0), true t100 {:.0} s (ratio {:.3}; {:.3} from the found t0)",
                r.frame,
                r.seq,
                r.from_kpa,
                r.stress_kpa,
                (r.ready_us as f64 - r.truth_onset_us) / 1e6,
                (r.ready_us - r.onset_us) as f64 / 1e6,
                r.truth_t100_s,
                r.ratio(),
                r.ratio_from_found_onset()
            )
        })
        .collect();
    let onset_errors: Vec<f64> = technician.readies.iter().map(|r| technician.onset_error_s(r)).collect();
    let warm = samples.iter().find(|s| s.at_s >= runs[0].started_at_s + WARM_UP_S).or(samples.first());
    let rss: Vec<f64> = samples.iter().map(|s| s.daemon_rss_mb).collect();
    let rss_first = warm.map_or(0.0, |s| s.daemon_rss_mb);
    let rss_last = samples.last().map_or(0.0, |s| s.daemon_rss_mb);
    let rss_max = rss.iter().copied().fold(0.0, f64::max);
    let daemon_cpu_s: f64 = runs.iter().map(|r| r.cpu_s).sum();
    let series: Vec<Value> = samples
        .iter()
        .enumerate()
        .map(|(i, s)| {
            // CPU share of one core since the previous sample (of the same run, for the daemon).
            let previous = i.checked_sub(1).map(|p| &samples[p]).filter(|p| s.at_s > p.at_s);
            let share = previous
                .filter(|p| p.run == s.run)
                .map(|p| round((s.daemon_cpu_s - p.daemon_cpu_s) / (s.at_s - p.at_s), 3));
            let sim_share = previous.map(|p| round((s.sim_cpu_s - p.sim_cpu_s) / (s.at_s - p.at_s), 3));
            json!({
                "at_s": round(s.at_s, 1), "run": s.run, "daemon_rss_mb": round(s.daemon_rss_mb, 2),
                "daemon_cpu_share": share, "sim_rss_mb": round(s.sim_rss_mb, 2), "sim_cpu_share": sim_share,
            })
        })
        .collect();
    let down_sim_s = down_real_s * speed;
    let polls_per_frame_missed = down_sim_s / POLL_STEADY_S as f64;
    let up_sim_h = (real_s - down_real_s) * speed / 3600.0;
    let report = json!({
        "duration": {
            "real_s": round(real_s, 1),
            "simulated_s": round(real_s * speed, 0),
            "simulated_days": round(real_s * speed / 86_400.0, 2),
            "speed": speed,
            "kill_every_s": settings.kill_every_secs,
        },
        "setup": {
            "frames": FRAMES,
            "buses": FRAMES.div_ceil(FRAMES_PER_BUS),
            "faults_per_request": FAULTS.iter().map(|(k, p)| (k.to_string(), json!(p))).collect::<serde_json::Map<_, _>>(),
            "faulted_share": FAULTS.iter().map(|(_, p)| p).sum::<f64>(),
            "delay_ms": DELAY_MS,
            "bus_timeout_ms": BUS_TIMEOUT_MS,
            "poll_s": { "steady": POLL_STEADY_S, "fast": POLL_FAST_S, "fast_window": FAST_WINDOW_S },
            "binaries": settings.bin_dir.display().to_string(),
            "work_dir": dir.display().to_string(),
        },
        "restarts": {
            "kills": kills,
            "came_back": runs.len() - 1,
            "restart_s": spread(&runs.iter().skip(1).map(|r| r.restart_s).collect::<Vec<_>>()),
            "clean_stop": clean_stop,
            "runs": runs.iter().map(|r| json!({
                "started_at_s": round(r.started_at_s, 1), "acknowledged": r.acknowledged,
                "last": r.last.map(|(f, c, at)| format!("{f}:{c}:{at}")), "cpu_s": round(r.cpu_s, 2), "end": r.end,
            })).collect::<Vec<_>>(),
        },
        "readings": {
            "expected_acknowledged": expected,
            "stored": stored,
            "lost": lost,
            "stored_beyond_acknowledged": stored - expected,
            "last_reported_missing": missing_last,
            "per_frame": per_frame,
            "per_frame_per_clock_hour": round(stored as f64 / FRAMES as f64 / up_sim_h.max(1e-9), 1),
            "expected_per_frame_per_clock_hour": (CHANNELS as u64 * 3600 / POLL_STEADY_S),
            "not_acquired_while_down": {
                "simulated_s_down": round(down_sim_s, 0),
                "real_s_down": round(down_real_s, 2),
                "about_readings": round(polls_per_frame_missed * (FRAMES * CHANNELS) as f64, 0),
            },
        },
        "integrity_check": integrity,
        "memory_mb": {
            "daemon_rss": spread(&rss),
            "daemon_rss_first_after_warm_up": round(rss_first, 2),
            "daemon_rss_last": round(rss_last, 2),
            "sim_rss": spread(&samples.iter().map(|s| s.sim_rss_mb).collect::<Vec<_>>()),
            "series": series,
        },
        "cpu_share_of_one_core": {
            "daemon": round(daemon_cpu_s / real_s, 3),
            "simulator": round(sim_cpu_s / sim_real_s, 3),
            "daemon_cpu_s": round(daemon_cpu_s, 1),
            "simulator_cpu_s": round(sim_cpu_s, 1),
        },
        "alarms": alarms,
        "journal": journal,
        "ready": {
            "events": technician.readies.len(),
            "increments_ready_in_store": ready_in_db,
            "ratio_to_true_t100": spread(&ratios),
            "ratio_from_found_onset": spread(&from_found),
            "ratio_loading": spread(&loading),
            "ratio_unloading": spread(&unloading),
            "ratio_virgin": spread(&virgin),
            "before_true_t100": before_t100,
            "before_0_9_t100": too_early,
            "onset_error_s": spread(&onset_errors),
            "onset_clock_mapping_uncertainty_s": round(offset_uncertainty_s, 2),
            "api_vs_store_mismatch": instants_differ,
            "stuck_armed": technician.stuck_armed.iter().map(|(f, s)| format!("{f} #{s}")).collect::<Vec<_>>(),
        },
        "technician_errors": technician.errors,
        "http_errors": http_errors,
    });

    // ---- the promises ----
    if lost != 0 {
        failures.push(format!("{lost} acknowledged readings lost: {expected} acknowledged, {stored} stored"));
    }
    if !missing_last.is_empty() {
        failures.push(format!("last reported readings missing: {missing_last:?}"));
    }
    if integrity != "ok" {
        failures.push(format!("integrity_check: {integrity}"));
    }
    if kills < 2 {
        failures.push(format!("only {kills} kill(s) happened; at least 2 are needed"));
    }
    let silent: Vec<&String> = per_frame.iter().filter(|(_, n)| **n == 0).map(|(id, _)| id).collect();
    if per_frame.len() != FRAMES || !silent.is_empty() {
        failures.push(format!("frames without readings: {silent:?} ({} frames in the store)", per_frame.len()));
    }
    if rss_max > RSS_CAP_MB || rss_last > RSS_GROWTH_LIMIT * rss_first {
        failures.push(format!(
            "daemon memory grew: first after warm-up {rss_first:.1} MB, last {rss_last:.1} MB, max {rss_max:.1} MB"
        ));
    }
    if samples.is_empty() {
        failures.push("no memory sample was taken".into());
    }
    if technician.readies.is_empty() {
        failures.push("no frame became ready".into());
    }
    if too_early.len() as f64 > TOO_EARLY_SHARE * technician.readies.len() as f64 {
        failures.push(format!(
            "{} of {} ready events before {EARLIEST_READY_RATIO}·t100 (tolerated: {:.0} %): {too_early:?}",
            too_early.len(),
            technician.readies.len(),
            100.0 * TOO_EARLY_SHARE
        ));
    }
    if !technician.stuck_armed.is_empty() {
        failures.push(format!("frames left armed after their load went on: {:?}", technician.stuck_armed));
    }
    if !technician.errors.is_empty() {
        failures.push(format!("technician errors: {:?}", technician.errors));
    }
    if !instants_differ.is_empty() {
        failures.push(format!("onset/ready instants differ between the API and the store: {instants_differ:?}"));
    }
    Ok((report, failures))
}

fn write_report(settings: &Settings, report: &Value) -> Result<()> {
    let text = serde_json::to_string_pretty(report)?;
    println!("soak report:\n{text}");
    if let Some(path) = &settings.report {
        if let Some(parent) = path.parent() {
            std::fs::create_dir_all(parent)?;
        }
        std::fs::write(path, &text).with_context(|| format!("write {}", path.display()))?;
        println!("soak report written to {}", path.display());
    }
    Ok(())
}

#[test]
fn soak_smoke_kill_dash_nine_under_faults_loses_no_acknowledged_reading_and_resumes_every_increment() {
    let settings = Settings::from_env().unwrap();
    let (report, failures) = soak(&settings).unwrap();
    write_report(&settings, &report).unwrap();
    assert!(failures.is_empty(), "the soak broke a promise:\n{}", failures.join("\n"));
}
