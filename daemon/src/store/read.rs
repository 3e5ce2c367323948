//! What the API, the watch and start-up read: tests with their specimen data, increments, readings.
//! Every function reads on the connection it is given, in autocommit (no transaction is held).

use rusqlite::{Connection, OptionalExtension, params};

use super::lab_book::{self, TestState};
use super::names::StoredOnset;
use super::{ChannelKind, Reader, StoreError, journal};
use oedolog_core::watch::OnsetSource;

/// A test as stored, with its specimen data.
#[derive(Clone, Debug, PartialEq)]
pub struct StoredTest {
    /// `tests.id`.
    pub id: i64,
    /// The frame's config id.
    pub frame: String,
    /// `frames.key`.
    pub frame_key: i64,
    /// SpecimenRecord reference.
    pub specimen: String,
    /// Soil description, borehole, depth.
    pub description: String,
    /// Initial height H0, mm.
    pub height_mm: f64,
    /// Ring diameter, mm.
    pub diameter_mm: f64,
    /// Dry mass, g.
    pub dry_mass_g: Option<f64>,
    /// Gs.
    pub specific_gravity: Option<f64>,
    /// w0 as a ratio.
    pub initial_water_content: Option<f64>,
    /// wf as a ratio.
    pub final_water_content: Option<f64>,
    /// Seating stress, kPa.
    pub seating_kpa: Option<f64>,
    /// Where it stands.
    pub state: TestState,
    /// Start, UTC µs.
    pub started_us: i64,
    /// Finish, UTC µs.
    pub finished_us: Option<i64>,
}

const TEST_COLUMNS: &str = "t.id, f.id, t.frame_key, t.specimen, t.description, t.height_mm, t.diameter_mm, t.dry_mass_g,
    t.specific_gravity, t.initial_water_content, t.final_water_content, t.seating_kpa, t.state, t.started_us, t.finished_us";

fn stored_test(r: &rusqlite::Row<'_>) -> rusqlite::Result<StoredTest> {
    Ok(StoredTest {
        id: r.get(0)?,
        frame: r.get(1)?,
        frame_key: r.get(2)?,
        specimen: r.get(3)?,
        description: r.get(4)?,
        height_mm: r.get(5)?,
        diameter_mm: r.get(6)?,
        dry_mass_g: r.get(7)?,
        specific_gravity: r.get(8)?,
        initial_water_content: r.get(9)?,
        final_water_content: r.get(10)?,
        seating_kpa: r.get(11)?,
        state: r.get(12)?,
        started_us: r.get(13)?,
        finished_us: r.get(14)?,
    })
}

/// Test `id`, if there is one.
pub fn test(reader: &Reader, id: i64) -> Result<Option<StoredTest>, StoreError> {
    Ok(reader
        .conn()
        .query_row(
            &format!("SELECT {TEST_COLUMNS} FROM tests t JOIN frames f ON f.key = t.frame_key WHERE t.id = ?1"),
            [id],
            stored_test,
        )
        .optional()?)
}

/// The running test of frame `frame_key`, else its most recent one.
pub fn latest_test(reader: &Reader, frame_key: i64) -> Result<Option<StoredTest>, StoreError> {
    Ok(reader
        .conn()
        .query_row(
            &format!(
                "SELECT {TEST_COLUMNS} FROM tests t JOIN frames f ON f.key = t.frame_key WHERE t.frame_key = ?1
                 ORDER BY (t.finished_us IS NULL) DESC, t.id DESC LIMIT 1"
            ),
            [frame_key],
            stored_test,
        )
        .optional()?)
}

/// One increment as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct StoredIncrement {
    /// 1, 2, … within the test.
    pub seq: i64,
    /// Target stress, kPa.
    pub stress_kpa: f64,
    /// Stress before it, kPa.
    pub from_kpa: Option<f64>,
    /// When the operator armed it, UTC µs.
    pub armed_us: Option<i64>,
    /// When someone said the load went on, UTC µs.
    pub reported_us: Option<i64>,
    /// t0, found from the data, UTC µs.
    pub onset_us: Option<i64>,
    /// How t0 was found.
    pub onset_source: Option<OnsetSource>,
    /// End of primary established, UTC µs.
    pub ready_us: Option<i64>,
    /// When the next increment began or the test finished, UTC µs.
    pub ended_us: Option<i64>,
    /// When an operator marked it void (left out of the reduction), UTC µs.
    pub void_us: Option<i64>,
    /// Who marked it void.
    pub void_by: Option<String>,
    /// Why.
    pub void_reason: Option<String>,
}

