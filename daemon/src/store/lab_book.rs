//! The lab book as stored: frames, tests and their increments. Each write is one writer job, so what it
//! changes and its journal entry commit together (or not at all), and it returns only once durable.

use rusqlite::{OptionalExtension, params};

use super::journal::{self, Event, EventKind};
use super::names::{StoredOnset, stored_names};
use super::{Database, Reader, StoreError, Writer};
use oedolog_core::watch::OnsetSource;

stored_names! {
    /// Where a test stands: `tests.state` (the schema's CHECK lists the same names).
    pub enum TestState as "test state" {
        /// Under the seating stress, no increment armed yet.
        Seating = "seating",
        /// The next stress was entered; the watch waits for its onset.
        Armed = "armed",
        /// The onset was found: primary consolidation under way.
        Primary = "primary",
        /// End of primary established: ready for the next load.
        Ready = "ready",
        /// The test is over.
        Finished = "finished",
    }
}

/// The frame's compact key, creating its `frames` row (or refreshing its name) if needed. Runs on the
/// database before the writer takes it over (autocommit: the row is durable when this returns).
pub fn frame_key(db: &Database, id: &str, name: &str, now_us: i64) -> Result<i64, StoreError> {
    let conn = db.conn();
    conn.execute(
        "INSERT INTO frames (id, name, created_us) VALUES (?1, ?2, ?3) ON CONFLICT(id) DO UPDATE SET name = excluded.name",
        params![id, name, now_us],
    )?;
    Ok(conn.query_row("SELECT key FROM frames WHERE id = ?1", [id], |r| r.get(0))?)
}

/// Every frame's key.
pub(super) fn frame_keys(reader: &Reader) -> Result<Vec<i64>, StoreError> {
    let mut statement = reader.conn().prepare("SELECT key FROM frames")?;
    let keys = statement.query_map([], |r| r.get(0))?.collect::<Result<_, _>>()?;
    Ok(keys)
}

/// The newest increment of a running test, as stored.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CurrentIncrement {
    /// 1, 2, … within the test.
    pub seq: i64,
    /// Target stress, kPa.
    pub stress_kpa: f64,
    /// t0, UTC µs.
    pub onset_us: Option<i64>,
    /// When it was armed, UTC µs.
    pub armed_us: Option<i64>,
    /// End of primary, UTC µs.
    pub ready_us: Option<i64>,
    /// Stress before it, kPa.
    pub from_kpa: Option<f64>,
}

/// A frame's running test as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct OpenTest {
    /// `tests.id`.
    pub test_id: i64,
    /// SpecimenRecord reference.
    pub specimen: String,
    /// Where it stands.
    pub state: TestState,
    /// Start, UTC µs.
    pub started_us: i64,
    /// Initial height, mm.
    pub height_mm: f64,
    /// Seating stress, kPa (0 when none was stored).
    pub seating_kpa: f64,
    /// Its newest increment, if any.
    pub increment: Option<CurrentIncrement>,
}

/// The running (unfinished) test of frame `frame_key`, with its newest increment.
pub fn open_test(reader: &Reader, frame_key: i64) -> Result<Option<OpenTest>, StoreError> {
    let conn = reader.conn();
    let test = conn
        .query_row(
            "SELECT id, specimen, state, started_us, height_mm, coalesce(seating_kpa, 0) FROM tests
             WHERE frame_key = ?1 AND finished_us IS NULL",
            [frame_key],
            |r| {
                Ok(OpenTest {
                    test_id: r.get(0)?,
                    specimen: r.get(1)?,
                    state: r.get(2)?,
                    started_us: r.get(3)?,
                    height_mm: r.get(4)?,
                    seating_kpa: r.get(5)?,
                    increment: None,
                })
            },
        )
        .optional()?;
    let Some(mut test) = test else { return Ok(None) };
    test.increment = current_increment(conn, test.test_id)?;
    Ok(Some(test))
}

/// The newest increment of test `test_id`, if it has one.
fn current_increment(conn: &rusqlite::Connection, test_id: i64) -> Result<Option<CurrentIncrement>, StoreError> {
    Ok(conn
        .query_row(
            "SELECT seq, stress_kpa, onset_us, armed_us, ready_us, from_kpa FROM increments WHERE test_id = ?1 ORDER BY seq DESC LIMIT 1",
            [test_id],
            |r| {
                Ok(CurrentIncrement {
                    seq: r.get(0)?,
                    stress_kpa: r.get(1)?,
                    onset_us: r.get(2)?,
                    armed_us: r.get(3)?,
                    ready_us: r.get(4)?,
                    from_kpa: r.get(5)?,
                })
            },
        )
        .optional()?)
}

