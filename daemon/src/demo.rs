//! `oedolog demo`: the simulator in-process on Modbus TCP over loopback with its automatic load schedule,
//! a scaled clock shared by simulator and daemon (a multi-day test in minutes), and the HTTP server.
//!
//! The simulator's schedule stands in for the technician: when it puts a load on, the demo records the
//! increment as an operator would. Everything else — polling, storing, the screens — is the real daemon.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use oedolog_protocol::registers::{RegisterMap, RegisterTable, ValueType, WordOrder};
use oedolog_sim::device::Simulation;
use oedolog_sim::physics::IncrementTruth;
use oedolog_sim::server::{Shared, run_schedules, serve_tcp};
use rand::SeedableRng as _;

use crate::clock::{Clock, ScaledClock, SystemClock};
use crate::config::{
    Bus, BusKind, Calibration, Channel, Config, Frame, Loading, LogConfig, PollSchedule, StoreConfig, TcpLink,
};
use crate::lab::SpecimenRecord;
use crate::service::{self, Options, Running, StartError};
use crate::watch::{HubError, Phase};

/// Demo settings from the command line.
#[derive(Clone, Debug)]
pub struct DemoOptions {
    /// Simulated frames.
    pub frames: u8,
    /// Simulated seconds per real second.
    pub speed: f64,
    /// HTTP listen address.
    pub listen: SocketAddr,
    /// Database file.
    pub db: PathBuf,
    /// `[[http.user]]` of the `--config` file: who may read and act (none: loopback only).
    pub users: Vec<crate::config::User>,
    /// `[[notify.webhook]]` of the `--config` file.
    pub notify: crate::config::NotifyConfig,
    /// `[[publish.mqtt]]` of the `--config` file.
    pub publish: crate::config::PublishConfig,
    /// `[alarms]` of the `--config` file (else the defaults).
    pub alarms: oedolog_core::alarms::AlarmRules,
    /// `[display]` of the `--config` file (else SI).
    pub display: oedolog_core::units::DisplayUnits,
    /// Where to write the simulator's answer key (one JSON line per load step), if anywhere.
    pub truth: Option<PathBuf>,
}

/// The default database of the demo: `$XDG_DATA_HOME/oedolog/demo.sqlite` (or `~/.local/share/…`), else
/// the temp folder.
pub fn default_db() -> PathBuf {
    let data = std::env::var_os("XDG_DATA_HOME")
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".local/share")));
    data.unwrap_or_else(std::env::temp_dir).join("oedolog").join("demo.sqlite")
}

struct SimTime(Arc<ScaledClock>);

impl oedolog_sim::clock::Clock for SimTime {
    fn now_s(&self) -> f64 {
        (self.0.now_us() - self.0.start_us()) as f64 / 1e6
    }
}

fn register(address: u16, value_type: ValueType) -> Option<RegisterMap> {
    Some(RegisterMap {
        table: RegisterTable::Input,
        address,
        value_type,
        word_order: WordOrder::HighFirst,
        scale: 1.0,
        offset: 0.0,
    })
}

