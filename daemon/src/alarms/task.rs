//! The alarm task: every few seconds (clock time, never under a floor in real time) it gathers what
//! acquisition and the watch know, lets the [`AlarmEngine`] decide, and stores each raise or clear with
//! its journal entry in one writer job, then updates the [`AlarmBoard`]. Acknowledgements come from the
//! API through [`acknowledge`]. Nothing here touches a bus: acquisition never waits on alarms.

use std::sync::Arc;
use std::time::Duration;

use super::{AlarmBoard, AlarmView};
use crate::acquire::Live;
use crate::clock::{Clock, rfc3339};
use crate::config::Config;
use crate::lab::Lab;
use crate::store::alarms::{self as stored, Acknowledged, AlarmChange, AlarmStored};
use crate::store::{Reader, StoreError, Writer};
use crate::watch::Hub;
use oedolog_core::alarms::{AlarmEngine, AlarmRules, BusInput, Code, FrameInput, OutletInput, Subject, Transition};

/// How often the conditions are judged, clock time.
pub const PERIOD: Duration = Duration::from_secs(5);
/// The shortest real wait between two judgements (a fast demo clock).
const FLOOR: Duration = Duration::from_millis(250);

/// The configured facts the conditions need, per frame in config order.
#[derive(Clone, Debug, Default)]
pub struct FrameFacts {
    /// The gauge's travel (the displacement channel's range), mm.
    pub travel_mm: Vec<std::ops::Range<f64>>,
    /// Whether it has a temperature channel.
    pub has_temperature: Vec<bool>,
    /// Its bus id.
    pub bus_of: Vec<String>,
    /// Every bus id.
    pub buses: Vec<String>,
}

impl FrameFacts {
    /// The facts of a configuration.
    pub fn of(config: &Config) -> Self {
        FrameFacts {
            travel_mm: config.frames.iter().map(|f| f.displacement.range.clone()).collect(),
            has_temperature: config.frames.iter().map(|f| f.temperature.is_some()).collect(),
            bus_of: config.frames.iter().map(|f| config.buses[f.bus].id.clone()).collect(),
            buses: config.buses.iter().map(|b| b.id.clone()).collect(),
        }
    }
}

/// What the task reads.
#[derive(Clone)]
pub struct AlarmSources {
    /// Acquisition's live view.
    pub live: Live,
    /// Running tests.
    pub lab: Lab,
    /// The watch (load check).
    pub hub: Hub,
    /// The clock.
    pub clock: Arc<dyn Clock>,
    /// The writer.
    pub writer: Writer,
    /// Per frame: its stale time.
    pub stale_after: Vec<Duration>,
    /// Frame keys in config order.
    pub keys: Vec<i64>,
    /// The configured facts.
    pub facts: FrameFacts,
    /// The outlets publishing the store (`[[publish.mqtt]]`), with their publishers' stats.
    pub outlets: Vec<OutletSource>,
}

/// One outlet as the alarm task sees it.
#[derive(Clone, Debug)]
pub struct OutletSource {
    /// What a person reads: "MQTT broker URL (lab LAB)".
    pub name: String,
    /// `lag_alarm_s`.
    pub limit: Duration,
    /// Its publisher's stats (the subject's key is `stats.name`).
    pub stats: Arc<crate::publish::BrokerStats>,
}

impl OutletSource {
    /// One per `[[publish.mqtt]]`, with the stats its publisher updates (both in config order).
    pub fn of(config: &Config, stats: &crate::publish::PublishStats) -> Vec<OutletSource> {
        config
            .publish
            .mqtt
            .iter()
            .zip(&stats.brokers)
            .map(|(b, s)| OutletSource {
                name: format!("MQTT broker {} (lab {})", b.url.text, b.lab),
                limit: b.lag_alarm,
                stats: s.clone(),
            })
            .collect()
    }
}

impl AlarmSources {
    fn outlet_inputs(&self) -> Vec<OutletInput> {
        self.outlets
            .iter()
            .map(|o| OutletInput {
                id: o.stats.name.clone(),
                name: o.name.clone(),
                behind: o.stats.lag_alarm(),
                lag_s: o.stats.lag_s(),
                limit_s: o.limit.as_secs_f64(),
            })
            .collect()
    }

