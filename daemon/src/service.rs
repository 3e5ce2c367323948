//! Wires a daemon together from a checked [`Config`]: store, writer, lab book, bus tasks, HTTP. Used by
//! `oedolog run` and by the demo; `main.rs` only calls it.

use std::net::SocketAddr;
use std::sync::Arc;
use std::time::Duration;

use tokio::net::TcpListener;

use crate::acquire::{Live, LiveFrame, Sinks, spawn_buses};
use crate::alarms::AlarmBoard;
use crate::alarms::task::{AlarmSources, AlarmTask, FrameFacts};
use crate::clock::Clock;
use crate::config::Config;
use crate::http::{AppState, router};
use crate::lab::Lab;
use crate::store::{self, CommitReport, Event, EventKind, StoreError, Writer, WriterPolicy, WriterThread};
use crate::watch::{Hub, WatchParams};
use oedolog_core::alarms::{Code, Subject};

/// Why the daemon could not start.
#[derive(Debug, thiserror::Error)]
pub enum StartError {
    /// The configuration has no `[store]`.
    #[error("the configuration has no [store] path")]
    NoStore,
    /// The store could not be opened.
    #[error("{0}")]
    Store(#[from] StoreError),
    /// Open to the network with nobody to keep out.
    #[error(
        "http.listen = {addr} is not a loopback address and no [[http.user]] is configured: listen on 127.0.0.1 (or ::1), or add [[http.user]] tables with name, role and token"
    )]
    Exposed {
        /// The address.
        addr: SocketAddr,
    },
    /// A thread of the daemon could not be started.
    #[error("cannot start the {name} thread: {source}")]
    Thread {
        /// The thread's name.
        name: &'static str,
        /// Why.
        source: std::io::Error,
    },
    /// The HTTP address could not be bound.
    #[error("cannot listen on {addr}: {source}")]
    Bind {
        /// The address.
        addr: SocketAddr,
        /// Why.
        source: std::io::Error,
    },
}

/// Options that do not belong in the configuration file.
#[derive(Clone, Copy, Debug, Default)]
pub struct Options {
    /// Print one `committed …` line on stdout after each durable commit (for power-loss tests).
    pub report_commits: bool,
}

/// A started daemon.
pub struct Running {
    /// Acquisition's live view.
    pub live: Live,
    /// Running tests.
    pub lab: Lab,
    /// The live watch of every frame.
    pub hub: Hub,
    /// The writer.
    pub writer: Writer,
    /// Where HTTP listens.
    pub http_addr: SocketAddr,
    writer_thread: WriterThread,
    tasks: Vec<tokio::task::JoinHandle<()>>,
    clock: Arc<dyn Clock>,
}

/// The `committed …` line of one commit: `committed batch=B readings=N total=T last=FRAME:CHANNEL:AT_US`.
pub fn commit_line(report: &CommitReport) -> String {
    let last = report.last.map_or("-".to_string(), |(f, c, at)| format!("{f}:{c}:{at}"));
    format!("committed batch={} readings={} total={} last={last}", report.batch, report.readings, report.total_readings)
}

/// A daemon assembled from its configuration: the store open, the writer running, the lab book, the live
/// watch and the alarm board resumed from what is stored, and the HTTP state built on them — but no bus
/// polled, no task spawned and no port bound yet. `oedolog run`, the demo and the in-process HTTP tests
/// all build the service through [`assemble`]; `run` and the demo then [`Assembled::start`] it.
pub struct Assembled {
    /// What the HTTP routes serve (live view, lab book, hub, writer, clock, caches, alarm board).
    pub state: AppState,
    /// `frames.key` of each configured frame, in config order.
    pub keys: Vec<i64>,
    /// The writer thread; closing it commits what is queued.
    pub writer_thread: WriterThread,
    /// Alarms an earlier run left open (already on the board), for the alarm task.
    open_alarms: Vec<(Subject, Code, i64)>,
}

