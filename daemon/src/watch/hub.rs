//! The hub: feeds every frame's [`FrameWatch`] with the readings acquisition stored, turns its notes
//! into journal events and lab-book changes, and takes operator actions. Runs on its own thread (the
//! store's writer answers it synchronously); the screens read its status.

use std::collections::HashMap;
use std::sync::mpsc::{Receiver, RecvTimeoutError};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use crate::clock::Clock;
use crate::lab::{self, Lab};
use crate::store::{ChannelKind, Event, EventKind, Reader, Reading, StoreError, Writer, read};
use oedolog_core::watch::{
    Finding, FrameWatch, OnsetSource, Phase, SpecimenSize, WatchError, WatchParams, WatchStatus,
};

/// Why an operator action through the hub failed.
#[derive(Debug, thiserror::Error)]
pub enum HubError {
    /// No frame with that index.
    #[error("no such frame")]
    NoFrame,
    /// The watch refused it.
    #[error("{0}")]
    Watch(#[from] WatchError),
    /// The store failed.
    #[error("{0}")]
    Store(#[from] StoreError),
}

struct State {
    watches: Vec<FrameWatch>,
    /// Per frame key: (index, the poll being gathered: at_us, displacement, load).
    pending: HashMap<i64, (usize, i64, Option<f64>, Option<f64>)>,
}

/// How long the watch lets readings gather after taking a batch of them.
const GATHER: Duration = Duration::from_millis(20);

/// Shared handle to every frame's watch.
#[derive(Clone)]
pub struct Hub {
    state: Arc<Mutex<State>>,
    lab: Lab,
    writer: Writer,
    clock: Arc<dyn Clock>,
    areas_mm2: Arc<Vec<f64>>,
}

impl Hub {
    /// A hub for the configured frames (`areas_mm2[i]` = ring area of frame i), resuming every running
    /// test from the lab book and the readings since its increment's onset.
    pub fn resume(
        conn: &Reader,
        lab: Lab,
        writer: Writer,
        clock: Arc<dyn Clock>,
        areas_mm2: Vec<f64>,
        params: WatchParams,
    ) -> Result<Hub, StoreError> {
        let mut watches = Vec::new();
        let mut replayed = Vec::new();
        for (i, test) in lab.snapshot().into_iter().enumerate() {
            let mut watch = FrameWatch::new(params.clone());
            if let Some(t) = test {
                let specimen = SpecimenSize { area_mm2: areas_mm2[i], height_mm: t.height_mm };
                // The zero reading: the first displacement from the start (none if it cannot be read).
                let zero = read::displacement_from(conn, lab.key(i), t.started_us).ok().flatten();
                // From just before t0; for an increment still armed, from the onset look-back before
                // it was armed (its load may have gone on meanwhile, perhaps while the daemon was down).
                let since = match (t.onset_us, t.armed_us) {
                    (Some(onset), _) => Some(onset - 120_000_000),
                    (None, Some(armed)) => Some(armed - params.onset_lookback_us - 600_000_000),
                    (None, None) => None,
                };
                let readings = match since {
                    Some(since) => read::polls(conn, lab.key(i), since, i64::MAX)?,
                    None => Vec::new(),
                };
                if t.increment == 0 {
                    watch.start_test(specimen, t.seating_kpa);
                } else {
                    let notes = watch.resume(
                        specimen,
                        zero,
                        t.increment,
                        t.stress_kpa.unwrap_or(0.0),
                        t.from_kpa.unwrap_or(t.seating_kpa),
                        t.armed_us,
                        t.onset_us,
                        t.ready_us,
                        &readings,
                    );
                    replayed.push((i, notes));
                }
            }
            watches.push(watch);
        }
        let hub = Hub {
            state: Arc::new(Mutex::new(State { watches, pending: HashMap::new() })),
            lab,
            writer,
            clock,
            areas_mm2: Arc::new(areas_mm2),
        };
        // What the replay found that the store did not know (an onset or end of primary reached in the
        // readings committed just before a stop) is recorded now, as it would have been live.
        for (i, notes) in replayed {
            hub.act(i, notes);
        }
        Ok(hub)
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, State> {
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Feeds readings from `rx` until every sender is gone (run it on its own thread).
    pub fn run(self, rx: Receiver<Reading>) {
        let keys: HashMap<i64, usize> = (0..self.areas_mm2.len()).map(|i| (self.lab.key(i), i)).collect();
        loop {
            match rx.recv_timeout(Duration::from_millis(250)) {
                Ok(reading) => {
                    self.take(&keys, reading);
                    // Take what else is queued, then let readings gather for a moment: a receiver blocked on
                    // the channel is woken by every reading (a context switch each, most of the watch's CPU
                    // under load); the watch's decisions are about seconds, not milliseconds.
                    while let Ok(reading) = rx.try_recv() {
                        self.take(&keys, reading);
                    }
                    std::thread::sleep(GATHER);
                }
                Err(RecvTimeoutError::Timeout) => {
                    // A quiet bus: hand over polls that are complete by now.
                    let ready: Vec<_> = self.lock().pending.drain().map(|(_, v)| v).collect();
                    for (i, at, d, l) in ready {
                        self.feed(i, at, d, l);
                    }
                }
                Err(RecvTimeoutError::Disconnected) => return,
            }
        }
    }

    /// Pairs a reading with the others of its poll; feeds the previous poll of its frame once it is
    /// complete.
    fn take(&self, keys: &HashMap<i64, usize>, reading: Reading) {
        let Some(&index) = keys.get(&reading.frame_key) else { return };
        let flushed = {
            let mut state = self.lock();
            let entry = state.pending.entry(reading.frame_key).or_insert((index, reading.at_us, None, None));
            let flushed = (entry.1 != reading.at_us).then_some(*entry);
            if flushed.is_some() {
                *entry = (index, reading.at_us, None, None);
            }
            match reading.channel {
                ChannelKind::Displacement => entry.2 = Some(reading.value),
                ChannelKind::Load => entry.3 = Some(reading.value),
                ChannelKind::Temperature => {}
            }
            flushed
        };
        if let Some((i, at, d, l)) = flushed {
            self.feed(i, at, d, l);
        }
    }

    fn feed(&self, index: usize, at_us: i64, d: Option<f64>, l: Option<f64>) {
        let notes = self.lock().watches[index].sample(at_us, d, l);
        self.act(index, notes);
    }

    fn act(&self, index: usize, notes: Vec<Finding>) {
        let key = self.lab.key(index);
        for note in notes {
            let result = match note {
                Finding::Onset { seq, onset_us, source } => {
                    let how = if source == OnsetSource::LoadStep { "the load-cell step" } else { "the first sharp deformation" };
                    self.lab.set_onset(index, onset_us, source, format!("load step {seq}: load on at t0 found from {how}"))
                }
                Finding::Ready { seq, at_us, how } => {
                    self.lab.set_ready(index, at_us, format!("load step {seq}: end of primary — ready for the next load ({how})"))
                }
                Finding::LoadOff { measured_kn, expected_kn } => self.event(
                    key,
                    EventKind::LoadOff,
                    format!("load {measured_kn:.4} kN differs from the expected {expected_kn:.4} kN by more than ±0.5 %"),
                ),
                Finding::LoadBack => self.event(key, EventKind::LoadBack, "load back within ±0.5 % of the expected force".into()),
                Finding::ReseatProposed { at_us, jump_mm } => self.event(
                    key,
                    EventKind::ReseatProposed,
                    format!("gauge jumped {jump_mm:+.3} mm at {}: a re-seat? Confirm to stitch the curve; nothing is reduced across it until then", crate::clock::rfc3339(at_us)),
                ),
                Finding::UnarmedLoadChange { from_kn, to_kn, .. } => self.event(
                    key,
                    EventKind::LoadChangeUnarmed,
                    format!("load changed from {from_kn:.4} to {to_kn:.4} kN with no increment armed"),
                ),
            };
            if let Err(error) = result {
                tracing::error!("watch note not stored: {error}");
            }
        }
    }

    fn event(&self, key: i64, kind: EventKind, message: String) -> Result<(), StoreError> {
        tracing::info!(kind = kind.name(), "{message}");
        self.writer.event(Event {
            at_us: self.clock.now_us(),
            frame_key: Some(key),
            kind,
            message,
            actor: None,
            data: None,
        })
    }

    /// Starts a test on frame `index`.
    pub fn start_test(
        &self,
        index: usize,
        specimen: lab::SpecimenRecord,
        seating_kpa: f64,
        actor: Option<String>,
    ) -> Result<lab::RunningTest, HubError> {
        let area = *self.areas_mm2.get(index).ok_or(HubError::NoFrame)?;
        let height_mm = specimen.height_mm;
        let test = self.lab.start_test(index, specimen, seating_kpa, self.clock.now_us(), actor)?;
        self.lock().watches[index].start_test(SpecimenSize { area_mm2: area, height_mm }, seating_kpa);
        Ok(test)
    }

    /// Finishes the test on frame `index`.
    pub fn finish_test(&self, index: usize, why: &str) -> Result<(), HubError> {
        self.areas_mm2.get(index).ok_or(HubError::NoFrame)?;
        self.lab.finish_test(index, self.clock.now_us(), why)?;
        self.lock().watches[index].finish_test();
        Ok(())
    }

    /// Arms the next increment of frame `index` at `stress_kpa`.
    pub fn arm(&self, index: usize, stress_kpa: f64, actor: Option<String>) -> Result<(), HubError> {
        let now = self.clock.now_us();
        let notes = {
            let mut state = self.lock();
            let watch = state.watches.get_mut(index).ok_or(HubError::NoFrame)?;
            watch.arm(stress_kpa, now)?
        };
        self.lab.arm(index, stress_kpa, now, actor)?;
        self.act(index, notes);
        Ok(())
    }

    /// Withdraws the armed increment of frame `index` before its load went on; returns its number.
    pub fn withdraw(&self, index: usize, actor: Option<String>) -> Result<i64, HubError> {
        let now = self.clock.now_us();
        let mut state = self.lock();
        let watch = state.watches.get_mut(index).ok_or(HubError::NoFrame)?;
        watch.may_withdraw()?;
        // The store first: if it refuses (the onset was just found), the watch stays armed.
        let seq = self.lab.withdraw(index, now, actor)?;
        watch.withdraw()?;
        Ok(seq)
    }

    /// Marks increment `seq` of frame `index`'s test void (with `reason`) or counts it again.
    pub fn set_void(
        &self,
        index: usize,
        seq: i64,
        reason: Option<String>,
        actor: Option<String>,
    ) -> Result<(), HubError> {
        self.areas_mm2.get(index).ok_or(HubError::NoFrame)?;
        Ok(self.lab.set_void(index, seq, reason, self.clock.now_us(), actor)?)
    }

    /// Answers a proposed gauge re-seat of frame `index`.
    pub fn resolve_reseat(&self, index: usize, accept: bool, actor: Option<String>) -> Result<(), HubError> {
        let notes = {
            let mut state = self.lock();
            state.watches.get_mut(index).ok_or(HubError::NoFrame)?.resolve_reseat(accept)?
        };
        let what =
            if accept { "confirmed: readings stitched across the jump" } else { "rejected: the jump is taken as real" };
        self.writer.event(Event {
            at_us: self.clock.now_us(),
            frame_key: Some(self.lab.key(index)),
            kind: EventKind::ReseatResolved,
            message: format!("gauge re-seat {what}"),
            actor,
            data: None,
        })?;
        self.act(index, notes);
        Ok(())
    }

    /// The watch's latest reduction of frame `index`'s running increment: (its number, the reduction).
    /// It includes confirmed re-seat stitching, which a reduction of the stored readings would not.
    pub fn reduction(&self, index: usize) -> Option<(i64, oedolog_core::analysis::IncrementReduction)> {
        let state = self.lock();
        let watch = state.watches.get(index)?;
        Some((watch.status().seq?, watch.reduction()?.clone()))
    }

    /// Every frame's phase and status.
    pub fn status(&self) -> Vec<(Phase, WatchStatus)> {
        self.lock().watches.iter().map(|w| (w.phase(), w.status())).collect()
    }
}
