//! The journal (`events`): what each entry is ([`EventKind`]), how an entry is written inside a writer
//! job, and the windows of it that the API, the event stream and the webhooks read.

use rusqlite::{Connection, params};

use super::names::stored_names;
use super::{Reader, StoreError, Writer};

stored_names! {
    /// What a journal entry is about: `events.kind`, the `kind` of the API's events and of a webhook's
    /// body. Every kind the daemon writes is here; a webhook subscribes to them through
    /// `config::NotifyEvent`, whose kinds are derived from this list.
    pub enum EventKind as "journal kind" {
        /// The daemon started.
        DaemonStart = "daemon-start",
        /// The daemon stopped.
        DaemonStop = "daemon-stop",
        /// The system clock stepped against the steady clock.
        ClockStep = "clock-step",
        /// At start-up the clock read before the newest stored instant.
        ClockBehind = "clock-behind",
        /// A bus link came up.
        BusUp = "bus-up",
        /// A bus link went down.
        BusDown = "bus-down",
        /// A channel's value was outside its range and not stored.
        ValueRefused = "value-refused",
        /// A refused channel gives valid values again.
        ValueRecovered = "value-recovered",
        /// A test started.
        TestStarted = "test-started",
        /// A test finished.
        TestFinished = "test-finished",
        /// A running test was resumed after a restart.
        TestResumed = "test-resumed",
        /// The next stress was entered.
        Armed = "armed",
        /// Someone said the load went on.
        LoadReported = "load-reported",
        /// The watch found the onset t0 of an increment.
        Onset = "onset",
        /// End of primary established: ready for the next load.
        Ready = "ready",
        /// The load left its expected force.
        LoadOff = "load-off",
        /// The load came back to its expected force.
        LoadBack = "load-back",
        /// The load changed with nothing armed.
        LoadChangeUnarmed = "load-change-unarmed",
        /// A gauge jump was proposed as a re-seat.
        ReseatProposed = "reseat-proposed",
        /// The proposed re-seat was answered.
        ReseatResolved = "reseat-resolved",
        /// Someone wrote a note.
        Note = "note",
        /// An alarm was raised.
        AlarmRaised = "alarm-raised",
        /// An alarm was acknowledged.
        AlarmAcknowledged = "alarm-acknowledged",
        /// An alarm cleared.
        AlarmCleared = "alarm-cleared",
        /// A webhook refused a notification for good.
        NotifyFailed = "notify-failed",
        /// Publishing to an MQTT broker fell further behind the store than its `lag_alarm_s`.
        PublishLag = "publish-lag",
        /// That broker caught up again.
        PublishCaughtUp = "publish-caught-up",
        /// An armed load step that never began was withdrawn.
        StepWithdrawn = "step-withdrawn",
        /// A load step was marked void (kept, left out of the reduction).
        StepVoided = "step-voided",
        /// A void load step was counted again.
        StepRestored = "step-restored",
        /// An engineer adjusted a construction (a revision).
        Revised = "revised",
        /// An engineer took an adjustment back (a revision naming the one it withdraws).
        RevisionWithdrawn = "revision-withdrawn",
        /// An engineer approved a test's reduction.
        Approved = "approved",
        /// A later revision withdrew an approval.
        ApprovalWithdrawn = "approval-withdrawn",
    }
}

/// A journal entry to write.
#[derive(Clone, Debug, PartialEq)]
pub struct Event {
    /// UTC µs.
    pub at_us: i64,
    /// The frame concerned, if any.
    pub frame_key: Option<i64>,
    /// What it is about.
    pub kind: EventKind,
    /// What a person reads.
    pub message: String,
    /// Who, for operator actions.
    pub actor: Option<String>,
    /// Details.
    pub data: Option<serde_json::Value>,
}

/// Writes `event` on the writer's connection, inside the transaction (or savepoint) it is in; returns
/// the entry's id.
pub(super) fn insert(conn: &Connection, event: &Event) -> rusqlite::Result<i64> {
    let mut insert = conn.prepare_cached(
        "INSERT INTO events (at_us, frame_key, kind, message, actor, data) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
    )?;
    insert.execute(params![
        event.at_us,
        event.frame_key,
        event.kind,
        event.message,
        event.actor,
        event.data.as_ref().map(|d| d.to_string())
    ])?;
    Ok(conn.last_insert_rowid())
}

/// Writes `event` in a writer job of its own, committed before this returns (unlike
/// [`Writer::event`], which queues it for the next batch); returns its id.
pub fn append(writer: &Writer, event: Event) -> Result<i64, StoreError> {
    writer.run(move |conn| Ok(insert(conn, &event)?))
}

