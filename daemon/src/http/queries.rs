//! The read side of the API: tests, increments, readings and events as the API shows them, read through
//! the store's typed functions on a read-only connection, and the reduction of a test's stored readings
//! with the pure `analysis` functions. No writes, no SQL, no HTTP types.

use serde::Serialize;

use super::ApiError;
use crate::clock::rfc3339;
use crate::config::Frame;
use crate::store::read::{self, StoredIncrement, StoredTest};
use crate::store::{EventKind, Reader, TestState, journal};
use oedolog_core::analysis::{
    CompressionReduction, DeflectionCalibration, IncrementReduction, PhaseRelations, ReductionRules, StepInput,
    TestInput, TestSpecimen, reduce_increment, reduce_test_with,
};
use oedolog_core::watch::OnsetSource;
use std::sync::Arc;

use super::cache::{Caches, IncrementStamp};

/// A test as stored, with its specimen data.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct TestRow {
    /// `tests.id`.
    pub id: i64,
    /// The frame's config id.
    pub frame: String,
    /// `frames.key`.
    #[serde(skip)]
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
    /// `seating`, `armed`, `primary`, `ready` or `finished`.
    pub state: TestState,
    /// Start, RFC 3339 UTC.
    pub started_at: String,
    /// Finish, RFC 3339 UTC.
    pub finished_at: Option<String>,
    /// Start, µs.
    #[serde(skip)]
    pub started_us: i64,
}

impl From<StoredTest> for TestRow {
    fn from(t: StoredTest) -> Self {
        TestRow {
            id: t.id,
            frame: t.frame,
            frame_key: t.frame_key,
            specimen: t.specimen,
            description: t.description,
            height_mm: t.height_mm,
            diameter_mm: t.diameter_mm,
            dry_mass_g: t.dry_mass_g,
            specific_gravity: t.specific_gravity,
            initial_water_content: t.initial_water_content,
            final_water_content: t.final_water_content,
            seating_kpa: t.seating_kpa,
            state: t.state,
            started_at: rfc3339(t.started_us),
            finished_at: t.finished_us.map(rfc3339),
            started_us: t.started_us,
        }
    }
}

/// Test `id`, or 404.
pub(crate) fn test(conn: &Reader, id: i64) -> Result<TestRow, ApiError> {
    read::test(conn, id)?.map(TestRow::from).ok_or_else(|| ApiError::NotFound(format!("no test {id}")))
}

/// The running test of a frame, else its most recent one.
pub(crate) fn latest_test(conn: &Reader, frame_key: i64) -> Result<Option<TestRow>, ApiError> {
    Ok(read::latest_test(conn, frame_key)?.map(TestRow::from))
}

/// One increment as stored.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct IncrementView {
    /// 1, 2, … within the test.
    pub seq: i64,
    /// Target stress, kPa.
    pub stress_kpa: f64,
    /// Stress before it, kPa.
    pub from_kpa: Option<f64>,
    /// When the operator armed it.
    pub armed_at: Option<String>,
    /// When someone said the load went on.
    pub reported_at: Option<String>,
    /// t0, found from the data.
    pub onset_at: Option<String>,
    /// `load-step` or `deformation`.
    pub onset_source: Option<OnsetSource>,
    /// End of primary established.
    pub ready_at: Option<String>,
    /// When the next increment began or the test finished.
    pub ended_at: Option<String>,
    /// Set when an operator marked the step void: it is kept and shown, and left out of the reduction.
    pub void: Option<VoidMark>,
    /// t0, µs.
    #[serde(skip)]
    pub onset_us: Option<i64>,
    /// End, µs.
    #[serde(skip)]
    pub ended_us: Option<i64>,
}

/// Who marked a step void, when and why.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct VoidMark {
    /// RFC 3339 UTC.
    pub at: String,
    /// The user, when there are users.
    pub by: Option<String>,
    /// Why.
    pub reason: String,
}

impl From<StoredIncrement> for IncrementView {
    fn from(i: StoredIncrement) -> Self {
        IncrementView {
            seq: i.seq,
            stress_kpa: i.stress_kpa,
            from_kpa: i.from_kpa,
            armed_at: i.armed_us.map(rfc3339),
            reported_at: i.reported_us.map(rfc3339),
            onset_at: i.onset_us.map(rfc3339),
            onset_source: i.onset_source,
            ready_at: i.ready_us.map(rfc3339),
            ended_at: i.ended_us.map(rfc3339),
            void: i.void_us.map(|at| VoidMark {
                at: rfc3339(at),
                by: i.void_by.clone(),
                reason: i.void_reason.clone().unwrap_or_default(),
            }),
            onset_us: i.onset_us,
            ended_us: i.ended_us,
        }
    }
}

