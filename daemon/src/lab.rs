//! The lab book: which test runs on which frame and its current increment, kept in memory for the
//! screens and persisted through the store's writer so a restart or power cut resumes every test.
//!
//! Until the live watcher decides states from the data, a test's state changes only by what is recorded
//! here (test started, increment recorded). No I/O beyond the store.

use std::sync::{Arc, RwLock};

use serde::Serialize;

use crate::store::lab_book::{self, CurrentIncrement, NewTest, Step};
use crate::store::{ChannelKind, Event, EventKind, Reader, StoreError, TestState, Writer, latest_reading};
use oedolog_core::watch::OnsetSource;

/// SpecimenRecord data of a new test.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SpecimenRecord {
    /// SpecimenRecord / sample reference.
    pub specimen: String,
    /// Soil description, borehole, depth.
    pub description: String,
    /// Initial height, mm.
    pub height_mm: f64,
    /// Ring diameter, mm.
    pub diameter_mm: f64,
    /// Dry mass, g.
    pub dry_mass_g: Option<f64>,
    /// Specific gravity of the solids.
    pub specific_gravity: Option<f64>,
}

/// A running test as the screens need it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunningTest {
    /// `tests.id`.
    pub test_id: i64,
    /// The specimen reference.
    pub specimen: String,
    /// One of `seating`, `armed`, `primary`, `ready`.
    pub state: TestState,
    /// Current increment number (0 under seating only).
    pub increment: i64,
    /// Its target stress, kPa.
    pub stress_kpa: Option<f64>,
    /// Its onset, UTC µs (None while armed).
    pub onset_us: Option<i64>,
    /// When it was armed, UTC µs.
    pub armed_us: Option<i64>,
    /// When end of primary was established, UTC µs.
    pub ready_us: Option<i64>,
    /// Stress before the current increment, kPa.
    pub from_kpa: Option<f64>,
    /// When the test started, UTC µs.
    pub started_us: i64,
    /// Initial specimen height, mm.
    pub height_mm: f64,
    /// Seating stress, kPa.
    pub seating_kpa: f64,
    /// The planned loading is complete: no next load is expected (set by the demo's technician when its
    /// schedule ends; not stored, so a restart forgets it).
    pub plan_finished: bool,
}

/// Running tests per configured frame (index = config order).
#[derive(Clone)]
pub struct Lab {
    running: Arc<RwLock<Vec<Option<RunningTest>>>>,
    keys: Arc<Vec<i64>>,
    writer: Writer,
}

impl RunningTest {
    /// Takes `increment` (as stored) as the current one; `None`: none yet, under seating.
    fn set_current(&mut self, increment: Option<CurrentIncrement>) {
        self.increment = increment.map_or(0, |i| i.seq);
        self.stress_kpa = increment.map(|i| i.stress_kpa);
        self.onset_us = increment.and_then(|i| i.onset_us);
        self.armed_us = increment.and_then(|i| i.armed_us);
        self.ready_us = increment.and_then(|i| i.ready_us);
        self.from_kpa = increment.and_then(|i| i.from_kpa);
    }
}

fn load_running(conn: &Reader, frame_key: i64) -> Result<Option<RunningTest>, StoreError> {
    let Some(test) = lab_book::open_test(conn, frame_key)? else { return Ok(None) };
    let mut running = RunningTest {
        test_id: test.test_id,
        specimen: test.specimen,
        state: test.state,
        increment: 0,
        stress_kpa: None,
        onset_us: None,
        armed_us: None,
        ready_us: None,
        from_kpa: None,
        started_us: test.started_us,
        height_mm: test.height_mm,
        seating_kpa: test.seating_kpa,
        plan_finished: false,
    };
    running.set_current(test.increment);
    Ok(Some(running))
}

impl Lab {
    /// Loads the running tests of frames `keys` (config order) and journals, for each, that it resumed
    /// and how long the gap since its last reading was.
    pub fn resume(conn: &Reader, keys: Vec<i64>, writer: Writer, now_us: i64) -> Result<Lab, StoreError> {
        let mut running = Vec::new();
        for &key in &keys {
            let test = load_running(conn, key)?;
            if let Some(t) = &test {
                let last = latest_reading(conn, key, ChannelKind::Displacement)?;
                let gap = last.map_or("no readings yet".to_string(), |(at, _)| {
                    format!("{:.1} s since the last reading", (now_us - at) as f64 / 1e6)
                });
                writer.event(Event {
                    at_us: now_us,
                    frame_key: Some(key),
                    kind: EventKind::TestResumed,
                    message: format!(
                        "test {} ({}) resumed in state {}, load step {}: {gap}",
                        t.test_id, t.specimen, t.state, t.increment
                    ),
                    actor: None,
                    data: Some(serde_json::json!({ "gap_us": last.map(|(at, _)| now_us - at) })),
                })?;
            }
            running.push(test);
        }
        Ok(Lab { running: Arc::new(RwLock::new(running)), keys: Arc::new(keys), writer })
    }

    /// The running test of every frame.
    pub fn snapshot(&self) -> Vec<Option<RunningTest>> {
        self.running.read().unwrap_or_else(|e| e.into_inner()).clone()
    }

