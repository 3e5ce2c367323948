//! The store: SQLite on local disk, in WAL mode with `synchronous=FULL`, so a reading reported committed
//! survives a power cut or `kill -9` (SQLite's documented guarantee: WAL + FULL syncs the log on every commit).
//!
//! One writer thread owns the only writing connection and batches readings into transactions at most
//! `flush` apart; everything else reads on its own short-lived connections. The store knows nothing of
//! buses or HTTP.
//!
//! The store owns the SQL: every statement lives in this module tree, behind typed functions grouped by
//! what they keep — [`lab_book`] (frames, tests, increments), [`journal`] (events), [`alarms`],
//! [`notify`] (webhook cursors), [`publish`] (MQTT cursors) and [`read`] (what the API reads). Each write is one writer job: what it
//! changes commits in one transaction, and it returns only once that is durable. The names kept as text
//! are enums ([`EventKind`], [`TestState`], onset sources, alarm codes) read back with `FromSql`, which
//! refuses a name this oedolog does not know. Outside the store a connection is only a [`Reader`] (or
//! the [`Database`] before the writer takes it): nothing else can write.

pub mod alarms;
pub mod journal;
pub mod lab_book;
pub mod migrations;
mod names;
pub mod notify;
pub mod publish;
pub mod read;
pub mod review;
#[cfg(test)]
pub(crate) mod testing;

pub use journal::{Event, EventKind};
pub use lab_book::{TestState, frame_key};
pub use names::UnknownName;
pub use read::{Poll, latest_reading, polls};

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::mpsc::{Receiver, RecvTimeoutError, Sender, TryRecvError, channel};
use std::time::{Duration, Instant};

use rusqlite::{Connection, OpenFlags, params};

/// A store failure.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// SQLite said no.
    #[error("database: {0}")]
    Sqlite(#[from] rusqlite::Error),
    /// The file was written by a newer oedolog.
    #[error(
        "the database is at schema version {found}, newer than this oedolog knows ({latest}); use a newer oedolog or restore a backup"
    )]
    TooNew {
        /// `PRAGMA user_version` of the file.
        found: u32,
        /// The newest version this binary has.
        latest: u32,
    },
    /// A migration failed (nothing of it was applied).
    #[error("migration {name} failed: {source}")]
    Migration {
        /// File name.
        name: &'static str,
        /// Why.
        source: rusqlite::Error,
    },
    /// `PRAGMA quick_check` found damage.
    #[error("the database failed its integrity check ({0}); restore the latest backup (see README, after a power cut)")]
    Damaged(String),
    /// The folder for the file could not be made.
    #[error("cannot create {path}: {source}")]
    Folder {
        /// The folder.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// The writer thread has stopped.
    #[error("the store's writer has stopped")]
    WriterGone,
    /// The change is not allowed on what is stored (nothing of it was stored).
    #[error("{0}")]
    Refused(String),
    /// The transaction holding a change could not be committed; nothing of it was stored.
    #[error("the change could not be committed: {0}")]
    CommitFailed(String),
}

/// Channels of a frame, as stored in `readings.channel`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum ChannelKind {
    /// Displacement gauge, mm, compression positive.
    Displacement = 0,
    /// Load cell, kN.
    Load = 1,
    /// Temperature, °C.
    Temperature = 2,
}

impl ChannelKind {
    /// Every channel.
    pub const ALL: [ChannelKind; 3] = [ChannelKind::Displacement, ChannelKind::Load, ChannelKind::Temperature];

    /// The stored number.
    pub fn code(self) -> i64 {
        self as i64
    }

    /// The name used in events and the API.
    pub fn name(self) -> &'static str {
        match self {
            ChannelKind::Displacement => "displacement",
            ChannelKind::Load => "load",
            ChannelKind::Temperature => "temperature",
        }
    }
}

/// One valid reading.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Reading {
    /// `frames.key`.
    pub frame_key: i64,
    /// Which instrument.
    pub channel: ChannelKind,
    /// UTC µs.
    pub at_us: i64,
    /// The device's value after its register map.
    pub raw: f64,
    /// Calibrated value.
    pub value: f64,
}