    fn inputs(&self) -> (Vec<FrameInput>, Vec<BusInput>) {
        let live = self.live.snapshot();
        let tests = self.lab.snapshot();
        let watch = self.hub.status();
        let frames: Vec<FrameInput> = live
            .iter()
            .enumerate()
            .map(|(i, f)| FrameInput {
                id: f.id.clone(),
                testing: tests.get(i).is_some_and(Option::is_some),
                last_reading_us: f.last_reading_us(),
                stale_after: self.stale_after.get(i).copied().unwrap_or(Duration::from_secs(30)),
                displacement_mm: f.displacement.map(|(_, v)| v),
                travel_mm: self.facts.travel_mm.get(i).cloned(),
                load_kn: f.load.map(|(_, v)| v),
                temperature_c: if self.facts.has_temperature.get(i).copied().unwrap_or(false) {
                    f.temperature.map(|(_, v)| v)
                } else {
                    None
                },
                load_off: watch.get(i).is_some_and(|(_, w)| w.load_off),
                refused_values: f.counters.refused_values,
            })
            .collect();
        let buses = self
            .facts
            .buses
            .iter()
            .map(|id| {
                let mut bus = BusInput { id: id.clone(), ..Default::default() };
                for (f, b) in live.iter().zip(&self.facts.bus_of) {
                    if b == id {
                        let c = &f.counters;
                        bus.requests += c.requests;
                        bus.errors += c.timeouts + c.crc_errors + c.exceptions + c.bad_frames;
                    }
                }
                bus
            })
            .collect();
        (frames, buses)
    }
}

/// The open alarms stored by an earlier run, for the board and the engine.
pub fn load_open(conn: &Reader, keys: &[i64]) -> Result<Vec<(Subject, Code, AlarmView)>, StoreError> {
    let mut out = Vec::new();
    for alarm in stored::open_alarms(conn)? {
        let Some(code) = alarm.code else { continue };
        let subject = match (alarm.frame_key.and_then(|k| keys.iter().position(|&x| x == k)), &alarm.bus) {
            (Some(index), _) => Subject::Frame(index),
            (None, Some(b)) if code == Code::PublishLag => Subject::Outlet(b.clone()),
            (None, Some(b)) => Subject::Bus(b.clone()),
            // A frame no longer configured: its alarm can never clear by itself; leave it out.
            (None, None) => continue,
        };
        out.push((
            subject,
            code,
            AlarmView {
                acknowledged_by: alarm.acknowledged_by,
                acknowledged_at: alarm.acknowledged_us.map(rfc3339),
                ..AlarmView::raised(alarm.id, code, alarm.frame, alarm.bus, alarm.message, alarm.raised_us)
            },
        ));
    }
    Ok(out)
}

/// The alarm task's state: the engine and the ids of the open alarms.
pub struct AlarmTask {
    sources: AlarmSources,
    board: AlarmBoard,
    engine: AlarmEngine,
    ids: std::collections::BTreeMap<(Subject, Code), i64>,
}

impl AlarmTask {
    /// A task with `rules` that knows the alarms `open` from an earlier run (already on the board, see
    /// [`load_open`]): (subject, code, alarm id).
    pub fn new(sources: AlarmSources, rules: AlarmRules, board: AlarmBoard, open: Vec<(Subject, Code, i64)>) -> Self {
        let engine = AlarmEngine::new(rules, sources.clock.now_us(), open.iter().map(|(s, c, _)| (s.clone(), *c)));
        let ids = open.into_iter().map(|(s, c, id)| ((s, c), id)).collect();
        AlarmTask { sources, board, engine, ids }
    }

    /// Judges the conditions once and stores what changed; returns how many transitions were stored.
    pub async fn tick(&mut self) -> usize {
        let now = self.sources.clock.now_us();
        let (frames, buses) = self.sources.inputs();
        let mut transitions = self.engine.evaluate(now, &frames, &buses);
        transitions.extend(self.engine.evaluate_outlets(now, &self.sources.outlet_inputs()));
        if transitions.is_empty() {
            return 0;
        }
        let (writer, keys) = (self.sources.writer.clone(), self.sources.keys.clone());
        let known = self.ids.clone();
        let done = tokio::task::spawn_blocking(move || apply(&writer, &keys, now, transitions, &known)).await;
        match done {
            Ok(Ok(applied)) => {
                let n = applied.len();
                for a in applied {
                    record(&self.board, &mut self.ids, a);
                }
                n
            }
            Ok(Err(error)) => {
                tracing::error!("alarms not stored: {error}");
                0
            }
            Err(error) => {
                tracing::error!("alarm task: {error}");
                0
            }
        }
    }