    /// Starts a test on frame `index` (which must have none running), under its seating stress.
    pub fn start_test(
        &self,
        index: usize,
        specimen: SpecimenRecord,
        seating_kpa: f64,
        now_us: i64,
        actor: Option<String>,
    ) -> Result<RunningTest, StoreError> {
        let key = self.keys[index];
        let test_id = lab_book::start_test(
            &self.writer,
            NewTest {
                frame_key: key,
                specimen: specimen.specimen.clone(),
                description: specimen.description,
                height_mm: specimen.height_mm,
                diameter_mm: specimen.diameter_mm,
                dry_mass_g: specimen.dry_mass_g,
                specific_gravity: specimen.specific_gravity,
                seating_kpa,
                started_us: now_us,
                actor,
            },
        )?;
        let test = RunningTest {
            test_id,
            specimen: specimen.specimen,
            state: TestState::Seating,
            increment: 0,
            stress_kpa: None,
            onset_us: None,
            armed_us: None,
            ready_us: None,
            from_kpa: None,
            started_us: now_us,
            height_mm: specimen.height_mm,
            seating_kpa,
            plan_finished: false,
        };
        self.running.write().unwrap_or_else(|e| e.into_inner())[index] = Some(test.clone());
        Ok(test)
    }

    /// Finishes the running test of frame `index`, if any.
    pub fn finish_test(&self, index: usize, now_us: i64, why: &str) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        lab_book::finish_test(
            &self.writer,
            test.test_id,
            key,
            now_us,
            format!("test {} finished: {why}", test.test_id),
        )?;
        self.running.write().unwrap_or_else(|e| e.into_inner())[index] = None;
        Ok(())
    }

    /// The operator entered the next stress on frame `index`: a new increment row, state `armed`.
    pub fn arm(&self, index: usize, stress_kpa: f64, now_us: i64, actor: Option<String>) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let seq = test.increment + 1;
        let from_kpa = test.stress_kpa.unwrap_or(test.seating_kpa);
        let message = format!("load step {seq}: {stress_kpa} kPa armed (from {from_kpa} kPa)");
        let step = Step { test_id: test.test_id, frame_key: key, seq };
        lab_book::arm_increment(&self.writer, step, stress_kpa, from_kpa, now_us, actor, message)?;
        self.update(index, |t| {
            t.increment = seq;
            t.from_kpa = Some(from_kpa);
            t.stress_kpa = Some(stress_kpa);
            t.armed_us = Some(now_us);
            t.onset_us = None;
            t.ready_us = None;
            t.state = TestState::Armed;
            t.plan_finished = false;
        });
        Ok(())
    }

    /// The operator withdrew the armed increment of frame `index`, which never began: its row gone, the
    /// test back on its previous increment (or seating), journalled with `actor`.
    pub fn withdraw(&self, index: usize, now_us: i64, actor: Option<String>) -> Result<i64, StoreError> {
        let Some(test) = self.snapshot()[index].clone() else {
            return Err(StoreError::Refused("no test runs on this frame".into()));
        };
        let key = self.keys[index];
        let seq = test.increment;
        let stress = test.stress_kpa.map_or("no stress".to_string(), |s| format!("{s} kPa"));
        let message = format!("load step {seq} ({stress}) withdrawn before its load went on");
        let step = Step { test_id: test.test_id, frame_key: key, seq };
        let (state, previous) = lab_book::withdraw_increment(&self.writer, step, now_us, actor, message)?;
        self.update(index, |t| {
            t.state = state;
            t.set_current(previous);
        });
        Ok(seq)
    }

    /// Marks increment `seq` of frame `index`'s running test void with `reason`, or counts it again
    /// (`reason` `None`), journalled with `actor`.
    pub fn set_void(
        &self,
        index: usize,
        seq: i64,
        reason: Option<String>,
        now_us: i64,
        actor: Option<String>,
    ) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else {
            return Err(StoreError::Refused("no test runs on this frame".into()));
        };
        let step = Step { test_id: test.test_id, frame_key: self.keys[index], seq };
        let message = match &reason {
            Some(why) => format!("load step {seq} marked void, left out of the reduction: {why}"),
            None => format!("load step {seq} counted again in the reduction"),
        };
        lab_book::set_increment_void(&self.writer, step, now_us, actor, reason, message)
    }

    /// The watch found the onset of the armed increment: t0 stored, the previous increment ended, state `primary`.
    pub fn set_onset(
        &self,
        index: usize,
        onset_us: i64,
        source: OnsetSource,
        message: String,
    ) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let step = Step { test_id: test.test_id, frame_key: key, seq: test.increment };
        lab_book::record_onset(&self.writer, step, onset_us, source, message)?;
        self.update(index, |t| {
            t.onset_us = Some(onset_us);
            t.state = TestState::Primary;
        });
        Ok(())
    }

    /// The watch established end of primary: state `ready`.
    pub fn set_ready(&self, index: usize, at_us: i64, message: String) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let step = Step { test_id: test.test_id, frame_key: key, seq: test.increment };
        lab_book::record_ready(&self.writer, step, at_us, message)?;
        self.update(index, |t| {
            t.ready_us = Some(at_us);
            t.state = TestState::Ready;
        });
        Ok(())
    }

    /// The store key of config frame `index`.
    pub fn key(&self, index: usize) -> i64 {
        self.keys[index]
    }

    /// Says that frame `index`'s planned loading is complete (the screens then say so instead of asking
    /// for a next load).
    pub fn mark_plan_finished(&self, index: usize) {
        self.update(index, |t| t.plan_finished = true);
    }

    fn update(&self, index: usize, f: impl FnOnce(&mut RunningTest)) {
        if let Some(t) = self.running.write().unwrap_or_else(|e| e.into_inner())[index].as_mut() {
            f(t);
        }
    }
}