/// A test to start.
#[derive(Clone, Debug, PartialEq)]
pub struct NewTest {
    /// `frames.key` of its frame.
    pub frame_key: i64,
    /// SpecimenRecord reference.
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
    /// Seating stress, kPa.
    pub seating_kpa: f64,
    /// Start, UTC µs.
    pub started_us: i64,
    /// Who started it.
    pub actor: Option<String>,
}

/// Starts a test: its `tests` row (state `seating`) and the `test-started` entry ("test ID started:
/// specimen …"), in one writer job; returns the test's id.
pub fn start_test(writer: &Writer, test: NewTest) -> Result<i64, StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "INSERT INTO tests (frame_key, specimen, description, height_mm, diameter_mm, dry_mass_g, specific_gravity, started_us, seating_kpa)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
            params![
                test.frame_key,
                test.specimen,
                test.description,
                test.height_mm,
                test.diameter_mm,
                test.dry_mass_g,
                test.specific_gravity,
                test.started_us,
                test.seating_kpa
            ],
        )?;
        let id = conn.last_insert_rowid();
        journal::insert(
            conn,
            &Event {
                at_us: test.started_us,
                frame_key: Some(test.frame_key),
                kind: EventKind::TestStarted,
                message: format!("test {id} started: specimen {}", test.specimen),
                actor: test.actor,
                data: None,
            },
        )?;
        Ok(id)
    })
}

/// Stores the water contents given with a new test (a job of its own, after [`start_test`]'s).
pub fn set_water_contents(
    writer: &Writer,
    test_id: i64,
    initial: Option<f64>,
    last: Option<f64>,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE tests SET initial_water_content = ?2, final_water_content = ?3 WHERE id = ?1",
            params![test_id, initial, last],
        )?;
        Ok(())
    })
}

/// Finishes test `test_id` on frame `frame_key` at `at_us`: every open increment ended, the test
/// `finished`, and the `test-finished` entry with `message`, in one writer job.
pub fn finish_test(
    writer: &Writer,
    test_id: i64,
    frame_key: i64,
    at_us: i64,
    message: String,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE increments SET ended_us = ?2 WHERE test_id = ?1 AND ended_us IS NULL",
            params![test_id, at_us],
        )?;
        conn.execute(
            "UPDATE tests SET finished_us = ?2, state = ?3 WHERE id = ?1",
            params![test_id, at_us, TestState::Finished],
        )?;
        journal::insert(
            conn,
            &Event {
                at_us,
                frame_key: Some(frame_key),
                kind: EventKind::TestFinished,
                message,
                actor: None,
                data: None,
            },
        )?;
        Ok(())
    })
}

/// Names `actor` on the newest `test-finished` entry of frame `frame_key` (a job of its own, after
/// [`finish_test`]'s).
pub fn name_finisher(writer: &Writer, frame_key: i64, actor: String) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE events SET actor = ?2 WHERE id = (SELECT max(id) FROM events WHERE frame_key = ?1 AND kind = ?3)",
            params![frame_key, actor, EventKind::TestFinished],
        )?;
        Ok(())
    })
}

/// Which increment: of which test, on which frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Step {
    /// `tests.id`.
    pub test_id: i64,
    /// `frames.key` of the test's frame (for the journal entry).
    pub frame_key: i64,
    /// `increments.seq`.
    pub seq: i64,
}

/// Arms increment `step` at `stress_kpa` (from `from_kpa`): its `increments` row, the test `armed`, and
/// the `armed` entry with `message` and `actor`, in one writer job.
pub fn arm_increment(
    writer: &Writer,
    step: Step,
    stress_kpa: f64,
    from_kpa: f64,
    at_us: i64,
    actor: Option<String>,
    message: String,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "INSERT INTO increments (test_id, seq, stress_kpa, armed_us, from_kpa) VALUES (?1, ?2, ?3, ?4, ?5)",
            params![step.test_id, step.seq, stress_kpa, at_us, from_kpa],
        )?;
        conn.execute("UPDATE tests SET state = ?2 WHERE id = ?1", params![step.test_id, TestState::Armed])?;
        journal::insert(
            conn,
            &Event { at_us, frame_key: Some(step.frame_key), kind: EventKind::Armed, message, actor, data: None },
        )?;
        Ok(())
    })
}

