//! The lab book: which test runs on which frame and its current increment, kept in memory for the
//! screens and persisted through the store's writer so a restart or power cut resumes every test.
//!
//! Until the live watcher decides states from the data, a test's state changes only by what is recorded
//! here (test started, increment recorded). No I/O beyond the store.

use std::sync::{Arc, RwLock};

use rusqlite::{Connection, OptionalExtension, params};
use serde::Serialize;

use crate::store::{ChannelKind, Event, StoreError, Writer, latest_reading};

/// Specimen data of a new test.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Specimen {
    /// Specimen / sample reference.
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
    pub state: String,
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
}

/// Running tests per configured frame (index = config order).
#[derive(Clone)]
pub struct Lab {
    running: Arc<RwLock<Vec<Option<RunningTest>>>>,
    keys: Arc<Vec<i64>>,
    writer: Writer,
}

fn load_running(conn: &Connection, frame_key: i64) -> Result<Option<RunningTest>, StoreError> {
    let test = conn
        .query_row(
            "SELECT id, specimen, state, started_us, height_mm, coalesce(seating_kpa, 0) FROM tests
             WHERE frame_key = ?1 AND finished_us IS NULL",
            [frame_key],
            |r| {
                Ok((
                    r.get::<_, i64>(0)?,
                    r.get::<_, String>(1)?,
                    r.get::<_, String>(2)?,
                    r.get::<_, i64>(3)?,
                    r.get::<_, f64>(4)?,
                    r.get::<_, f64>(5)?,
                ))
            },
        )
        .optional()?;
    let Some((test_id, specimen, state, started_us, height_mm, seating_kpa)) = test else { return Ok(None) };
    type Row = (i64, f64, Option<i64>, Option<i64>, Option<i64>, Option<f64>);
    let increment: Option<Row> = conn
        .query_row(
            "SELECT seq, stress_kpa, onset_us, armed_us, ready_us, from_kpa FROM increments WHERE test_id = ?1 ORDER BY seq DESC LIMIT 1",
            [test_id],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?, r.get(5)?)),
        )
        .optional()?;
    Ok(Some(RunningTest {
        test_id,
        specimen,
        state,
        increment: increment.map_or(0, |i| i.0),
        stress_kpa: increment.map(|i| i.1),
        onset_us: increment.and_then(|i| i.2),
        armed_us: increment.and_then(|i| i.3),
        ready_us: increment.and_then(|i| i.4),
        from_kpa: increment.and_then(|i| i.5),
        started_us,
        height_mm,
        seating_kpa,
    }))
}

impl Lab {
    /// Loads the running tests of frames `keys` (config order) and journals, for each, that it resumed
    /// and how long the gap since its last reading was.
    pub fn resume(conn: &Connection, keys: Vec<i64>, writer: Writer, now_us: i64) -> Result<Lab, StoreError> {
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
                    kind: "test-resumed",
                    message: format!(
                        "test {} ({}) resumed in state {}, increment {}: {gap}",
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
        specimen: Specimen,
        seating_kpa: f64,
        now_us: i64,
        actor: Option<String>,
    ) -> Result<RunningTest, StoreError> {
        let key = self.keys[index];
        let s = specimen.clone();
        let who = actor.clone();
        let test_id = self.writer.run(move |conn| {
            conn.execute(
                "INSERT INTO tests (frame_key, specimen, description, height_mm, diameter_mm, dry_mass_g, specific_gravity, started_us, seating_kpa)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
                params![key, s.specimen, s.description, s.height_mm, s.diameter_mm, s.dry_mass_g, s.specific_gravity, now_us, seating_kpa],
            )?;
            let id = conn.last_insert_rowid();
            conn.execute(
                "INSERT INTO events (at_us, frame_key, kind, message, actor) VALUES (?1, ?2, 'test-started', ?3, ?4)",
                params![now_us, key, format!("test {id} started: specimen {}", s.specimen), who],
            )?;
            Ok(id)
        })?;
        let test = RunningTest {
            test_id,
            specimen: specimen.specimen,
            state: "seating".into(),
            increment: 0,
            stress_kpa: None,
            onset_us: None,
            armed_us: None,
            ready_us: None,
            from_kpa: None,
            started_us: now_us,
            height_mm: specimen.height_mm,
            seating_kpa,
        };
        self.running.write().unwrap_or_else(|e| e.into_inner())[index] = Some(test.clone());
        Ok(test)
    }

    /// Finishes the running test of frame `index`, if any.
    pub fn finish_test(&self, index: usize, now_us: i64, why: &str) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let why = why.to_string();
        self.writer.run(move |conn| {
            conn.execute(
                "UPDATE increments SET ended_us = ?2 WHERE test_id = ?1 AND ended_us IS NULL",
                params![test.test_id, now_us],
            )?;
            conn.execute(
                "UPDATE tests SET finished_us = ?2, state = 'finished' WHERE id = ?1",
                params![test.test_id, now_us],
            )?;
            conn.execute(
                "INSERT INTO events (at_us, frame_key, kind, message) VALUES (?1, ?2, 'test-finished', ?3)",
                params![now_us, key, format!("test {} finished: {why}", test.test_id)],
            )?;
            Ok(())
        })?;
        self.running.write().unwrap_or_else(|e| e.into_inner())[index] = None;
        Ok(())
    }