    /// Judges every [`PERIOD`] of clock time until aborted.
    pub async fn run(mut self) {
        loop {
            tokio::time::sleep(self.sources.clock.real_wait(PERIOD, FLOOR)).await;
            self.tick().await;
        }
    }
}

/// A stored transition.
enum Applied {
    Raised(Subject, Code, AlarmView),
    Cleared(Subject, Code),
}

fn record(board: &AlarmBoard, ids: &mut std::collections::BTreeMap<(Subject, Code), i64>, applied: Applied) {
    match applied {
        Applied::Raised(subject, code, view) => {
            ids.insert((subject, code), view.id);
            board.update(|open, counts| {
                *counts.raised.entry(code.name()).or_default() += 1;
                open.push(view);
            });
        }
        Applied::Cleared(subject, code) => {
            if let Some(id) = ids.remove(&(subject, code)) {
                board.update(|open, counts| {
                    *counts.cleared.entry(code.name()).or_default() += 1;
                    open.retain(|a| a.id != id);
                });
            }
        }
    }
}

/// Stores the transitions and their journal entries in one job.
fn apply(
    writer: &Writer,
    keys: &[i64],
    now: i64,
    transitions: Vec<Transition>,
    known: &std::collections::BTreeMap<(Subject, Code), i64>,
) -> Result<Vec<Applied>, StoreError> {
    // (subject, code, message and bus of a raise) per change, in the order of the changes.
    let mut about = Vec::new();
    let mut changes = Vec::new();
    for t in transitions {
        match t {
            Transition::Raise { subject, code, message, data } => {
                let (frame_key, bus) = match &subject {
                    Subject::Frame(i) => (keys.get(*i).copied(), None),
                    Subject::Bus(b) | Subject::Outlet(b) => (None, Some(b.clone())),
                };
                about.push((subject, code, Some((message.clone(), bus.clone()))));
                changes.push(AlarmChange::Raise { frame_key, bus, code, message, data });
            }
            Transition::Clear { subject, code, message } => {
                let Some(&id) = known.get(&(subject.clone(), code)) else { continue };
                about.push((subject, code, None));
                changes.push(AlarmChange::Clear { id, code, message });
            }
        }
    }
    let results = stored::store_changes(writer, now, changes)?;
    Ok(about
        .into_iter()
        .zip(results)
        .map(|((subject, code, raised), result)| match (result, raised) {
            (AlarmStored::Raised { id, frame }, Some((message, bus))) => {
                Applied::Raised(subject, code, AlarmView::raised(id, code, frame, bus, message, now))
            }
            _ => Applied::Cleared(subject, code),
        })
        .collect())
}

/// Why an acknowledgement was refused.
#[derive(Debug, thiserror::Error)]
pub enum AckError {
    /// No such alarm.
    #[error("no alarm {0}")]
    NotFound(i64),
    /// Already acknowledged or cleared.
    #[error("alarm {0} is {1}")]
    Closed(i64, &'static str),
    /// The store failed.
    #[error("{0}")]
    Store(#[from] StoreError),
}

/// An operator acknowledges alarm `id`: stored with the name and journalled; the board shows it.
pub fn acknowledge(
    writer: &Writer,
    board: &AlarmBoard,
    id: i64,
    by: String,
    now_us: i64,
) -> Result<AlarmView, AckError> {
    match stored::acknowledge(writer, id, by.clone(), now_us)? {
        Acknowledged::Done => {}
        Acknowledged::NotFound => return Err(AckError::NotFound(id)),
        Acknowledged::AlreadyCleared => return Err(AckError::Closed(id, "already cleared")),
        Acknowledged::AlreadyAcknowledged => return Err(AckError::Closed(id, "already acknowledged")),
    }
    let mut view = None;
    board.update(|open, _| {
        if let Some(a) = open.iter_mut().find(|a| a.id == id) {
            a.acknowledged_by = Some(by.clone());
            a.acknowledged_at = Some(rfc3339(now_us));
            view = Some(a.clone());
        }
    });
    view.ok_or(AckError::Closed(id, "already cleared"))
}