/// The increments of test `test_id`, in order.
pub fn increments(reader: &Reader, test_id: i64) -> Result<Vec<StoredIncrement>, StoreError> {
    let mut statement = reader.conn().prepare_cached(
        "SELECT seq, stress_kpa, from_kpa, armed_us, reported_us, onset_us, onset_source, ready_us, ended_us,
                void_us, void_by, void_reason
         FROM increments WHERE test_id = ?1 ORDER BY seq",
    )?;
    let rows = statement.query_map([test_id], |r| {
        Ok(StoredIncrement {
            seq: r.get(0)?,
            stress_kpa: r.get(1)?,
            from_kpa: r.get(2)?,
            armed_us: r.get(3)?,
            reported_us: r.get(4)?,
            onset_us: r.get(5)?,
            onset_source: r.get::<_, Option<StoredOnset>>(6)?.map(|s| s.0),
            ready_us: r.get(7)?,
            ended_us: r.get(8)?,
            void_us: r.get(9)?,
            void_by: r.get(10)?,
            void_reason: r.get(11)?,
        })
    })?;
    Ok(rows.collect::<Result<_, _>>()?)
}

/// The newest stored reading of a frame's channel: (at_us, value).
pub fn latest_reading(reader: &Reader, frame_key: i64, channel: ChannelKind) -> Result<Option<(i64, f64)>, StoreError> {
    Ok(reader
        .conn()
        .query_row(
            "SELECT at_us, value FROM readings WHERE frame_key = ?1 AND channel = ?2 ORDER BY at_us DESC LIMIT 1",
            params![frame_key, channel.code()],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?)
}

/// The displacement of frame `frame_key` read last at or before `at_us`, mm.
pub fn displacement_at_or_before(reader: &Reader, frame_key: i64, at_us: i64) -> Result<Option<f64>, StoreError> {
    Ok(reader
        .conn()
        .query_row(
            "SELECT value FROM readings WHERE frame_key = ?1 AND channel = 0 AND at_us <= ?2 ORDER BY at_us DESC LIMIT 1",
            params![frame_key, at_us],
            |r| r.get(0),
        )
        .optional()?)
}

/// The first displacement of frame `frame_key` read at or after `from_us`, mm: a test's zero reading when
/// `from_us` is its start.
pub fn displacement_from(reader: &Reader, frame_key: i64, from_us: i64) -> Result<Option<f64>, StoreError> {
    Ok(reader
        .conn()
        .query_row(
            "SELECT value FROM readings WHERE frame_key = ?1 AND channel = 0 AND at_us >= ?2 ORDER BY at_us LIMIT 1",
            params![frame_key, from_us],
            |r| r.get(0),
        )
        .optional()?)
}

/// One poll as stored: (at_us, displacement mm, load kN).
pub type Poll = (i64, Option<f64>, Option<f64>);

/// A frame's displacement and load readings with `from_us ≤ at_us ≤ to_us`, joined by instant, in time
/// order. Two range scans in key order (frame, channel, at_us) merged here: no temporary sort in SQLite.
pub fn polls(reader: &Reader, frame_key: i64, from_us: i64, to_us: i64) -> Result<Vec<Poll>, StoreError> {
    let conn: &Connection = reader.conn();
    let channel = |kind: ChannelKind| -> Result<Vec<(i64, f64)>, StoreError> {
        let mut statement = conn.prepare_cached(
            "SELECT at_us, value FROM readings WHERE frame_key = ?1 AND channel = ?2 AND at_us BETWEEN ?3 AND ?4 ORDER BY at_us",
        )?;
        let rows =
            statement.query_map(params![frame_key, kind.code(), from_us, to_us], |r| Ok((r.get(0)?, r.get(1)?)))?;
        Ok(rows.collect::<Result<_, _>>()?)
    };
    let displacement = channel(ChannelKind::Displacement)?;
    let load = channel(ChannelKind::Load)?;
    let mut out = Vec::with_capacity(displacement.len().max(load.len()));
    let (mut d, mut l) = (displacement.into_iter().peekable(), load.into_iter().peekable());
    loop {
        let poll = match (d.peek().copied(), l.peek().copied()) {
            (None, None) => break,
            (Some((at, v)), Some((lat, lv))) if at == lat => {
                d.next();
                l.next();
                (at, Some(v), Some(lv))
            }
            (Some((at, v)), Some((lat, _))) if at < lat => {
                d.next();
                (at, Some(v), None)
            }
            (Some((at, v)), None) => {
                d.next();
                (at, Some(v), None)
            }
            (_, Some((lat, lv))) => {
                l.next();
                (lat, None, Some(lv))
            }
        };
        out.push(poll);
    }
    Ok(out)
}

/// The newest instant stored: of any event, or of any frame's channel's newest reading (`None` for an
/// empty store). Cheap: each (frame, channel)'s newest reading is one step down the primary key, and
/// events are indexed by time.
pub fn newest_instant(reader: &Reader) -> Result<Option<i64>, StoreError> {
    let mut newest = journal::newest_at(reader)?;
    for key in lab_book::frame_keys(reader)? {
        for channel in ChannelKind::ALL {
            newest = newest.max(latest_reading(reader, key, channel)?.map(|(at_us, _)| at_us));
        }
    }
    Ok(newest)
}