    /// The operator entered the next stress on frame `index`: a new increment row, state `armed`.
    pub fn arm(&self, index: usize, stress_kpa: f64, now_us: i64, actor: Option<String>) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let seq = test.increment + 1;
        let from_kpa = test.stress_kpa.unwrap_or(test.seating_kpa);
        self.writer.run(move |conn| {
            conn.execute(
                "INSERT INTO increments (test_id, seq, stress_kpa, armed_us, from_kpa) VALUES (?1, ?2, ?3, ?4, ?5)",
                params![test.test_id, seq, stress_kpa, now_us, from_kpa],
            )?;
            conn.execute("UPDATE tests SET state = 'armed' WHERE id = ?1", [test.test_id])?;
            conn.execute(
                "INSERT INTO events (at_us, frame_key, kind, message, actor) VALUES (?1, ?2, 'armed', ?3, ?4)",
                params![now_us, key, format!("increment {seq}: {stress_kpa} kPa armed (from {from_kpa} kPa)"), actor],
            )?;
            Ok(())
        })?;
        self.update(index, |t| {
            t.increment = seq;
            t.from_kpa = Some(from_kpa);
            t.stress_kpa = Some(stress_kpa);
            t.armed_us = Some(now_us);
            t.onset_us = None;
            t.ready_us = None;
            t.state = "armed".into();
        });
        Ok(())
    }

    /// The watch found the onset of the armed increment: t0 stored, the previous increment ended, state `primary`.
    pub fn set_onset(&self, index: usize, onset_us: i64, source: &str, message: String) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        let source = source.to_string();
        self.writer.run(move |conn| {
            conn.execute(
                "UPDATE increments SET ended_us = ?2 WHERE test_id = ?1 AND ended_us IS NULL AND seq < ?3",
                params![test.test_id, onset_us, test.increment],
            )?;
            conn.execute(
                "UPDATE increments SET onset_us = ?3, onset_source = ?4 WHERE test_id = ?1 AND seq = ?2",
                params![test.test_id, test.increment, onset_us, source],
            )?;
            conn.execute("UPDATE tests SET state = 'primary' WHERE id = ?1", [test.test_id])?;
            conn.execute(
                "INSERT INTO events (at_us, frame_key, kind, message) VALUES (?1, ?2, 'onset', ?3)",
                params![onset_us, key, message],
            )?;
            Ok(())
        })?;
        self.update(index, |t| {
            t.onset_us = Some(onset_us);
            t.state = "primary".into();
        });
        Ok(())
    }

    /// The watch established end of primary: state `ready`.
    pub fn set_ready(&self, index: usize, at_us: i64, message: String) -> Result<(), StoreError> {
        let Some(test) = self.snapshot()[index].clone() else { return Ok(()) };
        let key = self.keys[index];
        self.writer.run(move |conn| {
            conn.execute(
                "UPDATE increments SET ready_us = ?3 WHERE test_id = ?1 AND seq = ?2",
                params![test.test_id, test.increment, at_us],
            )?;
            conn.execute("UPDATE tests SET state = 'ready' WHERE id = ?1", [test.test_id])?;
            conn.execute(
                "INSERT INTO events (at_us, frame_key, kind, message) VALUES (?1, ?2, 'ready', ?3)",
                params![at_us, key, message],
            )?;
            Ok(())
        })?;
        self.update(index, |t| {
            t.ready_us = Some(at_us);
            t.state = "ready".into();
        });
        Ok(())
    }

    /// The store key of config frame `index`.
    pub fn key(&self, index: usize) -> i64 {
        self.keys[index]
    }

    fn update(&self, index: usize, f: impl FnOnce(&mut RunningTest)) {
        if let Some(t) = self.running.write().unwrap_or_else(|e| e.into_inner())[index].as_mut() {
            f(t);
        }
    }
}