/// The configuration of the demo's frames: one Modbus TCP bus to the simulator, its register map.
pub fn demo_config(
    sim: &Simulation,
    sim_addr: SocketAddr,
    options: &DemoOptions,
    http: crate::config::HttpConfig,
) -> Config {
    let frames = sim
        .frames()
        .iter()
        .map(|f| {
            let specimen = f.model().specimen();
            Frame {
                id: format!("F{}", f.unit().0),
                name: format!("Frame {}", f.unit().0),
                bus: 0,
                unit: f.unit(),
                loading: Loading::DeadWeight { lever_ratio: 10.0 },
                ring_area_mm2: specimen.area_mm2(),
                // 0.1 µm counts → mm; 0.1 N counts → kN; 0.01 °C counts → °C (README register map).
                displacement: Channel {
                    register: register(0, ValueType::I32),
                    calibration: Calibration::Linear { gain: 1e-4, offset: 0.0 },
                    range: -1.0..30.0,
                },
                load: Some(Channel {
                    register: register(2, ValueType::I32),
                    calibration: Calibration::Linear { gain: 1e-4, offset: 0.0 },
                    range: -0.5..20.0,
                }),
                temperature: Some(Channel {
                    register: register(4, ValueType::I16),
                    calibration: Calibration::Linear { gain: 0.01, offset: 0.0 },
                    range: -20.0..80.0,
                }),
                deflection: None,
                // Clock time: 30 s steady, 5 s for 15 min after a load change.
                poll: PollSchedule {
                    steady: Duration::from_secs(30),
                    fast: Duration::from_secs(5),
                    fast_window: Duration::from_secs(900),
                },
            }
        })
        .collect();
    Config {
        store: Some(StoreConfig {
            path: options.db.clone(),
            flush: Duration::from_millis(500),
            checkpoint: Duration::from_secs(300),
        }),
        http,
        log: LogConfig { dir: None, keep: 14, level: "info".into() },
        buses: vec![Bus {
            id: "sim".into(),
            kind: BusKind::Tcp(TcpLink {
                address: sim_addr.to_string(),
                timeout: Duration::from_millis(500),
                retries: 1,
            }),
        }],
        frames,
        notify: options.notify.clone(),
        publish: options.publish.clone(),
        fleet: None,
        alarms: options.alarms.clone(),
        display: options.display,
    }
}