/// The increments of test `test_id` in order.
pub(crate) fn increments(conn: &Reader, test_id: i64) -> Result<Vec<IncrementView>, ApiError> {
    Ok(read::increments(conn, test_id)?.into_iter().map(IncrementView::from).collect())
}

/// Increment `seq` of a test, or 404.
pub(crate) fn increment(conn: &Reader, test_id: i64, seq: i64) -> Result<IncrementView, ApiError> {
    increments(conn, test_id)?
        .into_iter()
        .find(|i| i.seq == seq)
        .ok_or_else(|| ApiError::NotFound(format!("test {test_id} has no load step {seq}")))
}

pub(crate) use crate::store::Poll;

/// Displacement and load polls of a frame in `[from_us, to_us]`, in time order.
pub(crate) fn polls(conn: &Reader, frame_key: i64, from_us: i64, to_us: i64) -> Result<Vec<Poll>, ApiError> {
    Ok(read::polls(conn, frame_key, from_us, to_us)?)
}

/// The gauge reading at the test's zero: the first displacement at or after its start (as the hub does).
fn zero_reading(conn: &Reader, test: &TestRow) -> Result<Option<f64>, ApiError> {
    Ok(read::displacement_from(conn, test.frame_key, test.started_us)?)
}

/// An increment's stored time curve, ready for the analysis: `(t_min, d_mm)` from t0.
pub(crate) struct StoredCurve {
    /// (t_min, d_mm), t = 0 at the onset.
    pub readings: Vec<(f64, f64)>,
}

/// The curve from t0 of polls stamped after `onset` (earlier ones are skipped).
fn curve_of(conn: &Reader, test: &TestRow, onset: i64, polls: &[Poll]) -> Result<StoredCurve, ApiError> {
    let d_onset = read::displacement_at_or_before(conn, test.frame_key, onset)?;
    let mut readings: Vec<(f64, f64)> = d_onset.map(|d| (0.0, d)).into_iter().collect();
    for &(at, d, _) in polls.iter().filter(|p| p.0 > onset) {
        if let Some(d) = d {
            readings.push(((at - onset) as f64 / 6e7, d));
        }
    }
    Ok(StoredCurve { readings })
}

/// The stored time curve of an increment through the poll cache; `None` before its onset or with fewer
/// than two readings.
fn stored_curve(
    conn: &Reader,
    caches: &Caches,
    test: &TestRow,
    inc: &IncrementView,
    stamp: &IncrementStamp,
    now_us: i64,
) -> Result<Option<StoredCurve>, ApiError> {
    let Some(onset) = inc.onset_us else { return Ok(None) };
    let polls = caches.increment_polls(conn, test, inc, stamp, now_us)?;
    let curve = curve_of(conn, test, onset, &polls)?;
    Ok((curve.readings.len() >= 2).then_some(curve))
}

/// One increment with what its time curve gave.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct IncrementSummary {
    /// The stored row.
    #[serde(flatten)]
    pub row: IncrementView,
    /// Readings in the increment.
    pub reading_count: usize,
    /// Cumulative compression since the test's zero at the end of the increment, mm (corrected for
    /// apparatus deflection when the frame has a calibration and the stress lies inside it).
    pub settlement_mm: Option<f64>,
    /// The same as the gauge read it, before any correction, mm.
    pub settlement_measured_mm: Option<f64>,
    /// Apparatus deflection taken off, mm: y(σ′) on the increment's branch − y(seating stress).
    pub apparatus_deflection_mm: Option<f64>,
    /// The same at the end of primary (d100), mm.
    pub settlement_eop_mm: Option<f64>,
    /// t50 (log-t construction), min.
    pub t50_min: Option<f64>,
    /// t90 (√t construction), min.
    pub t90_min: Option<f64>,
    /// cv by √t, mm²/min.
    pub cv_taylor_mm2_per_min: Option<f64>,
    /// cv by log t, mm²/min.
    pub cv_casagrande_mm2_per_min: Option<f64>,
    /// The cv proposed for the step (the one k uses), mm²/min: the construction the checks trust.
    pub cv_mm2_per_min: Option<f64>,
    /// Which construction that is: `"taylor"` or `"casagrande"`; null (with the flag `cv_not_chosen`)
    /// when neither holds.
    pub cv_method: Option<&'static str>,
    /// Why that one, in words.
    pub cv_reason: Option<String>,
    /// Cα on the strain basis.
    pub c_alpha_strain: Option<f64>,
    /// Quality flags, by code.
    pub flags: Vec<String>,
    /// The same flags in words, in the same order.
    pub flag_messages: Vec<String>,
    /// The core's reduction of the increment's time curve (not serialised here: the analysis route gives it).
    #[serde(skip)]
    pub curve: Option<IncrementReduction>,
    /// Why the analysis refused the increment's time curve, if it did.
    #[serde(skip)]
    pub curve_refused: Option<String>,
}

