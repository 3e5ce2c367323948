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
    CompressionChoices, CompressionReduction, DeflectionCalibration, IncrementReduction, PhaseRelations,
    ReductionRules, StepChoices, StepInput, TestChoices, TestInput, TestSpecimen, reduce_increment, reduce_test_with,
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
    /// The same refusal as the core gave it (a review names the field of a choice from it).
    #[serde(skip)]
    pub curve_refused_error: Option<oedolog_core::analysis::AnalysisError>,
    /// The values an engineer's revision set rather than the constructions, by field name; empty when the
    /// step stands as proposed.
    pub adjusted: Vec<&'static str>,
    /// The revision in force for this step: who made it, when and why.
    pub revision: Option<RevisionView>,
    /// The automatic proposal's values, beside the adjusted ones (only when something was adjusted).
    pub proposal: Option<StepValues>,
}

/// The values of a load step an engineer's review is about, as proposed or adjusted.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub(crate) struct StepValues {
    /// Cumulative compression at the end of primary, mm.
    pub settlement_eop_mm: Option<f64>,
    /// t50, min.
    pub t50_min: Option<f64>,
    /// t90, min.
    pub t90_min: Option<f64>,
    /// cv(√t), mm²/min.
    pub cv_taylor_mm2_per_min: Option<f64>,
    /// cv(log t), mm²/min.
    pub cv_casagrande_mm2_per_min: Option<f64>,
    /// The cv proposed for the step, mm²/min.
    pub cv_mm2_per_min: Option<f64>,
    /// Cα(ε).
    pub c_alpha_strain: Option<f64>,
}

impl IncrementSummary {
    /// The values a review compares.
    pub(crate) fn values(&self) -> StepValues {
        StepValues {
            settlement_eop_mm: self.settlement_eop_mm,
            t50_min: self.t50_min,
            t90_min: self.t90_min,
            cv_taylor_mm2_per_min: self.cv_taylor_mm2_per_min,
            cv_casagrande_mm2_per_min: self.cv_casagrande_mm2_per_min,
            cv_mm2_per_min: self.cv_mm2_per_min,
            c_alpha_strain: self.c_alpha_strain,
        }
    }
}

/// The values of the e–log σ′ curve a review is about.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub(crate) struct CurveValues {
    /// Cc.
    pub cc: Option<f64>,
    /// Cr.
    pub cr: Option<f64>,
    /// σ′p by Casagrande's construction, kPa.
    pub sigma_p_casagrande_kpa: Option<f64>,
    /// σ′p by the work method, kPa.
    pub sigma_p_work_kpa: Option<f64>,
    /// σ′p as the engineer set it, kPa.
    pub sigma_p_chosen_kpa: Option<f64>,
}

impl CurveValues {
    pub(crate) fn of(c: Option<&CompressionReduction>) -> CurveValues {
        CurveValues {
            cc: c.and_then(|c| c.cc.as_ref()).map(|l| l.index),
            cr: c.and_then(|c| c.cr.as_ref()).map(|l| l.index),
            sigma_p_casagrande_kpa: c.and_then(|c| c.sigma_p_casagrande.as_ref()).map(|p| p.sigma_p_kpa),
            sigma_p_work_kpa: c.and_then(|c| c.sigma_p_work.as_ref()).map(|p| p.sigma_p_kpa),
            sigma_p_chosen_kpa: c.and_then(|c| c.sigma_p_chosen_kpa),
        }
    }
}

/// One revision as the API shows it.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct RevisionView {
    /// `revisions.id`.
    pub id: i64,
    /// The load step, or null for the e–log σ′ curve.
    pub seq: Option<i64>,
    /// The choices (null for a withdrawal).
    pub choices: Option<serde_json::Value>,
    /// The revision a withdrawal takes back.
    pub withdraws: Option<i64>,
    /// Why.
    pub reason: String,
    /// Who.
    pub by: String,
    /// When, RFC 3339 UTC.
    pub at: String,
    /// Values before and after.
    pub before: serde_json::Value,
    /// See `before`.
    pub after: serde_json::Value,
    /// Whether it is in force now (the latest of its scope not taken back).
    pub in_force: bool,
}

/// One approval as the API shows it.
#[derive(Clone, Debug, Serialize)]
pub(crate) struct ApprovalView {
    /// `approvals.id`.
    pub id: i64,
    /// Who approved.
    pub by: String,
    /// When, RFC 3339 UTC.
    pub at: String,
    /// The note.
    pub note: String,
    /// The revisions then in force.
    pub revisions: serde_json::Value,
    /// The approved values.
    pub frozen: serde_json::Value,
    /// When a later revision withdrew it.
    pub withdrawn_at: Option<String>,
    /// That revision.
    pub withdrawn_by_revision: Option<i64>,
}

