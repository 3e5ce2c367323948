//! Alarms as stored (`alarms`): the open ones an earlier run left, each raise, clear and
//! acknowledgement written with its journal entry in one writer job, and the history the API lists.

use rusqlite::{OptionalExtension, params};

use super::journal::{self, Event, EventKind};
use super::names::StoredCode;
use super::{Reader, StoreError, Writer};
use oedolog_core::alarms::Code;

/// An alarm not yet cleared, as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct OpenAlarm {
    /// `alarms.id`.
    pub id: i64,
    /// The frame's key, for a frame alarm.
    pub frame_key: Option<i64>,
    /// The frame's config id, for a frame alarm whose frame is still in the database.
    pub frame: Option<String>,
    /// The bus id, for a bus alarm.
    pub bus: Option<String>,
    /// Its code; `None` for a code this oedolog does not know (left for the caller to skip).
    pub code: Option<Code>,
    /// What a person reads.
    pub message: String,
    /// Raised, UTC µs.
    pub raised_us: i64,
    /// Acknowledged, UTC µs.
    pub acknowledged_us: Option<i64>,
    /// By whom.
    pub acknowledged_by: Option<String>,
}

/// Every alarm not yet cleared, oldest first.
pub fn open_alarms(reader: &Reader) -> Result<Vec<OpenAlarm>, StoreError> {
    let mut statement = reader.conn().prepare(
        "SELECT a.id, a.frame_key, f.id, a.bus, a.code, a.message, a.raised_us, a.acknowledged_us, a.acknowledged_by
         FROM alarms a LEFT JOIN frames f ON f.key = a.frame_key WHERE a.cleared_us IS NULL ORDER BY a.id",
    )?;
    let rows = statement.query_map([], |r| {
        Ok(OpenAlarm {
            id: r.get(0)?,
            frame_key: r.get(1)?,
            frame: r.get(2)?,
            bus: r.get(3)?,
            code: Code::from_name(&r.get::<_, String>(4)?),
            message: r.get(5)?,
            raised_us: r.get(6)?,
            acknowledged_us: r.get(7)?,
            acknowledged_by: r.get(8)?,
        })
    })?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// One change of the alarms to store.
#[derive(Clone, Debug, PartialEq)]
pub enum AlarmChange {
    /// A new alarm: its row and an `alarm-raised` entry whose data is `{"alarm", "alarm_id", "bus"}` plus
    /// the fields of `data` (an object).
    Raise {
        /// The frame's key, for a frame alarm.
        frame_key: Option<i64>,
        /// The bus id, for a bus alarm.
        bus: Option<String>,
        /// What.
        code: Code,
        /// What a person reads.
        message: String,
        /// Details, stored with the alarm.
        data: serde_json::Value,
    },
    /// Alarm `id` cleared: `cleared_us` set and an `alarm-cleared` entry with `{"alarm", "alarm_id"}`.
    Clear {
        /// `alarms.id`.
        id: i64,
        /// Its code.
        code: Code,
        /// What a person reads.
        message: String,
    },
}

/// What storing one [`AlarmChange`] gave.
#[derive(Clone, Debug, PartialEq)]
pub enum AlarmStored {
    /// The raised alarm's id and its frame's config id.
    Raised {
        /// `alarms.id`.
        id: i64,
        /// The frame's config id, for a frame alarm.
        frame: Option<String>,
    },
    /// Cleared.
    Cleared,
}

/// Stores `changes` stamped `now_us`, with their journal entries, in one writer job; the answer has one
/// item per change, in order.
pub fn store_changes(writer: &Writer, now_us: i64, changes: Vec<AlarmChange>) -> Result<Vec<AlarmStored>, StoreError> {
    writer.run(move |conn| {
        let mut out = Vec::with_capacity(changes.len());
        for change in changes {
            match change {
                AlarmChange::Raise { frame_key, bus, code, message, data } => {
                    conn.execute(
                        "INSERT INTO alarms (frame_key, bus, code, message, data, raised_us) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
                        params![frame_key, bus, StoredCode(code), message, data.to_string(), now_us],
                    )?;
                    let id = conn.last_insert_rowid();
                    let mut details = serde_json::json!({"alarm": code.name(), "alarm_id": id, "bus": bus});
                    if let (Some(d), serde_json::Value::Object(extra)) = (details.as_object_mut(), data) {
                        d.extend(extra);
                    }
                    journal::insert(
                        conn,
                        &Event {
                            at_us: now_us,
                            frame_key,
                            kind: EventKind::AlarmRaised,
                            message,
                            actor: None,
                            data: Some(details),
                        },
                    )?;
                    let frame: Option<String> = match frame_key {
                        Some(k) => conn.query_row("SELECT id FROM frames WHERE key = ?1", [k], |r| r.get(0)).optional()?,
                        None => None,
                    };
                    out.push(AlarmStored::Raised { id, frame });
                }
                AlarmChange::Clear { id, code, message } => {
                    let frame_key: Option<i64> = conn.query_row(
                        "UPDATE alarms SET cleared_us = ?2 WHERE id = ?1 RETURNING frame_key",
                        params![id, now_us],
                        |r| r.get(0),
                    )?;
                    let details = serde_json::json!({"alarm": code.name(), "alarm_id": id});
                    journal::insert(
                        conn,
                        &Event {
                            at_us: now_us,
                            frame_key,
                            kind: EventKind::AlarmCleared,
                            message,
                            actor: None,
                            data: Some(details),
                        },
                    )?;
                    out.push(AlarmStored::Cleared);
                }
            }
        }
        Ok(out)
    })
}

/// How an acknowledgement came out.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Acknowledged {
    /// Stored.
    Done,
    /// No such alarm.
    NotFound,
    /// It has cleared already.
    AlreadyCleared,
    /// Someone acknowledged it already.
    AlreadyAcknowledged,
}

