//! Answers that cost a database scan or a serialisation, kept while what they were built from is
//! unchanged, so fifty people watching the same frames cost about what one does.
//!
//! A [`Memo`] holds one value per key with the *stamp* it was built for. The stamp names the inputs:
//! for a finished increment its onset and end (it never changes again), for a running one the store
//! writer's commit count as read *before* the database was read (a later commit makes it stale). A
//! caller that finds a stale value while another request is already rebuilding it takes the stale value
//! rather than queueing behind the rebuild (at most one commit behind); a caller that finds nothing, or a
//! stale value nobody is rebuilding, rebuilds. The memo is bounded: past its capacity the least recently
//! used entries go.

use std::collections::HashMap;
use std::hash::Hash;
use std::sync::Arc;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use axum::body::Bytes;

use super::ApiError;
use super::queries::{self, IncrementView, Poll, TestRow};
use crate::store::Reader;
use oedolog_core::analysis::{AnalysisError, IncrementReduction};

/// What a lookup found.
pub(crate) enum Found<V> {
    /// Built for this stamp.
    Fresh(V),
    /// Built for an older stamp; another caller is rebuilding it: use this meanwhile.
    Stale(V),
    /// The caller must build it (and then [`Memo::put`] or [`Memo::abandon`]); the old value, if any,
    /// may help an incremental rebuild.
    Build(Option<V>),
}

struct Slot<S, V> {
    stamp: S,
    value: V,
    rebuilding: bool,
    used: u64,
}

struct Inner<K, S, V> {
    slots: HashMap<K, Slot<S, V>>,
    tick: u64,
}

/// A bounded, stamped memo (see the module docs).
pub(crate) struct Memo<K, S, V> {
    inner: Mutex<Inner<K, S, V>>,
    capacity: usize,
}

impl<K: Eq + Hash + Clone, S: PartialEq + Clone, V: Clone> Memo<K, S, V> {
    /// A memo of at most `capacity` entries.
    pub(crate) fn new(capacity: usize) -> Self {
        Memo { inner: Mutex::new(Inner { slots: HashMap::new(), tick: 0 }), capacity: capacity.max(1) }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Inner<K, S, V>> {
        // A panic while holding the lock leaves only a cache behind: keep using it.
        self.inner.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
    }

    /// Looks `key` up for `stamp`; on [`Found::Build`] of an existing entry it is marked as rebuilding.
    #[cfg(test)]
    pub(crate) fn get(&self, key: &K, stamp: &S) -> Found<V> {
        self.lookup(key, stamp, true)
    }

    fn lookup(&self, key: &K, stamp: &S, allow_stale: bool) -> Found<V> {
        let mut inner = self.lock();
        inner.tick += 1;
        let tick = inner.tick;
        match inner.slots.get_mut(key) {
            Some(slot) if slot.stamp == *stamp => {
                slot.used = tick;
                Found::Fresh(slot.value.clone())
            }
            Some(slot) if slot.rebuilding && allow_stale => {
                slot.used = tick;
                Found::Stale(slot.value.clone())
            }
            Some(slot) => {
                slot.rebuilding = true;
                Found::Build(Some(slot.value.clone()))
            }
            None => Found::Build(None),
        }
    }

    /// Stores `value` built for `stamp`.
    pub(crate) fn put(&self, key: K, stamp: S, value: V) {
        let mut inner = self.lock();
        inner.tick += 1;
        let used = inner.tick;
        inner.slots.insert(key, Slot { stamp, value, rebuilding: false, used });
        if inner.slots.len() > self.capacity {
            // Evict the least recently used quarter at once, so eviction is rare.
            let mut ages: Vec<u64> = inner.slots.values().map(|s| s.used).collect();
            ages.sort_unstable();
            let cut = ages[(ages.len() / 4).max(1) - 1];
            inner.slots.retain(|_, s| s.used > cut);
        }
    }

    /// A build failed: let the next caller try again.
    pub(crate) fn abandon(&self, key: &K) {
        if let Some(slot) = self.lock().slots.get_mut(key) {
            slot.rebuilding = false;
        }
    }

    /// Forgets everything (tests compare a warm answer with a cold one).
    #[cfg(test)]
    pub(crate) fn clear_for_tests(&self) {
        self.lock().slots.clear();
    }

    /// Entries held.
    #[cfg(test)]
    pub(crate) fn len(&self) -> usize {
        self.lock().slots.len()
    }

    /// `get`, then `build` on a miss, then `put`: the value for `stamp` (or a stale one being rebuilt).
    pub(crate) fn get_or_build<E>(
        &self,
        key: &K,
        stamp: &S,
        build: impl FnOnce(Option<V>) -> Result<V, E>,
    ) -> Result<V, E> {
        self.fetch(key, stamp, true, build)
    }

    /// As [`Memo::get_or_build`], but never a stale value: for inputs of other cached answers, which are
    /// stored under the newer stamp.
    pub(crate) fn get_or_build_fresh<E>(
        &self,
        key: &K,
        stamp: &S,
        build: impl FnOnce(Option<V>) -> Result<V, E>,
    ) -> Result<V, E> {
        self.fetch(key, stamp, false, build)
    }

    fn fetch<E>(
        &self,
        key: &K,
        stamp: &S,
        allow_stale: bool,
        build: impl FnOnce(Option<V>) -> Result<V, E>,
    ) -> Result<V, E> {
        match self.lookup(key, stamp, allow_stale) {
            Found::Fresh(v) | Found::Stale(v) => Ok(v),
            Found::Build(old) => match build(old) {
                Ok(v) => {
                    self.put(key.clone(), stamp.clone(), v.clone());
                    Ok(v)
                }
                Err(e) => {
                    self.abandon(key);
                    Err(e)
                }
            },
        }
    }
}

/// One value that is rebuilt at most once per `ttl` (the frames overview: built from memory, but served
/// to every dashboard every two seconds), and dropped at once when an operator acts.
pub(crate) struct Snapshot<V> {
    inner: Mutex<Option<(Instant, V)>>,
    ttl: Duration,
}

impl<V: Clone> Snapshot<V> {
    /// A snapshot that lives `ttl`.
    pub(crate) fn new(ttl: Duration) -> Self {
        Snapshot { inner: Mutex::new(None), ttl }
    }