/// A journal entry as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct JournalEntry {
    /// `events.id`.
    pub id: i64,
    /// UTC µs.
    pub at_us: i64,
    /// The frame's config id, if any.
    pub frame: Option<String>,
    /// The frame's name, if any.
    pub frame_name: Option<String>,
    /// What it is about.
    pub kind: EventKind,
    /// What a person reads.
    pub message: String,
    /// Who, for operator actions.
    pub actor: Option<String>,
    /// Details (`None` also when the stored text is not JSON).
    pub data: Option<serde_json::Value>,
}

const ENTRY_COLUMNS: &str = "e.id, e.at_us, f.id, f.name, e.kind, e.message, e.actor, e.data";

fn entry(r: &rusqlite::Row<'_>) -> rusqlite::Result<JournalEntry> {
    let data: Option<String> = r.get(7)?;
    Ok(JournalEntry {
        id: r.get(0)?,
        at_us: r.get(1)?,
        frame: r.get(2)?,
        frame_name: r.get(3)?,
        kind: r.get(4)?,
        message: r.get(5)?,
        actor: r.get(6)?,
        data: data.and_then(|d| serde_json::from_str(&d).ok()),
    })
}

/// Entries with id > `after`, oldest first, at most `limit`, optionally only those of frame `frame_key`.
pub fn after(reader: &Reader, after: i64, limit: i64, frame_key: Option<i64>) -> Result<Vec<JournalEntry>, StoreError> {
    let mut statement = reader.conn().prepare_cached(&format!(
        "SELECT {ENTRY_COLUMNS} FROM events e LEFT JOIN frames f ON f.key = e.frame_key
         WHERE e.id > ?1 AND (?2 IS NULL OR e.frame_key = ?2) ORDER BY e.id LIMIT ?3"
    ))?;
    let rows = statement.query_map(params![after, frame_key, limit], entry)?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// A window of the journal, as `GET /api/events` asks for it.
#[derive(Clone, Debug)]
pub struct Window {
    /// Ids above this.
    pub after: i64,
    /// Ids below this.
    pub before: i64,
    /// At most this many.
    pub limit: i64,
    /// Only this frame's.
    pub frame_key: Option<i64>,
    /// The newest first (and the newest `limit` of the window), else the oldest first.
    pub newest_first: bool,
}

/// The entries of `window`.
pub fn window(reader: &Reader, window: &Window) -> Result<Vec<JournalEntry>, StoreError> {
    let order = if window.newest_first { "DESC" } else { "ASC" };
    let mut statement = reader.conn().prepare_cached(&format!(
        "SELECT {ENTRY_COLUMNS} FROM events e LEFT JOIN frames f ON f.key = e.frame_key
         WHERE e.id > ?1 AND e.id < ?2 AND (?3 IS NULL OR e.frame_key = ?3) ORDER BY e.id {order} LIMIT ?4"
    ))?;
    let rows = statement.query_map(params![window.after, window.before, window.frame_key, window.limit], entry)?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// Entries of one of `kinds` with `after < id ≤ up_to`, oldest first, at most `limit` (what a webhook
/// subscribed to).
pub fn of_kinds(
    reader: &Reader,
    after: i64,
    up_to: i64,
    kinds: &[EventKind],
    limit: i64,
) -> Result<Vec<JournalEntry>, StoreError> {
    let kinds = serde_json::json!(kinds).to_string();
    let mut statement = reader.conn().prepare_cached(&format!(
        "SELECT {ENTRY_COLUMNS} FROM events e LEFT JOIN frames f ON f.key = e.frame_key
         WHERE e.id > ?1 AND e.id <= ?2 AND e.kind IN (SELECT value FROM json_each(?3))
         ORDER BY e.id LIMIT ?4"
    ))?;
    let rows = statement.query_map(params![after, up_to, kinds, limit], entry)?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// The newest entry's id (0 for an empty journal).
pub fn newest_id(reader: &Reader) -> Result<i64, StoreError> {
    Ok(newest_id_on(reader.conn())?)
}

pub(super) fn newest_id_on(conn: &Connection) -> rusqlite::Result<i64> {
    conn.query_row("SELECT coalesce(max(id), 0) FROM events", [], |r| r.get(0))
}

/// The newest entry's instant, UTC µs (`None` for an empty journal).
pub(super) fn newest_at(reader: &Reader) -> Result<Option<i64>, StoreError> {
    Ok(reader.conn().query_row("SELECT MAX(at_us) FROM events", [], |r| r.get(0))?)
}