/// `by` acknowledges alarm `id` at `now_us`: if it is open and not yet acknowledged, the name and instant
/// stored and an `alarm-acknowledged` entry ("alarm ID (CODE) acknowledged by NAME", actor `by`, data
/// `{"alarm", "alarm_id"}`), in one writer job; otherwise nothing is written.
pub fn acknowledge(writer: &Writer, id: i64, by: String, now_us: i64) -> Result<Acknowledged, StoreError> {
    writer.run(move |conn| {
        // The code as text: an alarm of a code this oedolog does not know can still be acknowledged.
        type Row = (Option<i64>, Option<i64>, String, Option<i64>);
        let row: Option<Row> = conn
            .query_row("SELECT acknowledged_us, cleared_us, code, frame_key FROM alarms WHERE id = ?1", [id], |r| {
                Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
            })
            .optional()?;
        let Some((acked, cleared, code, frame_key)) = row else { return Ok(Acknowledged::NotFound) };
        if cleared.is_some() {
            return Ok(Acknowledged::AlreadyCleared);
        }
        if acked.is_some() {
            return Ok(Acknowledged::AlreadyAcknowledged);
        }
        conn.execute(
            "UPDATE alarms SET acknowledged_us = ?2, acknowledged_by = ?3 WHERE id = ?1",
            params![id, now_us, by],
        )?;
        journal::insert(
            conn,
            &Event {
                at_us: now_us,
                frame_key,
                kind: EventKind::AlarmAcknowledged,
                message: format!("alarm {id} ({code}) acknowledged by {by}"),
                data: Some(serde_json::json!({"alarm": code, "alarm_id": id})),
                actor: Some(by),
            },
        )?;
        Ok(Acknowledged::Done)
    })
}

/// An alarm of the store, open or closed.
#[derive(Clone, Debug, PartialEq)]
pub struct AlarmRecord {
    /// `alarms.id`.
    pub id: i64,
    /// The code as stored.
    pub code: String,
    /// The frame's config id, for a frame alarm.
    pub frame: Option<String>,
    /// The bus id, for a bus alarm.
    pub bus: Option<String>,
    /// What a person reads.
    pub message: String,
    /// Raised, UTC µs.
    pub raised_us: i64,
    /// By whom it was acknowledged.
    pub acknowledged_by: Option<String>,
    /// When, UTC µs.
    pub acknowledged_us: Option<i64>,
    /// Cleared, UTC µs.
    pub cleared_us: Option<i64>,
}

/// The newest `limit` alarms, open or closed, newest first.
pub fn history(reader: &Reader, limit: i64) -> Result<Vec<AlarmRecord>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT a.id, a.code, f.id, a.bus, a.message, a.raised_us, a.acknowledged_by, a.acknowledged_us, a.cleared_us
         FROM alarms a LEFT JOIN frames f ON f.key = a.frame_key ORDER BY a.id DESC LIMIT ?1",
    )?;
    let rows = statement.query_map(params![limit], |r| {
        Ok(AlarmRecord {
            id: r.get(0)?,
            code: r.get(1)?,
            frame: r.get(2)?,
            bus: r.get(3)?,
            message: r.get(4)?,
            raised_us: r.get(5)?,
            acknowledged_by: r.get(6)?,
            acknowledged_us: r.get(7)?,
            cleared_us: r.get(8)?,
        })
    })?;
    Ok(rows.collect::<Result<_, _>>()?)
}