    /// The held value if younger than the ttl, else `build()`'s (held from now).
    pub(crate) fn get_or_build(&self, build: impl FnOnce() -> V) -> V {
        let mut inner = self.inner.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
        if let Some((at, v)) = inner.as_ref()
            && at.elapsed() < self.ttl
        {
            return v.clone();
        }
        // Built under the lock: concurrent callers wait for one build instead of each doing it.
        let v = build();
        *inner = Some((Instant::now(), v.clone()));
        v
    }

    /// Drops the held value.
    pub(crate) fn clear(&self) {
        *self.inner.lock().unwrap_or_else(|poisoned| poisoned.into_inner()) = None;
    }
}

/// What a stored increment's answers are built from: its window, and while it runs the writer's commit
/// count (a finished increment never changes again, so its count is left out).
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct IncrementStamp {
    onset_us: Option<i64>,
    ended_us: Option<i64>,
    commits: u64,
}

impl IncrementStamp {
    /// The stamp of `inc` given the commit count read before the database was.
    pub(crate) fn of(inc: &IncrementView, commits: u64) -> Self {
        IncrementStamp {
            onset_us: inc.onset_us,
            ended_us: inc.ended_us,
            commits: if inc.ended_us.is_some() { 0 } else { commits },
        }
    }
}

/// (test id, increment number).
type IncrementKey = (i64, i64);

/// The onset the polls were read from, and the polls.
type PollRun = (Option<i64>, Arc<Vec<Poll>>);

/// The daemon's answer caches (one set per HTTP surface).
pub struct Caches {
    /// The serialised `GET /api/frames` (or why it could not be).
    pub(crate) frames: Snapshot<Result<Bytes, String>>,
    /// An increment's polls from its onset, extended as new readings commit.
    polls: Memo<IncrementKey, IncrementStamp, PollRun>,
    /// Serialised thinned readings: (test, increment, max points).
    pub(crate) readings: Memo<(i64, i64, usize), IncrementStamp, Bytes>,
    /// Stored increments' time curves reduced.
    pub(crate) reductions: Memo<IncrementKey, IncrementStamp, Reduced>,
}

/// A stored increment's time curve reduced, or why the analysis refused it.
pub(crate) type Reduced = Arc<Result<IncrementReduction, AnalysisError>>;

/// How long the frames overview is served before it is built again (a dashboard refreshes every 2 s;
/// an operator action drops it at once).
pub(crate) const FRAMES_TTL: Duration = Duration::from_millis(250);

impl Default for Caches {
    fn default() -> Self {
        Caches {
            frames: Snapshot::new(FRAMES_TTL),
            polls: Memo::new(40),
            readings: Memo::new(512),
            reductions: Memo::new(512),
        }
    }
}

impl Caches {
    /// Forgets every held answer (tests compare a warm answer with a cold one).
    #[cfg(test)]
    pub(crate) fn clear_for_tests(&self) {
        self.frames.clear();
        self.polls.clear_for_tests();
        self.readings.clear_for_tests();
        self.reductions.clear_for_tests();
    }