/// Up to [`ReadingSet::CAPACITY`] readings handed over in one message (the channels of one reply).
#[derive(Clone, Copy, Debug, Default)]
pub struct ReadingSet {
    items: [Option<Reading>; ReadingSet::CAPACITY],
}

impl ReadingSet {
    /// As many as a frame has channels (displacement, load, temperature).
    pub const CAPACITY: usize = 3;

    /// Adds `reading`; gives it back when the set is full.
    pub fn push(&mut self, reading: Reading) -> Result<(), Reading> {
        match self.items.iter_mut().find(|r| r.is_none()) {
            Some(slot) => {
                *slot = Some(reading);
                Ok(())
            }
            None => Err(reading),
        }
    }

    /// The readings, in the order added.
    pub fn iter(&self) -> impl Iterator<Item = &Reading> {
        self.items.iter().flatten()
    }

    /// How many.
    pub fn len(&self) -> usize {
        self.iter().count()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.items[0].is_none()
    }
}

/// What one commit wrote; sent to the commit observer after the transaction is durable.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CommitReport {
    /// Commit counter since the writer started.
    pub batch: u64,
    /// Readings inserted by this commit (duplicates of a stored key are ignored, not counted).
    pub readings: u64,
    /// Events inserted.
    pub events: u64,
    /// Readings inserted since the writer started.
    pub total_readings: u64,
    /// The last reading of the batch: (frame key, channel, at_us).
    pub last: Option<(i64, i64, i64)>,
}

/// Called once the batch a job ran in is committed (`None`) or failed to commit (`Some(why)`).
type Reply = Box<dyn FnOnce(Option<String>) + Send>;
/// Runs on the writer's connection; returns whether its changes should be kept, and its reply, which is
/// sent only after the commit, so a caller told "done" has its change on disk.
type Job = Box<dyn FnOnce(&Connection) -> (bool, Reply) + Send>;

enum Op {
    Reading(Reading),
    /// The readings of one reply, in one message.
    Readings(ReadingSet),
    Event(Event),
    /// Runs inside the writer's transaction and commits at once (operator actions, set-up).
    Job(Job),
    /// Commit now and stop.
    Close,
}

/// A connection the store's typed read functions read through: a read-only one from [`reader`], or the
/// [`Database`] before the writer takes it. Opaque outside the store.
pub struct Reader(Connection);

impl Reader {
    pub(in crate::store) fn conn(&self) -> &Connection {
        &self.0
    }
}

/// The database as [`open`] leaves it: the only connection that writes. Until [`Writer::spawn`] takes it
/// over, the typed read functions read through it (it derefs to a [`Reader`]) and [`frame_key`] writes
/// through it.
pub struct Database(Reader);

impl std::ops::Deref for Database {
    type Target = Reader;

    fn deref(&self) -> &Reader {
        &self.0
    }
}

/// Page cache of the writing connection, KiB (`PRAGMA cache_size` takes it negated; SQLite's default is
/// 2 048 KiB). Shared with the bare baseline of `tests/bench/cpu-per-reading.sh` so that the bench compares
/// the daemon's own work, not a tuning the baseline lacks.
pub const WRITER_CACHE_KIB: i64 = 16_384;

/// Opens (creating if needed) the database for writing: pragmas, integrity check, migrations.
pub fn open(path: &Path) -> Result<Database, StoreError> {
    if let Some(folder) = path.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(folder).map_err(|source| StoreError::Folder { path: folder.into(), source })?;
    }
    let mut conn = Connection::open(path)?;
    conn.busy_timeout(Duration::from_secs(5))?;
    let mode: String = conn.query_row("PRAGMA journal_mode = WAL", [], |r| r.get(0))?;
    debug_assert_eq!(mode, "wal");
    conn.pragma_update(None, "synchronous", "FULL")?;
    conn.pragma_update(None, "foreign_keys", "ON")?;
    // 16 MiB of page cache (SQLite's default is 2 MiB): the writer's inserts into the readings index re-read
    // fewer pages from the OS cache; tests/bench/cpu-per-reading.sh went from 15.4 to 12.1–12.6 µs per
    // stored reading with it.
    conn.pragma_update(None, "cache_size", -WRITER_CACHE_KIB)?;
    let check: String = conn.query_row("PRAGMA quick_check", [], |r| r.get(0))?;
    if check != "ok" {
        return Err(StoreError::Damaged(check));
    }
    migrations::migrate(&mut conn)?;
    Ok(Database(Reader(conn)))
}