/// Builds the service the configuration describes (see [`Assembled`]). The start and resume entries of
/// the journal are committed before it returns.
pub fn assemble(config: &Config, clock: Arc<dyn Clock>, options: Options) -> Result<Assembled, StartError> {
    let store_config = config.store.as_ref().ok_or(StartError::NoStore)?;
    // Checked again here, not only in the config: the demo's --listen bypasses the file.
    if config.http.users.is_empty() && !config.http.listen.ip().is_loopback() {
        return Err(StartError::Exposed { addr: config.http.listen });
    }
    let conn = store::open(&store_config.path)?;
    // A clock behind the store (stepped back, or an RTC that lost time) goes on from its newest instant.
    let behind = crate::clock::resume_after_store(&conn, clock.as_ref())?;
    let now = clock.now_us();
    let keys =
        config.frames.iter().map(|f| store::frame_key(&conn, &f.id, &f.name, now)).collect::<Result<Vec<_>, _>>()?;
    let policy = WriterPolicy { flush: store_config.flush, checkpoint: store_config.checkpoint, ..Default::default() };
    let reader = store::reader(&store_config.path)?;
    let writer_thread = Writer::spawn(conn, policy, move |report| {
        if options.report_commits {
            use std::io::Write;
            let mut out = std::io::stdout().lock();
            let _ = writeln!(out, "{}", commit_line(&report));
            let _ = out.flush();
        }
    });
    let writer = writer_thread.writer();
    writer.event(Event {
        at_us: now,
        frame_key: None,
        kind: EventKind::DaemonStart,
        message: format!(
            "oedolog {} started with {} frame(s) on {} bus(es)",
            env!("CARGO_PKG_VERSION"),
            config.frames.len(),
            config.buses.len()
        ),
        actor: None,
        data: None,
    })?;
    if let Some(behind) = behind {
        writer.event(behind.event())?;
    }
    let lab = Lab::resume(&reader, keys.clone(), writer.clone(), now)?;
    let areas = config.frames.iter().map(|f| f.ring_area_mm2).collect();
    let hub = Hub::resume(&reader, lab.clone(), writer.clone(), clock.clone(), areas, WatchParams::default())?;
    // Alarms: what an earlier run left open goes on the board first, so it is neither lost nor raised twice.
    let alarms = AlarmBoard::default();
    let open = crate::alarms::task::load_open(&reader, &keys)?;
    alarms.update(|board, _| board.extend(open.iter().map(|(_, _, v)| v.clone())));
    let open_alarms = open.into_iter().map(|(s, c, v)| (s, c, v.id)).collect();
    drop(reader);
    // The start and resume entries are committed before the daemon says it is listening.
    writer.sync()?;
    let live = Live::new(
        config
            .frames
            .iter()
            .zip(&keys)
            .map(|(f, &key)| LiveFrame { id: f.id.clone(), name: f.name.clone(), key, ..Default::default() })
            .collect(),
    );
    // Offline after ten steady periods without a valid reading, and never under 30 s of clock time.
    let stale_after: Vec<Duration> =
        config.frames.iter().map(|f| (f.poll.steady * 10).max(Duration::from_secs(30))).collect();
    let state = AppState {
        live,
        lab,
        hub,
        clock,
        stale_after,
        display: config.display,
        started_us: now,
        writer,
        store_path: store_config.path.clone(),
        frames: Arc::new(config.frames.clone()),
        users: Arc::new(config.http.users.clone()),
        caches: Default::default(),
        alarms,
        guard: Arc::new(crate::http::Guard::new(config.http.listen, config.http.public_origins.clone())),
        streams: Default::default(),
        connections: Default::default(),
        publish: Arc::new(crate::publish::PublishStats::for_brokers(&config.publish.mqtt)),
    };
    Ok(Assembled { state, keys, writer_thread, open_alarms })
}

/// Assembles and starts everything the configuration describes.
///
/// The HTTP port is bound first, so a start refused for a busy port creates no database and starts no bus.
pub async fn start(config: &Config, clock: Arc<dyn Clock>, options: Options) -> Result<Running, StartError> {
    let listener = bind(config.http.listen).await?;
    assemble(config, clock, options)?.start_on(config, listener).await
}