/// Why the demo could not start.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    /// The simulated frames could not be built.
    #[error("the simulated frames: {0}")]
    Simulation(#[from] oedolog_sim::physics::ModelError),
    /// The simulator's loopback port could not be bound.
    #[error("cannot listen for the simulator on 127.0.0.1: {0}")]
    SimulatorPort(#[source] std::io::Error),
    /// The daemon could not start.
    #[error(transparent)]
    Start(#[from] StartError),
    /// A frame's demo test could not be started.
    #[error("frame {frame}: cannot start its demo test: {source}")]
    Test {
        /// The frame's config index.
        frame: usize,
        /// Why.
        source: HubError,
    },
    /// The answer key could not be created.
    #[error("--truth {}: {source}", .path.display())]
    Truth {
        /// The file.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// A set-up task stopped.
    #[error("the demo's set-up task stopped: {0}")]
    Task(#[from] tokio::task::JoinError),
}

/// Starts the demo; returns the running daemon (the simulator runs on the same runtime).
pub async fn start(options: DemoOptions) -> Result<(Running, Arc<dyn Clock>), DemoError> {
    let start_us = SystemClock.now_us();
    let scaled = Arc::new(ScaledClock::new(start_us, options.speed));
    let clock: Arc<dyn Clock> = scaled.clone();
    let sim = Simulation::demo(usize::from(options.frames), 0.0, true, 1)?;
    let specimens: Vec<SpecimenRecord> = sim
        .frames()
        .iter()
        .map(|f| {
            let s = f.model().specimen();
            SpecimenRecord {
                specimen: s.id.clone(),
                description: format!("{}, {:.1} m (demo scenario)", s.description, s.depth_m),
                height_mm: s.height_mm,
                diameter_mm: s.diameter_mm,
                dry_mass_g: Some(s.dry_mass_g()),
                specific_gravity: Some(s.soil.gs),
            }
        })
        .collect();
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.map_err(DemoError::SimulatorPort)?;
    let sim_addr = listener.local_addr().map_err(DemoError::SimulatorPort)?;
    let config = demo_config(
        &sim,
        sim_addr,
        &options,
        crate::config::HttpConfig { listen: options.listen, users: options.users.clone(), public_origins: Vec::new() },
    );
    let shared = Shared::new(sim, Arc::new(SimTime(scaled.clone())));
    tokio::spawn(serve_tcp(listener, shared.clone()));

    let running = service::start(&config, clock.clone(), Options::default()).await?;
    // A rerun on the same file: earlier demo tests are closed, each frame gets a fresh one.
    for (i, specimen) in specimens.into_iter().enumerate() {
        let hub = running.hub.clone();
        tokio::task::spawn_blocking(move || {
            hub.finish_test(i, "the demo restarted")?;
            hub.start_test(i, specimen, oedolog_sim::scenario::SEATING_KPA, Some("demo".into()))
        })
        .await?
        .map_err(|source| DemoError::Test { frame: i, source })?;
    }
    // The frames follow the daemon, as a lab does: a load goes on only when the stand-in technician puts
    // it on (run_schedules still advances the simulated instruments' clock-driven parts).
    shared.with(|s| {
        for unit in 1..=options.frames {
            if let Some(f) = s.frame_mut(oedolog_protocol::UnitId(unit)) {
                f.follow();
            }
        }
    });
    let truth = match &options.truth {
        Some(path) => Some(TruthFile::create(path).map_err(|source| DemoError::Truth { path: path.clone(), source })?),
        None => None,
    };
    tokio::spawn(run_schedules(shared.clone(), Duration::from_millis(50), |_, _, _| {}));
    let technician = Technician {
        hub: running.hub.clone(),
        lab: running.lab.clone(),
        sim: shared,
        clock: SimTime(scaled.clone()),
        start_us,
        truth,
        benches: vec![Bench::default(); usize::from(options.frames)],
        rng: rand::rngs::SmallRng::seed_from_u64(0x0ed0),
        writer: running.writer.clone(),
        daemon_clock: clock.clone(),
        schedule_noted: vec![false; usize::from(options.frames)],
        own_tests: running.lab.snapshot().iter().map(|t| t.as_ref().map(|t| t.test_id)).collect(),
    };
    tokio::spawn(technician.run());
    Ok((running, clock))
}

/// The demo's answer key: one JSON line per load step the simulator applies (`--truth FILE`).
struct TruthFile(std::io::BufWriter<std::fs::File>);

impl TruthFile {
    fn create(path: &std::path::Path) -> std::io::Result<TruthFile> {
        Ok(TruthFile(std::io::BufWriter::new(std::fs::File::create(path)?)))
    }

    /// Writes and flushes one line: `frame`, `seq`, `stress_kpa`, `onset_at` (RFC 3339 on the daemon's
    /// clock), `cv_mm2_per_min`, `t50_min`, `t90_min`, `t100_min` (elapsed from the onset).
    fn write(&mut self, frame: &str, seq: i64, truth: &IncrementTruth, start_us: i64) -> std::io::Result<()> {
        use std::io::Write as _;
        let line = serde_json::json!({
            "frame": frame,
            "seq": seq,
            "stress_kpa": truth.to_kpa,
            "onset_at": crate::clock::rfc3339(start_us + (truth.onset_s * 1e6).round() as i64),
            "cv_mm2_per_min": truth.cv_mm2_per_min,
            "t50_min": truth.t50_s / 60.0,
            "t90_min": truth.t90_s / 60.0,
            "t100_min": truth.t100_s / 60.0,
        });
        writeln!(self.0, "{line}")?;
        self.0.flush()
    }
}

/// What the technician has in mind for one frame: when the next load goes on, and whether it is armed.
#[derive(Clone, Copy, Debug, Default)]
struct Bench {
    /// Simulated time the next load goes on, s.
    put_on_at_s: Option<f64>,
    /// The load is entered on the dashboard (armed) and waits to be put on.
    armed: bool,
}

/// The demo's stand-in technician. It follows the daemon: the first load goes on when the frame's seating
/// time is up, every later one a few (varied) simulated minutes after the daemon says `ready`. A load is
/// entered (armed) a simulated minute before it goes on, as the dashboard asks; the daemon then finds t0
/// itself from the load-cell step. It acts on simulated frames only, never on a real one.
struct Technician {
    hub: crate::watch::Hub,
    lab: crate::lab::Lab,
    sim: Arc<Shared>,
    clock: SimTime,
    start_us: i64,
    truth: Option<TruthFile>,
    benches: Vec<Bench>,
    rng: rand::rngs::SmallRng,
    /// The journal, for the note that a frame's schedule is over.
    writer: crate::store::Writer,
    /// The daemon's clock, for that note's stamp.
    daemon_clock: Arc<dyn Clock>,
    /// Frames whose end of schedule has been noted.
    schedule_noted: Vec<bool>,
    /// The test the demo started on each frame. Once a person finishes it and starts another, that frame
    /// is theirs: the stand-in technician neither arms nor puts on its loads.
    own_tests: Vec<Option<i64>>,
}

/// The technician comes to a ready frame between these many simulated minutes after it said so (a lab
/// rarely answers at once: the demo shows frames waiting, and how long).
const REACTION_MIN: std::ops::Range<f64> = 5.0..180.0;
/// A load is entered this long (simulated) before it goes on, s.
const ARM_AHEAD_S: f64 = 60.0;

impl Technician {
    async fn run(mut self) {
        use oedolog_sim::clock::Clock as _;
        let mut tick = tokio::time::interval(Duration::from_millis(100));
        loop {
            tick.tick().await;
            let now_s = self.clock.now_s();
            let hub = self.hub.clone();
            let Ok(status) = tokio::task::spawn_blocking(move || hub.status()).await else { return };
            for (index, (phase, _)) in status.into_iter().enumerate().take(self.benches.len()) {
                self.visit(index, now_s, phase).await;
            }
        }
    }

    async fn visit(&mut self, index: usize, now_s: f64, phase: Phase) {
        use rand::Rng as _;
        let running = self.lab.snapshot().get(index).and_then(|t| t.as_ref().map(|t| t.test_id));
        if running.is_some() && running != self.own_tests.get(index).copied().flatten() {
            return;
        }
        let unit = oedolog_protocol::UnitId(u8::try_from(index + 1).unwrap_or(u8::MAX));
        let Some((first_due_s, stress_kpa)) = self.sim.with(|s| s.frame(unit).and_then(|f| f.upcoming_load())) else {
            // The schedule has ended: once the last step is ready, say so in the frame's journal.
            if phase == Phase::Ready && !self.schedule_noted[index] {
                self.schedule_noted[index] = true;
                self.lab.mark_plan_finished(index);
                let note = crate::store::Event {
                    at_us: self.daemon_clock.now_us(),
                    frame_key: Some(self.lab.key(index)),
                    kind: crate::store::EventKind::Note,
                    message: "demo: this frame's load schedule is finished; the test stays open for review".into(),
                    actor: Some("demo technician".into()),
                    data: None,
                };
                if let Err(error) = self.writer.event(note) {
                    tracing::warn!("demo: {error}");
                }
            }
            return;
        };
        let bench = self.benches[index];
        if bench.put_on_at_s.is_none() {
            let at = match (phase, first_due_s) {
                (Phase::Seating, Some(due)) => due.max(now_s),
                (Phase::Ready, _) => now_s + 60.0 * self.rng.random_range(REACTION_MIN),
                _ => return,
            };
            self.benches[index].put_on_at_s = Some(at);
            return;
        }
        let at = bench.put_on_at_s.unwrap_or(now_s);
        if !bench.armed && now_s >= at - ARM_AHEAD_S {
            let hub = self.hub.clone();
            let armed =
                tokio::task::spawn_blocking(move || hub.arm(index, stress_kpa, Some("demo technician".into()))).await;
            match armed {
                Ok(Ok(())) => self.benches[index].armed = true,
                Ok(Err(error)) => tracing::warn!("demo: load step not armed on frame {}: {error}", index + 1),
                Err(error) => tracing::error!("demo: {error}"),
            }
            return;
        }
        if bench.armed && now_s >= at {
            let applied = self.sim.with(|s| {
                let frame = s.frame_mut(unit)?;
                frame.put_on_next_load(now_s).ok().flatten()?;
                frame.model().current_increment()
            });
            self.benches[index] = Bench::default();
            let (Some(truth), Some(file)) = (applied, self.truth.as_mut()) else { return };
            let seq = self.lab.snapshot().get(index).and_then(|t| t.as_ref().map(|t| t.increment));
            if let Err(error) = file.write(&format!("F{}", index + 1), seq.unwrap_or(0), &truth, self.start_us) {
                tracing::warn!("demo: the answer key could not be written: {error}");
            }
        }
    }
}