/// Withdraws the armed increment `step`, which never began (no onset): its row deleted, the test back in
/// the state its previous increment left (`seating` without one), and the `step-withdrawn` entry, in one
/// writer job; returns that state and the increment now current. Fails with [`StoreError::Refused`] when the step has begun or is not the test's last.
pub fn withdraw_increment(
    writer: &Writer,
    step: Step,
    at_us: i64,
    actor: Option<String>,
    message: String,
) -> Result<(TestState, Option<CurrentIncrement>), StoreError> {
    writer.run(move |conn| {
        let last: Option<(i64, Option<i64>)> = conn
            .query_row(
                "SELECT seq, onset_us FROM increments WHERE test_id = ?1 ORDER BY seq DESC LIMIT 1",
                [step.test_id],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .optional()?;
        match last {
            Some((seq, None)) if seq == step.seq => {}
            Some((seq, Some(_))) if seq == step.seq => {
                return Err(StoreError::Refused(format!(
                    "load step {seq} has begun (its onset was found): mark it void instead"
                )));
            }
            _ => return Err(StoreError::Refused(format!("load step {} is not the test's armed step", step.seq))),
        }
        conn.execute("DELETE FROM increments WHERE test_id = ?1 AND seq = ?2", params![step.test_id, step.seq])?;
        let previous = current_increment(conn, step.test_id)?;
        let state = match previous {
            None => TestState::Seating,
            Some(CurrentIncrement { ready_us: None, .. }) => TestState::Primary,
            Some(CurrentIncrement { ready_us: Some(_), .. }) => TestState::Ready,
        };
        conn.execute("UPDATE tests SET state = ?2 WHERE id = ?1", params![step.test_id, state])?;
        journal::insert(
            conn,
            &Event {
                at_us,
                frame_key: Some(step.frame_key),
                kind: EventKind::StepWithdrawn,
                message,
                actor,
                data: Some(serde_json::json!({ "seq": step.seq })),
            },
        )?;
        Ok((state, previous))
    })
}

/// Marks increment `step` void (`reason` given) or counts it again (`reason` `None`), with the
/// `step-voided` or `step-restored` entry, in one writer job; [`StoreError::Refused`] when there is no
/// such step or it is already so.
pub fn set_increment_void(
    writer: &Writer,
    step: Step,
    at_us: i64,
    actor: Option<String>,
    reason: Option<String>,
    message: String,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        let found: Option<Option<i64>> = conn
            .query_row(
                "SELECT void_us FROM increments WHERE test_id = ?1 AND seq = ?2",
                params![step.test_id, step.seq],
                |r| r.get(0),
            )
            .optional()?;
        match (found, reason.is_some()) {
            (None, _) => return Err(StoreError::Refused(format!("this test has no load step {}", step.seq))),
            (Some(Some(_)), true) => {
                return Err(StoreError::Refused(format!("load step {} is already void", step.seq)));
            }
            (Some(None), false) => return Err(StoreError::Refused(format!("load step {} is not void", step.seq))),
            _ => {}
        }
        let (void_us, by) = if reason.is_some() { (Some(at_us), actor.clone()) } else { (None, None) };
        conn.execute(
            "UPDATE increments SET void_us = ?3, void_by = ?4, void_reason = ?5 WHERE test_id = ?1 AND seq = ?2",
            params![step.test_id, step.seq, void_us, by, reason],
        )?;
        let kind = if reason.is_some() { EventKind::StepVoided } else { EventKind::StepRestored };
        journal::insert(
            conn,
            &Event {
                at_us,
                frame_key: Some(step.frame_key),
                kind,
                message,
                actor,
                data: Some(serde_json::json!({ "seq": step.seq, "reason": reason })),
            },
        )?;
        Ok(())
    })
}

/// The onset of increment `step` was found at `onset_us`: every earlier open increment ended there, its
/// t0 and how it was found stored, the test `primary`, and the `onset` entry (stamped `onset_us`) with
/// `message`, in one writer job.
pub fn record_onset(
    writer: &Writer,
    step: Step,
    onset_us: i64,
    source: OnsetSource,
    message: String,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE increments SET ended_us = ?2 WHERE test_id = ?1 AND ended_us IS NULL AND seq < ?3",
            params![step.test_id, onset_us, step.seq],
        )?;
        conn.execute(
            "UPDATE increments SET onset_us = ?3, onset_source = ?4 WHERE test_id = ?1 AND seq = ?2",
            params![step.test_id, step.seq, onset_us, StoredOnset(source)],
        )?;
        conn.execute("UPDATE tests SET state = ?2 WHERE id = ?1", params![step.test_id, TestState::Primary])?;
        journal::insert(
            conn,
            &Event {
                at_us: onset_us,
                frame_key: Some(step.frame_key),
                kind: EventKind::Onset,
                message,
                actor: None,
                data: None,
            },
        )?;
        Ok(())
    })
}