/// A whole test reduced: the increments' summaries and the e–log σ′ curve.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct TestSummary {
    /// The test.
    pub test: TestRow,
    /// Every increment.
    pub increments: Vec<IncrementSummary>,
    /// Phase relations (needs dry mass and Gs).
    pub phase: Option<PhaseRelations>,
    /// The e–log σ′ reduction, when it could run.
    pub compression: Option<CompressionReduction>,
    /// Why it could not, if so.
    pub compression_unavailable: Option<String>,
    /// Whether every settlement was corrected for apparatus deflection (the frame's `deflection` table
    /// covers every stress of the test).
    pub apparatus_corrected: bool,
}

impl TestRow {
    /// The specimen as the core's reduction takes it.
    fn specimen(&self) -> TestSpecimen {
        TestSpecimen {
            diameter_mm: self.diameter_mm,
            height_mm: self.height_mm,
            dry_mass_g: self.dry_mass_g,
            specific_gravity: self.specific_gravity,
            initial_water_content: self.initial_water_content,
            final_water_content: None,
            seating_stress_kpa: self.seating_kpa.unwrap_or(0.0),
            sigma_v0_kpa: None,
        }
    }
}

/// Reduces test `id` with the core's [`reduce_test_with`]: every increment's stored curve (through the
/// caches: a finished increment is reduced once, a running one again only after new readings committed,
/// `commits` read before the database, see `Writer::commits`), settlements from the test's zero reading,
/// corrected for apparatus deflection when the test's frame in `frames` has a calibration.
pub(crate) fn reduce_test(
    conn: &Reader,
    caches: &Caches,
    commits: u64,
    id: i64,
    now_us: i64,
    frames: &[Frame],
) -> Result<TestSummary, ApiError> {
    let test = test(conn, id)?;
    let zero = zero_reading(conn, &test)?;
    let calibration = match frames.iter().find(|f| f.id == test.frame).and_then(|f| f.deflection.as_ref()) {
        // The config check already built it once; a failure here would be a bug, said once in the log.
        Some(table) => match DeflectionCalibration::new(&table.loading, &table.unloading) {
            Ok(c) => Some(c),
            Err(error) => {
                tracing::warn!("frame {}: deflection table unusable: {error}", test.frame);
                None
            }
        },
        None => None,
    };
    let rows = increments(conn, id)?;
    let mut stamps = Vec::with_capacity(rows.len());
    let mut curves = Vec::with_capacity(rows.len());
    for row in &rows {
        let stamp = IncrementStamp::of(row, commits);
        curves.push(stored_curve(conn, caches, &test, row, &stamp, now_us)?);
        stamps.push(stamp);
    }
    let steps: Vec<StepInput<'_>> = rows
        .iter()
        .zip(&curves)
        .map(|(row, curve)| {
            let readings = curve.as_ref().map(|c| &c.readings[..]);
            StepInput {
                void: row.void.is_some(),
                stress_kpa: row.stress_kpa,
                settlement_mm: zero.zip(readings.and_then(|r| r.last())).map(|(z, d)| d.1 - z),
                readings,
            }
        })
        .collect();
    let rules = ReductionRules::default();
    let input = TestInput {
        specimen: test.specimen(),
        steps: &steps,
        deflection: calibration.as_ref(),
        rules: &rules,
        choices: None,
    };
    let reduced = reduce_test_with(&input, |index, readings, params| {
        let key = (test.id, rows[index].seq);
        let kept = caches.reductions.get_or_build(&key, &stamps[index], |_| {
            Ok::<_, std::convert::Infallible>(Arc::new(reduce_increment(readings, params)))
        });
        match kept {
            Ok(r) => Result::clone(&r),
            Err(never) => match never {},
        }
    });
    let summaries = rows
        .into_iter()
        .zip(reduced.steps)
        .zip(&curves)
        .map(|((row, step), curve)| {
            let own = step.curve.iter().flat_map(|c| c.flags.iter()).chain(&step.deflection_flags);
            let mut flags: Vec<String> = own.clone().map(|f| f.code().to_string()).collect();
            let mut flag_messages: Vec<String> = own.map(ToString::to_string).collect();
            flags.extend(step.seating_deflection_flags.iter().map(|f| format!("{} (seating stress)", f.code())));
            flag_messages.extend(step.seating_deflection_flags.iter().map(|f| format!("{f} (seating stress)")));
            // One remark once, in the order found (two constructions may raise the same one).
            let mut seen = std::collections::HashSet::new();
            flags.retain(|f| seen.insert(f.clone()));
            let mut seen = std::collections::HashSet::new();
            flag_messages.retain(|m| seen.insert(m.clone()));
            if let Some(why) = &step.curve_refused {
                tracing::debug!("increment {} of test {id}: {why}", row.seq);
            }
            let c = step.curve.as_ref();
            IncrementSummary {
                reading_count: curve.as_ref().map_or(0, |c| c.readings.len()),
                settlement_mm: step.settlement_mm,
                settlement_measured_mm: step.settlement_measured_mm,
                apparatus_deflection_mm: step.apparatus_deflection_mm,
                settlement_eop_mm: step.settlement_eop_mm,
                t50_min: c.and_then(|c| c.casagrande.t50_min),
                t90_min: c.and_then(|c| c.taylor.t90_min),
                cv_taylor_mm2_per_min: c.and_then(|c| c.cv_taylor).map(|e| e.cv_mm2_per_min),
                cv_casagrande_mm2_per_min: c.and_then(|c| c.cv_casagrande).map(|e| e.cv_mm2_per_min),
                cv_mm2_per_min: step.cv_for_k.map(|e| e.cv_mm2_per_min),
                cv_method: c.and_then(|c| c.cv_choice.method_name()),
                cv_reason: c.map(|c| c.cv_choice.reason.clone()),
                c_alpha_strain: c.and_then(|c| c.secondary).map(|s| s.c_alpha_strain),
                flags,
                flag_messages,
                curve_refused: step.curve_refused.as_ref().map(ToString::to_string),
                curve: step.curve,
                row,
            }
        })
        .collect();
    let (compression, compression_unavailable) = match reduced.compression {
        Ok(r) => (Some(r), None),
        Err(why) => (None, Some(why.to_string())),
    };
    Ok(TestSummary {
        test,
        increments: summaries,
        phase: reduced.phase.and_then(Result::ok),
        compression,
        compression_unavailable,
        apparatus_corrected: reduced.apparatus_corrected,
    })
}