/// A read-only connection for queries (the dashboard, backups). Keep its transactions short: a long
/// reader holds WAL checkpoints back.
pub fn reader(path: &Path) -> Result<Reader, StoreError> {
    let conn = Connection::open_with_flags(path, OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX)?;
    conn.busy_timeout(Duration::from_secs(5))?;
    Ok(Reader(conn))
}

/// Copies the database to `dest` with SQLite's online backup API: consistent even while the daemon writes.
pub fn backup(source: &Path, dest: &Path) -> Result<(), StoreError> {
    let from = reader(source)?;
    let mut to = Connection::open(dest)?;
    let backup = rusqlite::backup::Backup::new(from.conn(), &mut to)?;
    backup.run_to_completion(256, Duration::from_millis(5), None)?;
    drop(backup);
    let check: String = to.query_row("PRAGMA quick_check", [], |r| r.get(0))?;
    if check == "ok" { Ok(()) } else { Err(StoreError::Damaged(check)) }
}

/// How the writer batches and checkpoints.
#[derive(Clone, Copy, Debug)]
pub struct WriterPolicy {
    /// Longest wait between the first reading of a batch and its commit.
    pub flush: Duration,
    /// Largest batch.
    pub max_batch: usize,
    /// Period of `wal_checkpoint(TRUNCATE)`.
    pub checkpoint: Duration,
}

impl Default for WriterPolicy {
    fn default() -> Self {
        WriterPolicy { flush: Duration::from_millis(500), max_batch: 20_000, checkpoint: Duration::from_secs(300) }
    }
}

/// The sending side of the writer: cheap to clone, never blocks.
#[derive(Clone)]
pub struct Writer {
    tx: Sender<Op>,
    queued: Arc<AtomicU64>,
    commits: Arc<AtomicU64>,
    /// The writer thread, woken for what cannot wait for the batch's flush (a job, closing).
    thread: std::thread::Thread,
}

/// The writer thread's handle: close it to commit the last batch and stop.
pub struct WriterThread {
    writer: Writer,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl Writer {
    /// Starts the writer thread on the database `db`. `on_commit` runs on the writer thread after each
    /// durable commit.
    pub fn spawn(
        db: Database,
        policy: WriterPolicy,
        on_commit: impl FnMut(CommitReport) + Send + 'static,
    ) -> WriterThread {
        let Database(Reader(conn)) = db;
        let (tx, rx) = channel();
        let queued = Arc::new(AtomicU64::new(0));
        let commits = Arc::new(AtomicU64::new(0));
        let thread = std::thread::Builder::new()
            .name("oedolog-store".into())
            .spawn({
                let (queued, commits) = (queued.clone(), commits.clone());
                move || write_loop(conn, rx, policy, queued, commits, on_commit)
            })
            .expect("spawn the store writer thread");
        let writer = Writer { tx, queued, commits, thread: thread.thread().clone() };
        WriterThread { writer, thread: Some(thread) }
    }

    /// Queues a reading.
    pub fn reading(&self, reading: Reading) -> Result<(), StoreError> {
        self.queued.fetch_add(1, Ordering::Relaxed);
        self.tx.send(Op::Reading(reading)).map_err(|_| StoreError::WriterGone)
    }

    /// Queues the readings of one reply, in one message to the writer.
    pub fn readings(&self, set: ReadingSet) -> Result<(), StoreError> {
        self.queued.fetch_add(set.len() as u64, Ordering::Relaxed);
        self.tx.send(Op::Readings(set)).map_err(|_| StoreError::WriterGone)
    }

    /// Queues an event.
    pub fn event(&self, event: Event) -> Result<(), StoreError> {
        self.tx.send(Op::Event(event)).map_err(|_| StoreError::WriterGone)
    }

    /// Runs `job` on the writer's connection, inside a transaction committed at once; returns its result
    /// once the commit is durable. Private to the store: every write job is a typed function of its modules.
    pub(in crate::store) fn run<T: Send + 'static>(
        &self,
        job: impl FnOnce(&Connection) -> Result<T, StoreError> + Send + 'static,
    ) -> Result<T, StoreError> {
        let (reply_tx, reply_rx) = std::sync::mpsc::sync_channel(1);
        let op = Op::Job(Box::new(move |conn| {
            let result = job(conn);
            let keep = result.is_ok();
            let reply: Reply = Box::new(move |commit_error| {
                let outcome = match (result, commit_error) {
                    (Ok(value), None) => Ok(value),
                    (Ok(_), Some(why)) => Err(StoreError::CommitFailed(why)),
                    (Err(error), _) => Err(error),
                };
                let _ = reply_tx.send(outcome);
            });
            (keep, reply)
        }));
        self.tx.send(op).map_err(|_| StoreError::WriterGone)?;
        self.thread.unpark();
        reply_rx.recv().map_err(|_| StoreError::WriterGone)?
    }