async fn bind(addr: std::net::SocketAddr) -> Result<TcpListener, StartError> {
    TcpListener::bind(addr).await.map_err(|source| StartError::Bind { addr, source })
}

impl Assembled {
    /// Starts the assembled daemon: the watch thread fed by acquisition, the bus tasks, the clock's step
    /// journal, the webhooks, the alarm task and the HTTP server on `config.http.listen`.
    pub async fn start(self, config: &Config) -> Result<Running, StartError> {
        let listener = bind(config.http.listen).await?;
        self.start_on(config, listener).await
    }

    /// [`Assembled::start`] serving HTTP on `listener`, already bound to `config.http.listen`.
    pub async fn start_on(self, config: &Config, listener: TcpListener) -> Result<Running, StartError> {
        let Assembled { state, keys, writer_thread, open_alarms } = self;
        let (writer, clock, hub, live, lab) =
            (state.writer.clone(), state.clock.clone(), state.hub.clone(), state.live.clone(), state.lab.clone());
        let (tap, taps) = std::sync::mpsc::channel();
        let hub_thread = hub.clone();
        std::thread::Builder::new()
            .name("oedolog-watch".into())
            .spawn(move || hub_thread.run(taps))
            .map_err(|source| StartError::Thread { name: "oedolog-watch", source })?;
        let sinks = Sinks { writer: writer.clone(), live: live.clone(), clock: clock.clone(), tap: Some(tap) };
        let mut tasks = spawn_buses(config, &keys, &sinks);
        if clock.wall_offset_s().is_some() {
            let period = crate::clock::WALL_CHECK_PERIOD;
            tasks.push(tokio::spawn(crate::clock::journal_wall_steps(clock.clone(), writer.clone(), period)));
        }
        // After the start entries are committed: a webhook seen for the first time starts after them.
        let notify = crate::notify::start(
            &config.notify.webhooks,
            &state.store_path,
            &writer,
            clock.clone(),
            crate::notify::NotifyPolicy::default(),
        )?;
        tasks.push(notify);
        // A broker seen for the first time gets every reading of this run (stamped since the start).
        if !config.publish.mqtt.is_empty() {
            let publish = crate::publish::start(
                &config.publish.mqtt,
                &state,
                &keys,
                &state.publish,
                crate::publish::PublishPolicy::default(),
            )?;
            tasks.push(publish);
        }
        let http_addr =
            listener.local_addr().map_err(|source| StartError::Bind { addr: config.http.listen, source })?;
        state.guard.bound(http_addr);
        let sources = AlarmSources {
            live: live.clone(),
            lab: lab.clone(),
            hub: hub.clone(),
            clock: clock.clone(),
            writer: writer.clone(),
            stale_after: state.stale_after.clone(),
            keys: keys.clone(),
            facts: FrameFacts::of(config),
            outlets: crate::alarms::task::OutletSource::of(config, &state.publish),
        };
        tasks.push(tokio::spawn(
            AlarmTask::new(sources, config.alarms.clone(), state.alarms.clone(), open_alarms).run(),
        ));
        let connections = state.connections.clone();
        let app = router(state);
        tasks.push(tokio::spawn(crate::http::serve(listener, app, crate::http::ServeLimits::default(), connections)));
        drop(sinks);
        Ok(Running { live, lab, hub, writer, http_addr, writer_thread, tasks, clock })
    }
}

impl Running {
    /// Stops the tasks, journals the stop and commits what is queued.
    pub fn stop(self, why: &str) {
        for task in &self.tasks {
            task.abort();
        }
        let _ = self.writer.event(Event {
            at_us: self.clock.now_us(),
            frame_key: None,
            kind: EventKind::DaemonStop,
            message: format!("oedolog stopped: {why}"),
            actor: None,
            data: None,
        });
        self.writer_thread.close();
    }
}