/// One journal entry as the API gives it.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct EventView {
    /// `events.id` (the SSE id).
    pub id: i64,
    /// RFC 3339 UTC.
    pub at: String,
    /// The frame's config id, if any.
    pub frame: Option<String>,
    /// Machine name.
    pub kind: EventKind,
    /// What a person reads.
    pub message: String,
    /// Who, for operator actions.
    pub actor: Option<String>,
    /// Details.
    pub data: Option<serde_json::Value>,
}

impl From<journal::JournalEntry> for EventView {
    fn from(e: journal::JournalEntry) -> Self {
        EventView {
            id: e.id,
            at: rfc3339(e.at_us),
            frame: e.frame,
            kind: e.kind,
            message: e.message,
            actor: e.actor,
            data: e.data,
        }
    }
}

/// Events with id > `after`, oldest first, at most `limit`, optionally of one frame.
pub(crate) fn events(
    conn: &Reader,
    after: i64,
    limit: i64,
    frame_key: Option<i64>,
) -> Result<Vec<EventView>, ApiError> {
    Ok(journal::after(conn, after, limit, frame_key)?.into_iter().map(EventView::from).collect())
}

/// Which journal entries `GET /api/events` asks for.
pub(crate) use crate::store::journal::Window as EventWindow;

/// The journal entries of `window`.
pub(crate) fn events_in(conn: &Reader, window: &EventWindow) -> Result<Vec<EventView>, ApiError> {
    Ok(journal::window(conn, window)?.into_iter().map(EventView::from).collect())
}

/// The newest event id (0 for none).
pub(crate) fn last_event_id(conn: &Reader) -> Result<i64, ApiError> {
    Ok(journal::newest_id(conn)?)
}