/// A test's review: every revision and approval, which are in force, and the curve's adjustments.
#[derive(Clone, Debug, Default, Serialize)]
pub(crate) struct Review {
    /// Every revision, oldest first.
    pub revisions: Vec<RevisionView>,
    /// Every approval, oldest first.
    pub approvals: Vec<ApprovalView>,
    /// The approval in force, if any.
    pub approval: Option<ApprovalView>,
    /// What the engineer set on the e–log σ′ curve, by field name.
    pub compression_adjusted: Vec<&'static str>,
    /// The curve's revision in force.
    pub compression_revision: Option<RevisionView>,
    /// The curve's automatic values, beside the adjusted ones (only when something was adjusted).
    pub compression_proposal: Option<CurveValues>,
    /// Each point of the e–log σ′ curve as the automatic reduction gives it, in the curve's order (only when
    /// something of the test was adjusted: a d100 or a cv moves e, mv and k).
    pub point_proposals: Option<Vec<PointValues>>,
}

/// One point of the e–log σ′ curve, the values a review can move.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub(crate) struct PointValues {
    /// e on the curve's basis.
    pub e: f64,
    /// mv, 1/kPa.
    pub mv_per_kpa: Option<f64>,
    /// k, m/s.
    pub k_m_per_s: Option<f64>,
}

/// The choices in force, by scope: (load step `seq`, or `None` for the e–log σ′ curve; choices as JSON).
pub(crate) type ScopedChoices = Vec<(Option<i64>, String)>;

/// A test's revisions and approvals as the API shows them, and the choices in force.
pub(crate) fn review_of(conn: &Reader, test_id: i64) -> Result<(Review, ScopedChoices), ApiError> {
    use crate::store::review;
    let stored = review::revisions(conn, test_id)?;
    let force: Vec<i64> = review::in_force(&stored).iter().map(|r| r.id).collect();
    let json = |text: &str| serde_json::from_str(text).unwrap_or(serde_json::Value::Null);
    let revisions: Vec<RevisionView> = stored
        .iter()
        .map(|r| RevisionView {
            id: r.id,
            seq: r.seq,
            choices: r.choices.as_deref().map(json),
            withdraws: r.withdraws,
            reason: r.reason.clone(),
            by: r.actor.clone(),
            at: rfc3339(r.at_us),
            before: json(&r.before),
            after: json(&r.after),
            in_force: force.contains(&r.id),
        })
        .collect();
    let approvals: Vec<ApprovalView> = review::approvals(conn, test_id)?
        .into_iter()
        .map(|a| ApprovalView {
            id: a.id,
            by: a.actor,
            at: rfc3339(a.at_us),
            note: a.note,
            revisions: json(&a.revisions),
            frozen: json(&a.frozen),
            withdrawn_at: a.withdrawn_us.map(rfc3339),
            withdrawn_by_revision: a.withdrawn_by_revision,
        })
        .collect();
    let approval = approvals.iter().rev().find(|a| a.withdrawn_at.is_none()).cloned();
    let choices = review::in_force(&stored).iter().map(|r| (r.seq, r.choices.clone().unwrap_or_default())).collect();
    Ok((Review { revisions, approvals, approval, ..Review::default() }, choices))
}

/// The choices in force (`(seq or None, JSON)`) as the core takes them, step indices from `rows`. A stored
/// choice that no longer parses (written by a newer version) is left out and logged.
pub(crate) fn test_choices(rows: &[IncrementView], stored: &[(Option<i64>, String)]) -> TestChoices {
    let mut choices = TestChoices::default();
    for (seq, text) in stored {
        match seq {
            Some(seq) => match (rows.iter().position(|r| r.seq == *seq), serde_json::from_str::<StepChoices>(text)) {
                (Some(index), Ok(c)) => choices.steps.push((index, c)),
                (_, Err(error)) => tracing::warn!("load step {seq}: stored choices unreadable: {error}"),
                (None, _) => {}
            },
            None => match serde_json::from_str::<CompressionChoices>(text) {
                Ok(c) => choices.compression = c,
                Err(error) => tracing::warn!("stored curve choices unreadable: {error}"),
            },
        }
    }
    choices
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
    /// The engineer's review: revisions, approvals, what is adjusted.
    pub review: Review,
    /// The core's refusal of the e–log σ′ reduction, when an engineer's choice was refused.
    #[serde(skip)]
    pub compression_refused: Option<oedolog_core::analysis::AnalysisError>,
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
    reduce_test_trying(conn, caches, commits, id, now_us, frames, None)
}