    /// Waits until everything queued before this call is committed.
    pub fn sync(&self) -> Result<(), StoreError> {
        self.run(|_| Ok(()))
    }

    /// Readings queued but not yet committed (for `/metrics` and the soak).
    pub fn backlog(&self) -> u64 {
        self.queued.load(Ordering::Relaxed)
    }

    /// Durable commits since the writer started. It moves on only after a commit is durable, so a
    /// reader that reads it and then the database sees at least everything up to that commit: a cached
    /// answer stamped with it is stale exactly when it has moved on.
    pub fn commits(&self) -> u64 {
        self.commits.load(Ordering::Acquire)
    }
}

impl WriterThread {
    /// A sender for the writer.
    pub fn writer(&self) -> Writer {
        self.writer.clone()
    }

    /// Commits what is queued and stops the thread.
    pub fn close(mut self) {
        let _ = self.writer.tx.send(Op::Close);
        self.writer.thread.unpark();
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
    }
}

impl Drop for WriterThread {
    fn drop(&mut self) {
        let _ = self.writer.tx.send(Op::Close);
        self.writer.thread.unpark();
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
    }
}

struct Batch {
    readings: Vec<Reading>,
    events: Vec<Event>,
    jobs: Vec<Job>,
}

fn write_loop(
    mut conn: Connection,
    rx: Receiver<Op>,
    policy: WriterPolicy,
    queued: Arc<AtomicU64>,
    commits: Arc<AtomicU64>,
    mut on_commit: impl FnMut(CommitReport),
) {
    let mut batch = Batch { readings: Vec::new(), events: Vec::new(), jobs: Vec::new() };
    let (mut batches, mut total) = (0u64, 0u64);
    let mut last_checkpoint = Instant::now();
    let mut closing = false;
    while !closing {
        // Wait for the first op of a batch; then gather until the flush deadline or the size cap.
        let first = match rx.recv_timeout(policy.checkpoint.min(Duration::from_secs(60))) {
            Ok(op) => op,
            Err(RecvTimeoutError::Timeout) => {
                checkpoint(&conn, &mut last_checkpoint, policy.checkpoint);
                continue;
            }
            Err(RecvTimeoutError::Disconnected) => break,
        };
        let deadline = Instant::now() + policy.flush;
        let mut urgent = false;
        let mut next = Some(first);
        loop {
            match next.take() {
                Some(Op::Reading(r)) => batch.readings.push(r),
                Some(Op::Readings(set)) => batch.readings.extend(set.iter().copied()),
                Some(Op::Event(e)) => batch.events.push(e),
                Some(Op::Job(j)) => {
                    batch.jobs.push(j);
                    urgent = true;
                }
                Some(Op::Close) => closing = true,
                None => {}
            }
            if closing || urgent || batch.readings.len() >= policy.max_batch {
                break;
            }
            // Take what is queued; when nothing is, sleep to the flush deadline rather than block on the
            // channel: a blocked receiver is woken by every reading (a context switch each, most of the
            // writer's CPU under load), a parked thread only by `run` and `close`, which unpark it.
            match rx.try_recv() {
                Ok(op) => next = Some(op),
                Err(TryRecvError::Empty) => {
                    let now = Instant::now();
                    if now >= deadline {
                        break;
                    }
                    std::thread::park_timeout(deadline - now);
                }
                Err(TryRecvError::Disconnected) => {
                    closing = true;
                    break;
                }
            }
        }
        let count = batch.readings.len() as u64;
        match commit(&mut conn, &mut batch, &commits) {
            Ok((readings, events)) => {
                batches += 1;
                total += readings;
                queued.fetch_sub(count, Ordering::Relaxed);
                let last = batch.readings.last().map(|r| (r.frame_key, r.channel.code(), r.at_us));
                on_commit(CommitReport { batch: batches, readings, events, total_readings: total, last });
            }
            Err(error) => {
                // Keep the batch and try again at the next round; log once per failure.
                tracing::error!("store commit failed, will retry: {error}");
                std::thread::sleep(Duration::from_millis(200));
                continue;
            }
        }
        batch.readings.clear();
        batch.events.clear();
        checkpoint(&conn, &mut last_checkpoint, policy.checkpoint);
    }
}

