//! The alarm task: every few seconds (clock time, never under a floor in real time) it gathers what
//! acquisition and the watch know, lets the [`AlarmEngine`] decide, and stores each raise or clear with
//! its journal entry in one writer job, then updates the [`AlarmBoard`]. Acknowledgements come from the
//! API through [`acknowledge`]. Nothing here touches a bus: acquisition never waits on alarms.

use std::sync::Arc;
use std::time::Duration;

use rusqlite::{Connection, OptionalExtension, params};

use super::{AlarmBoard, AlarmView};
use crate::acquire::Live;
use crate::clock::{Clock, rfc3339};
use crate::config::Config;
use crate::lab::Lab;
use crate::store::{StoreError, Writer};
use crate::watch::Hub;
use oedolog_core::alarms::{AlarmEngine, AlarmRules, BusInput, Code, FrameInput, Subject, Transition};

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
}

impl AlarmSources {
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
pub fn load_open(conn: &Connection, keys: &[i64]) -> Result<Vec<(Subject, Code, AlarmView)>, StoreError> {
    let mut statement = conn.prepare(
        "SELECT a.id, a.frame_key, f.id, a.bus, a.code, a.message, a.raised_us, a.acknowledged_us, a.acknowledged_by
         FROM alarms a LEFT JOIN frames f ON f.key = a.frame_key WHERE a.cleared_us IS NULL ORDER BY a.id",
    )?;
    let rows = statement.query_map([], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, Option<i64>>(1)?,
            r.get::<_, Option<String>>(2)?,
            r.get::<_, Option<String>>(3)?,
            r.get::<_, String>(4)?,
            r.get::<_, String>(5)?,
            r.get::<_, i64>(6)?,
            r.get::<_, Option<i64>>(7)?,
            r.get::<_, Option<String>>(8)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (id, frame_key, frame, bus, code, message, raised_us, ack_us, ack_by) = row?;
        let Some(code) = Code::from_name(&code) else { continue };
        let subject = match (frame_key.and_then(|k| keys.iter().position(|&x| x == k)), &bus) {
            (Some(index), _) => Subject::Frame(index),
            (None, Some(b)) => Subject::Bus(b.clone()),
            // A frame no longer configured: its alarm can never clear by itself; leave it out.
            (None, None) => continue,
        };
        out.push((
            subject,
            code,
            AlarmView {
                acknowledged_by: ack_by,
                acknowledged_at: ack_us.map(rfc3339),
                ..AlarmView::raised(id, code, frame, bus, message, raised_us)
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
        let transitions = self.engine.evaluate(now, &frames, &buses);
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
    let keys = keys.to_vec();
    let known = known.clone();
    writer.run(move |conn| {
        let mut out = Vec::new();
        for t in transitions {
            match t {
                Transition::Raise { subject, code, message, data } => {
                    let (frame_key, bus) = match &subject {
                        Subject::Frame(i) => (keys.get(*i).copied(), None),
                        Subject::Bus(b) => (None, Some(b.clone())),
                    };
                    conn.execute(
                        "INSERT INTO alarms (frame_key, bus, code, message, data, raised_us) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                        params![frame_key, bus, code.name(), message, data.to_string(), now],
                    )?;
                    let id = conn.last_insert_rowid();
                    let mut details = serde_json::json!({"alarm": code.name(), "alarm_id": id, "bus": bus});
                    if let (Some(d), serde_json::Value::Object(extra)) = (details.as_object_mut(), data) {
                        d.extend(extra);
                    }
                    conn.execute(
                        "INSERT INTO events (at_us, frame_key, kind, message, data) VALUES (?1, ?2, 'alarm-raised', ?3, ?4)",
                        params![now, frame_key, message, details.to_string()],
                    )?;
                    let frame: Option<String> = match frame_key {
                        Some(k) => conn.query_row("SELECT id FROM frames WHERE key = ?1", [k], |r| r.get(0)).optional()?,
                        None => None,
                    };
                    out.push(Applied::Raised(
                        subject,
                        code,
                        AlarmView::raised(id, code, frame, bus, message, now),
                    ));
                }
                Transition::Clear { subject, code, message } => {
                    let Some(&id) = known.get(&(subject.clone(), code)) else { continue };
                    let frame_key: Option<i64> = conn.query_row(
                        "UPDATE alarms SET cleared_us = ?2 WHERE id = ?1 RETURNING frame_key",
                        params![id, now],
                        |r| r.get(0),
                    )?;
                    let details = serde_json::json!({"alarm": code.name(), "alarm_id": id});
                    conn.execute(
                        "INSERT INTO events (at_us, frame_key, kind, message, data) VALUES (?1, ?2, 'alarm-cleared', ?3, ?4)",
                        params![now, frame_key, message, details.to_string()],
                    )?;
                    out.push(Applied::Cleared(subject, code));
                }
            }
        }
        Ok(out)
    })
}

/// (acknowledged µs, cleared µs, code, frame key) of a stored alarm.
type AckRow = (Option<i64>, Option<i64>, String, Option<i64>);

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
    let name = by.clone();
    let outcome = writer.run(move |conn| {
        let row: Option<AckRow> = conn
            .query_row("SELECT acknowledged_us, cleared_us, code, frame_key FROM alarms WHERE id = ?1", [id], |r| {
                Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
            })
            .optional()?;
        let Some((acked, cleared, code, frame_key)) = row else { return Ok(Err(AckError::NotFound(id))) };
        if cleared.is_some() {
            return Ok(Err(AckError::Closed(id, "already cleared")));
        }
        if acked.is_some() {
            return Ok(Err(AckError::Closed(id, "already acknowledged")));
        }
        conn.execute(
            "UPDATE alarms SET acknowledged_us = ?2, acknowledged_by = ?3 WHERE id = ?1",
            params![id, now_us, name],
        )?;
        conn.execute(
            "INSERT INTO events (at_us, frame_key, kind, message, actor, data) VALUES (?1, ?2, 'alarm-acknowledged', ?3, ?4, ?5)",
            params![
                now_us,
                frame_key,
                format!("alarm {id} ({code}) acknowledged by {name}"),
                name,
                serde_json::json!({"alarm": code, "alarm_id": id}).to_string()
            ],
        )?;
        Ok(Ok(()))
    })?;
    outcome?;
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
