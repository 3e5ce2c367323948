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
use oedolog_sim::server::{Shared, run_schedules, serve_tcp};

use crate::clock::{Clock, ScaledClock, SystemClock};
use crate::config::{
    Bus, BusKind, Calibration, Channel, Config, Frame, Loading, LogConfig, PollSchedule, StoreConfig, TcpLink,
};
use crate::lab::SpecimenRecord;
use crate::service::{self, Options, Running, StartError};
use crate::watch::HubError;

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
    /// `[alarms]` of the `--config` file (else the defaults).
    pub alarms: oedolog_core::alarms::AlarmRules,
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
        alarms: options.alarms.clone(),
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
        crate::config::HttpConfig { listen: options.listen, users: options.users.clone() },
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
    let shared_for_arming = shared.clone();
    tokio::spawn(run_schedules(shared, Duration::from_millis(50), |_, _, _| {}));
    // The stand-in technician enters each load shortly before putting it on, as the dashboard asks; the
    // daemon then finds t0 itself from the load-cell step in the readings.
    let hub = running.hub.clone();
    let sim = shared_for_arming;
    let sim_clock = SimTime(scaled.clone());
    tokio::spawn(async move {
        use oedolog_sim::clock::Clock as _;
        let mut armed: std::collections::HashSet<(u8, u64)> = std::collections::HashSet::new();
        let mut tick = tokio::time::interval(Duration::from_millis(100));
        loop {
            tick.tick().await;
            let now_s = sim_clock.now_s();
            let due: Vec<(usize, u8, f64, f64)> = sim.with(|s| {
                s.frames()
                    .iter()
                    .enumerate()
                    .filter_map(|(i, f)| f.next_load().map(|(at, kpa)| (i, f.unit().0, at, kpa)))
                    .collect()
            });
            for (index, unit, due_s, stress_kpa) in due {
                // A simulated minute or two ahead of the load.
                if due_s - now_s > 120.0 || !armed.insert((unit, due_s.to_bits())) {
                    continue;
                }
                let hub = hub.clone();
                match tokio::task::spawn_blocking(move || hub.arm(index, stress_kpa, Some("demo technician".into())))
                    .await
                {
                    Ok(Err(error)) => tracing::warn!("demo: increment not armed: {error}"),
                    Err(error) => tracing::error!("demo: {error}"),
                    Ok(Ok(())) => {}
                }
            }
        }
    });
    Ok((running, clock))
}