fn checkpoint(conn: &Connection, last: &mut Instant, every: Duration) {
    if last.elapsed() >= every {
        if let Err(error) = conn.query_row("PRAGMA wal_checkpoint(TRUNCATE)", [], |_| Ok(())) {
            tracing::warn!("WAL checkpoint failed: {error}");
        }
        *last = Instant::now();
    }
}

fn commit(conn: &mut Connection, batch: &mut Batch, commits: &AtomicU64) -> Result<(u64, u64), rusqlite::Error> {
    let mut replies: Vec<Reply> = Vec::new();
    let outcome = commit_inner(conn, batch, &mut replies);
    if outcome.is_ok() {
        // Before the replies: whoever hears "done" and then reads the counter sees this commit counted.
        commits.fetch_add(1, Ordering::AcqRel);
    }
    let why = outcome.as_ref().err().map(|e| e.to_string());
    for reply in replies {
        reply(why.clone());
    }
    outcome
}

fn commit_inner(
    conn: &mut Connection,
    batch: &mut Batch,
    replies: &mut Vec<Reply>,
) -> Result<(u64, u64), rusqlite::Error> {
    let tx = conn.transaction()?;
    let mut readings = 0;
    {
        let mut insert = tx.prepare_cached(
            "INSERT OR IGNORE INTO readings (frame_key, channel, at_us, raw, value) VALUES (?1, ?2, ?3, ?4, ?5)",
        )?;
        // In key order, not arrival order: consecutive inserts then land in the same leaf of the readings
        // index (its key is frame, channel, time), which keeps the pages a descent touches hot. The batch
        // itself keeps arrival order (`CommitReport.last`).
        let mut in_key_order: Vec<&Reading> = batch.readings.iter().collect();
        in_key_order.sort_unstable_by_key(|r| (r.frame_key, r.channel.code(), r.at_us));
        for r in in_key_order {
            readings += insert.execute(params![r.frame_key, r.channel.code(), r.at_us, r.raw, r.value])? as u64;
        }
    }
    for e in &batch.events {
        journal::insert(&tx, e)?;
    }
    let mut tx = tx;
    for job in batch.jobs.drain(..) {
        // Each job in its own savepoint: a job that fails changes nothing, and the readings still commit.
        let savepoint = tx.savepoint()?;
        let (keep, reply) = job(&savepoint);
        replies.push(reply);
        if keep {
            savepoint.commit()?;
        }
    }
    tx.commit()?;
    Ok((readings, batch.events.len() as u64))
}

#[cfg(test)]
mod tests;