/// [`reduce_test`] with `trial` — (seq or `None` for the curve, choices as JSON or `None` for none) — in
/// force on top of the stored revisions: how a revision about to be saved, or previewed, reduces. Nothing
/// is written.
pub(crate) fn reduce_test_trying(
    conn: &Reader,
    caches: &Caches,
    commits: u64,
    id: i64,
    now_us: i64,
    frames: &[Frame],
    trial: Option<(Option<i64>, Option<String>)>,
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
    let (mut review, mut stored_choices) = review_of(conn, id)?;
    if let Some((seq, text)) = trial {
        stored_choices.retain(|(s, _)| *s != seq);
        stored_choices.extend(text.map(|t| (seq, t)));
    }
    let choices = test_choices(&rows, &stored_choices);
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
    // A step's automatic reduction is kept in the caches; one with an engineer's choices is reduced afresh.
    let reduce = |chosen: &TestChoices| {
        let input = TestInput {
            specimen: test.specimen(),
            steps: &steps,
            deflection: calibration.as_ref(),
            rules: &rules,
            choices: Some(chosen),
        };
        reduce_test_with(&input, |index, readings, params| {
            if !chosen.step(index).is_empty() {
                return reduce_increment(readings, params);
            }
            let key = (test.id, rows[index].seq);
            let kept = caches.reductions.get_or_build(&key, &stamps[index], |_| {
                Ok::<_, std::convert::Infallible>(Arc::new(reduce_increment(readings, params)))
            });
            match kept {
                Ok(r) => Result::clone(&r),
                Err(never) => match never {},
            }
        })
    };
    let proposal = reduce(&TestChoices::default());
    let adjusted = (!choices.is_empty()).then(|| reduce(&choices));
    if adjusted.is_some() {
        review.point_proposals = proposal.compression.as_ref().ok().map(|c| {
            c.points.iter().map(|p| PointValues { e: p.e, mv_per_kpa: p.mv_per_kpa, k_m_per_s: p.k_m_per_s }).collect()
        });
    }
    let proposal_summaries = summaries(id, &rows, &curves, proposal.steps.clone());
    let reduced = adjusted.unwrap_or_else(|| proposal.clone());
    let mut increments = summaries(id, &rows, &curves, reduced.steps.clone());
    let revision_of = |seq: Option<i64>| review.revisions.iter().find(|r| r.in_force && r.seq == seq).cloned();
    for (summary, proposed) in increments.iter_mut().zip(&proposal_summaries) {
        summary.adjusted = summary.curve.as_ref().map(|c| c.adjusted.clone()).unwrap_or_default();
        summary.revision = revision_of(Some(summary.row.seq));
        if !summary.adjusted.is_empty() {
            summary.proposal = Some(proposed.values());
        }
    }
    let compression_refused = match &reduced.compression {
        Err(oedolog_core::analysis::CurveUnavailable::Refused(e)) if proposal.compression.is_ok() => Some(e.clone()),
        _ => None,
    };
    let (compression, compression_unavailable) = match reduced.compression.clone() {
        Ok(r) => (Some(r), None),
        Err(why) => (None, Some(why.to_string())),
    };
    review.compression_adjusted = compression.as_ref().map(|c| c.adjusted.clone()).unwrap_or_default();
    if !review.compression_adjusted.is_empty() {
        review.compression_revision = revision_of(None);
        review.compression_proposal = Some(CurveValues::of(proposal.compression.as_ref().ok()));
    }
    Ok(TestSummary {
        test,
        increments,
        phase: reduced.phase.and_then(Result::ok),
        compression,
        compression_unavailable,
        apparatus_corrected: reduced.apparatus_corrected,
        review,
        compression_refused,
    })
}

/// The load steps' summaries from one reduction of the test.
fn summaries(
    id: i64,
    rows: &[IncrementView],
    curves: &[Option<StoredCurve>],
    steps: Vec<oedolog_core::analysis::StepReduction>,
) -> Vec<IncrementSummary> {
    rows.iter()
        .cloned()
        .zip(steps)
        .zip(curves)
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
                curve_refused_error: step.curve_refused.clone(),
                curve: step.curve,
                row,
                adjusted: Vec::new(),
                revision: None,
                proposal: None,
            }
        })
        .collect()
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