    /// The polls of increment `inc` of `test` from its onset to its end (or `now_us`), as stored when
    /// `stamp` was read: a running increment's list is extended with what committed since the last call
    /// instead of being read again whole.
    pub(crate) fn increment_polls(
        &self,
        conn: &Reader,
        test: &TestRow,
        inc: &IncrementView,
        stamp: &IncrementStamp,
        now_us: i64,
    ) -> Result<Arc<Vec<Poll>>, ApiError> {
        let Some(onset) = inc.onset_us else { return Ok(Arc::new(Vec::new())) };
        let end = inc.ended_us.unwrap_or(now_us);
        let (_, polls) = self.polls.get_or_build_fresh(&(test.id, inc.seq), stamp, |old| {
            let mut polls = match old {
                // Same onset: keep what is known, drop the last poll (a later commit may have added the
                // other channel of that instant) and read on from its instant.
                Some((Some(o), polls)) if o == onset && !polls.is_empty() => {
                    let mut polls = Vec::clone(&polls);
                    polls.pop();
                    polls
                }
                _ => Vec::new(),
            };
            let from = polls.last().map_or(onset, |p| p.0 + 1);
            polls.extend(queries::polls(conn, test.frame_key, from, end)?);
            Ok::<_, ApiError>((Some(onset), Arc::new(polls)))
        })?;
        Ok(polls)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_fresh_stamp_hits_and_a_new_stamp_rebuilds_once_while_others_take_the_stale_value() {
        let memo: Memo<&str, u64, u32> = Memo::new(8);
        assert!(matches!(memo.get(&"a", &1), Found::Build(None)));
        memo.put("a", 1, 10);
        assert!(matches!(memo.get(&"a", &1), Found::Fresh(10)));
        // The stamp moved on: the first caller rebuilds (with the old value to start from) ...
        assert!(matches!(memo.get(&"a", &2), Found::Build(Some(10))));
        // ... and everyone else meanwhile gets the stale value, not a second rebuild.
        assert!(matches!(memo.get(&"a", &2), Found::Stale(10)));
        // An input of other answers is never taken stale: it is built again (from the old value).
        assert_eq!(memo.get_or_build_fresh(&"a", &2, |old| Ok::<_, ()>(old.unwrap() + 5)), Ok(15));
        memo.put("a", 2, 20);
        assert!(matches!(memo.get(&"a", &2), Found::Fresh(20)));
    }

    #[test]
    fn a_failed_build_lets_the_next_caller_try_again() {
        let memo: Memo<&str, u64, u32> = Memo::new(8);
        memo.put("a", 1, 10);
        let failed: Result<u32, &str> = memo.get_or_build(&"a", &2, |_| Err("disk"));
        assert_eq!(failed, Err("disk"));
        assert!(matches!(memo.get(&"a", &2), Found::Build(Some(10))));
        memo.abandon(&"a");
        assert_eq!(memo.get_or_build(&"a", &2, |old| Ok::<_, ()>(old.unwrap_or(0) + 1)), Ok(11));
        assert!(matches!(memo.get(&"a", &2), Found::Fresh(11)));
    }

    #[test]
    fn the_memo_stays_within_its_capacity_and_keeps_the_recently_used() {
        let memo: Memo<u32, u32, u32> = Memo::new(8);
        for k in 0..8 {
            memo.put(k, 0, k);
        }
        // Key 0 is used again, so it is the newest when eviction comes.
        assert!(matches!(memo.get(&0, &0), Found::Fresh(0)));
        memo.put(100, 0, 100);
        assert!(memo.len() <= 8, "held {}", memo.len());
        assert!(matches!(memo.get(&0, &0), Found::Fresh(0)));
        assert!(matches!(memo.get(&100, &0), Found::Fresh(100)));
        assert!(matches!(memo.get(&1, &0), Found::Build(None)), "the oldest entry went");
    }

    #[test]
    fn a_snapshot_is_rebuilt_after_its_ttl_or_when_cleared() {
        let snap = Snapshot::new(Duration::from_secs(3600));
        let mut builds = 0;
        let mut get = |snap: &Snapshot<u32>| {
            snap.get_or_build(|| {
                builds += 1;
                builds
            })
        };
        assert_eq!(get(&snap), 1);
        assert_eq!(get(&snap), 1, "within the ttl the held value is served");
        snap.clear();
        assert_eq!(get(&snap), 2);
        let short = Snapshot::new(Duration::ZERO);
        assert_eq!(short.get_or_build(|| 7), 7);
        assert_eq!(short.get_or_build(|| 8), 8, "a zero ttl rebuilds every time");
    }
}