/// End of primary of increment `step` was established at `at_us`: stored, the test `ready`, and the
/// `ready` entry with `message`, in one writer job.
pub fn record_ready(writer: &Writer, step: Step, at_us: i64, message: String) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE increments SET ready_us = ?3 WHERE test_id = ?1 AND seq = ?2",
            params![step.test_id, step.seq, at_us],
        )?;
        conn.execute("UPDATE tests SET state = ?2 WHERE id = ?1", params![step.test_id, TestState::Ready])?;
        journal::insert(
            conn,
            &Event { at_us, frame_key: Some(step.frame_key), kind: EventKind::Ready, message, actor: None, data: None },
        )?;
        Ok(())
    })
}

/// Someone reported at `at_us` that the load of increment `step` is on: stored, with the
/// `load-reported` entry (`message`, `actor`), in one writer job.
pub fn report_load(
    writer: &Writer,
    step: Step,
    at_us: i64,
    actor: Option<String>,
    message: String,
) -> Result<(), StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "UPDATE increments SET reported_us = ?3 WHERE test_id = ?1 AND seq = ?2",
            params![step.test_id, step.seq, at_us],
        )?;
        journal::insert(
            conn,
            &Event {
                at_us,
                frame_key: Some(step.frame_key),
                kind: EventKind::LoadReported,
                message,
                actor,
                data: None,
            },
        )?;
        Ok(())
    })
}

/// A whole test with its increments, as [`import_test`] stores it (benchmark and demonstration
/// databases).
#[derive(Clone, Debug, PartialEq)]
pub struct ImportedTest {
    /// `frames.key` of its frame.
    pub frame_key: i64,
    /// SpecimenRecord reference.
    pub specimen: String,
    /// Soil description.
    pub description: String,
    /// Initial height, mm.
    pub height_mm: f64,
    /// Ring diameter, mm.
    pub diameter_mm: f64,
    /// Dry mass, g.
    pub dry_mass_g: Option<f64>,
    /// Specific gravity of the solids.
    pub specific_gravity: Option<f64>,
    /// w0 as a ratio.
    pub initial_water_content: Option<f64>,
    /// In-situ vertical effective stress, kPa.
    pub sigma_v0_kpa: Option<f64>,
    /// Where it stands.
    pub state: TestState,
    /// Start, UTC µs.
    pub started_us: i64,
    /// Seating stress, kPa.
    pub seating_kpa: f64,
    /// Its increments, in order (numbered 1, 2, … as given).
    pub increments: Vec<ImportedIncrement>,
}

/// One increment of an [`ImportedTest`].
#[derive(Clone, Debug, PartialEq)]
pub struct ImportedIncrement {
    /// 1, 2, …
    pub seq: i64,
    /// Target stress, kPa.
    pub stress_kpa: f64,
    /// Stress before it, kPa.
    pub from_kpa: f64,
    /// Armed, UTC µs.
    pub armed_us: i64,
    /// Load reported on, UTC µs.
    pub reported_us: i64,
    /// t0, UTC µs.
    pub onset_us: i64,
    /// How t0 was found.
    pub onset_source: OnsetSource,
    /// End of primary, UTC µs.
    pub ready_us: Option<i64>,
    /// End of the increment, UTC µs.
    pub ended_us: Option<i64>,
}

/// Stores a whole test and its increments as given, in one writer job (no journal entry: the caller
/// journals what it wants); returns the test's id.
pub fn import_test(writer: &Writer, test: ImportedTest) -> Result<i64, StoreError> {
    writer.run(move |conn| {
        conn.execute(
            "INSERT INTO tests (frame_key, specimen, description, height_mm, diameter_mm, dry_mass_g, specific_gravity,
                 initial_water_content, sigma_v0_kpa, state, started_us, seating_kpa)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12)",
            params![
                test.frame_key,
                test.specimen,
                test.description,
                test.height_mm,
                test.diameter_mm,
                test.dry_mass_g,
                test.specific_gravity,
                test.initial_water_content,
                test.sigma_v0_kpa,
                test.state,
                test.started_us,
                test.seating_kpa
            ],
        )?;
        let test_id = conn.last_insert_rowid();
        for i in &test.increments {
            conn.execute(
                "INSERT INTO increments (test_id, seq, stress_kpa, armed_us, reported_us, onset_us, onset_source, ready_us, ended_us, from_kpa)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)",
                params![
                    test_id,
                    i.seq,
                    i.stress_kpa,
                    i.armed_us,
                    i.reported_us,
                    i.onset_us,
                    StoredOnset(i.onset_source),
                    i.ready_us,
                    i.ended_us,
                    i.from_kpa
                ],
            )?;
        }
        Ok(test_id)
    })
}
