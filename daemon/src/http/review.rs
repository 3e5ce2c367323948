//! The engineer's review over HTTP: adjust a load step's time-curve constructions or the e–log σ′
//! constructions (each a revision with a reason), take an adjustment back, preview a choice before saving
//! it, and approve a test. Only a signed-in `engineer` may; the automatic proposal is never overwritten and
//! stays beside the adjusted values in every read.
//!
//! - `POST /api/tests/{id}/revisions` `{"seq": 3, "choices": {…}, "reason": "…"}` (`seq` absent or null:
//!   the e–log σ′ curve) → 201 `{revision, withdrew_approval, before, after}`.
//! - `POST /api/tests/{id}/revisions/{rid}/withdraw` `{"reason": "…"}` → 201, the same.
//! - `POST /api/tests/{id}/preview` `{"seq": 3, "choices": {…}}` → 200 with the step's (or the curve's)
//!   reduction under those choices; nothing is written.
//! - `POST /api/tests/{id}/approve` `{"note": "…"}` → 201; 409 for a test with no finished load step or
//!   one already approved.

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::routing::post;
use axum::{Extension, Json, Router};
use serde::Deserialize;
use serde_json::{Value, json};

use super::auth::Caller;
use super::body::{JsonBody, OptionalJsonBody, typed_text};
use super::increments::constructions;
use super::lab_book::test_id;
use super::queries::{self, CurveValues, TestSummary};
use super::{ApiError, AppState};
use crate::config::Role;
use crate::store::review::{self, NewApproval, NewRevision};
use oedolog_core::analysis::{AnalysisError, CompressionChoices, StepChoices};

/// What the step choices may hold, for messages.
const STEP_FIELDS: &str = "taylor_window_min, primary_window_min, secondary_window_min ([from, to] in minutes), \
d0_mm, d100_mm, t50_min, t90_min, drainage (\"double\" or \"single\")";
/// What the curve choices may hold, for messages.
const CURVE_FIELDS: &str = "virgin_points_kpa, unload_reload_points_kpa ([σ′, σ′, …] kPa), max_curvature_kpa, \
sigma_p_kpa, sigma_v0_kpa";

/// The signed-in engineer's name, or why not.
fn engineer(caller: Option<&Extension<Caller>>) -> Result<String, ApiError> {
    match caller {
        Some(c) if c.role == Role::Engineer => Ok(c.name.clone()),
        Some(c) => Err(ApiError::NotEngineer(format!(
            "user `{}` is {}: only an engineer adjusts a reduction or approves a test",
            c.name,
            if c.role == Role::Viewer { "a viewer" } else { "an operator" }
        ))),
        None => Err(ApiError::NotEngineer(
            "adjusting and approving need a signed-in engineer: configure [[http.user]] with role = \"engineer\""
                .into(),
        )),
    }
}

/// A choice the core refused, as a 422 naming its field under `choices`.
fn refused(error: &AnalysisError) -> ApiError {
    match error {
        AnalysisError::InvalidParameter { name, value, allowed } => {
            ApiError::invalid(&format!("choices.{name}"), format!("{value} cannot be used here"), *allowed)
        }
        AnalysisError::TooFewPoints { what, needed, got } => {
            let field = what.split_whitespace().next().unwrap_or("choices");
            ApiError::invalid(&format!("choices.{field}"), format!("needs at least {needed} points, got {got}"), *what)
        }
        other => ApiError::invalid("choices", other.to_string(), "choices the test's readings allow"),
    }
}

/// The choices of a scope parsed and checked for shape; `Ok(JSON)` in the stored form.
fn parse_choices(seq: Option<i64>, choices: &Value) -> Result<String, ApiError> {
    let shape = |e: serde_json::Error, allowed: &str| ApiError::invalid("choices", e.to_string(), allowed);
    let text = match seq {
        Some(_) => {
            let c: StepChoices = serde_json::from_value(choices.clone()).map_err(|e| shape(e, STEP_FIELDS))?;
            if c.is_empty() {
                return Err(ApiError::invalid(
                    "choices",
                    "nothing chosen (to go back to the proposal, withdraw the revision)",
                    STEP_FIELDS,
                ));
            }
            serde_json::to_string(&c)
        }
        None => {
            let c: CompressionChoices = serde_json::from_value(choices.clone()).map_err(|e| shape(e, CURVE_FIELDS))?;
            if c.is_empty() {
                return Err(ApiError::invalid(
                    "choices",
                    "nothing chosen (to go back to the proposal, withdraw the revision)",
                    CURVE_FIELDS,
                ));
            }
            serde_json::to_string(&c)
        }
    };
    text.map_err(|e| ApiError::Internal(format!("choices: {e}")))
}

/// The values of a scope in a reduced test.
fn scope_values(summary: &TestSummary, seq: Option<i64>) -> Value {
    match seq {
        Some(seq) => summary
            .increments
            .iter()
            .find(|i| i.row.seq == seq)
            .map_or(Value::Null, |i| serde_json::to_value(i.values()).unwrap_or(Value::Null)),
        None => serde_json::to_value(CurveValues::of(summary.compression.as_ref())).unwrap_or(Value::Null),
    }
}

/// Checks `seq` names a counted load step of `summary`.
fn check_step(summary: &TestSummary, seq: i64) -> Result<(), ApiError> {
    match summary.increments.iter().find(|i| i.row.seq == seq) {
        None => Err(ApiError::invalid(
            "seq",
            format!("test {} has no load step {seq}", summary.test.id),
            "a load step of the test",
        )),
        Some(i) if i.row.void.is_some() => Err(ApiError::invalid(
            "seq",
            format!("load step {seq} is void: restore it before adjusting it"),
            "a load step that is not void",
        )),
        Some(_) => Ok(()),
    }
}

/// The trial reduction's verdict on a scope's choices: the core's refusal as a 422, or a choice that
/// changed nothing.
fn check_trial(trial: &TestSummary, seq: Option<i64>) -> Result<Vec<&'static str>, ApiError> {
    match seq {
        Some(seq) => {
            let step = trial.increments.iter().find(|i| i.row.seq == seq);
            if let Some(error) = step.and_then(|s| s.curve_refused_error.as_ref()) {
                return Err(refused(error));
            }
            let adjusted = step.map(|s| s.adjusted.clone()).unwrap_or_default();
            if adjusted.is_empty() {
                return Err(ApiError::invalid(
                    "choices",
                    format!("none of these choices applies to load step {seq} (it has no time curve to reduce yet?)"),
                    STEP_FIELDS,
                ));
            }
            Ok(adjusted)
        }
        None => {
            if let Some(error) = &trial.compression_refused {
                return Err(refused(error));
            }
            if trial.compression.is_none() {
                let why = trial.compression_unavailable.clone().unwrap_or_default();
                return Err(ApiError::invalid(
                    "seq",
                    format!("the test has no e–log σ′ curve to adjust: {why}"),
                    "a test with a curve",
                ));
            }
            Ok(trial.review.compression_adjusted.clone())
        }
    }
}

/// `POST /api/tests/{id}/revisions`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct NewRevisionBody {
    /// The load step; absent or null for the e–log σ′ curve.
    #[serde(default)]
    seq: Option<i64>,
    /// The choices (see `STEP_FIELDS`, `CURVE_FIELDS`).
    choices: Value,
    /// Why (1–500 characters).
    reason: String,
}

async fn revise(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<NewRevisionBody>,
) -> Result<(StatusCode, Json<Value>), ApiError> {
    let who = engineer(caller.as_ref())?;
    let id = test_id(&id)?;
    let reason = typed_text("reason", &body.reason, 1, 500, true)?;
    let seq = body.seq;
    let choices = parse_choices(seq, &body.choices)?;
    let now = state.clock.now_us();
    let (current, trial) = trial(&state, id, seq, Some(choices.clone())).await?;
    if let Some(seq) = seq {
        check_step(&current, seq)?;
    }
    let adjusted = check_trial(&trial, seq)?;
    let (before, after) = (scope_values(&current, seq), scope_values(&trial, seq));
    let scope = seq.map_or("the e–log σ′ curve".to_string(), |s| format!("load step {s}"));
    let message = format!("test {id}, {scope}: {} adjusted by {who}: {reason}", adjusted.join(", "));
    let revision = NewRevision {
        test_id: id,
        frame_key: current.test.frame_key,
        seq,
        choices: Some(choices),
        withdraws: None,
        reason,
        actor: who,
        at_us: now,
        before: before.to_string(),
        after: after.to_string(),
        message,
    };
    let done = state.blocking(move |state| Ok(review::add_revision(&state.writer, revision)?)).await?;
    let body = json!({ "revision": done.id, "withdrew_approval": done.withdrew_approval, "adjusted": adjusted, "before": before, "after": after });
    Ok((StatusCode::CREATED, Json(body)))
}

/// The test reduced as it stands and with `choices` in force for scope `seq` (`None` choices: the scope
/// back to what an earlier revision, or the proposal, gives).
async fn trial(
    state: &AppState,
    id: i64,
    seq: Option<i64>,
    choices: Option<String>,
) -> Result<(TestSummary, TestSummary), ApiError> {
    let (now, commits, caches, frames) =
        (state.clock.now_us(), state.writer.commits(), state.caches.clone(), state.frames.clone());
    state
        .read(move |conn| {
            let current = queries::reduce_test(conn, &caches, commits, id, now, &frames)?;
            let trial = queries::reduce_test_trying(conn, &caches, commits, id, now, &frames, Some((seq, choices)))?;
            Ok((current, trial))
        })
        .await
}

/// `POST /api/tests/{id}/revisions/{rid}/withdraw`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct WithdrawBody {
    /// Why (1–500 characters).
    reason: String,
}

async fn withdraw(
    State(state): State<AppState>,
    Path((id, rid)): Path<(String, String)>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<WithdrawBody>,
) -> Result<(StatusCode, Json<Value>), ApiError> {
    let who = engineer(caller.as_ref())?;
    let id = test_id(&id)?;
    let rid: i64 = rid
        .parse()
        .ok()
        .filter(|r| *r > 0)
        .ok_or_else(|| ApiError::bad_query("rid", format!("`{rid}` is not a revision id"), "a positive integer"))?;
    let reason = typed_text("reason", &body.reason, 1, 500, true)?;
    // What the scope falls back to once `rid` is taken back: its latest other revision still in force.
    let stored = state.read(move |conn| Ok(review::revisions(conn, id)?)).await?;
    let Some(target) = stored.iter().find(|r| r.id == rid).cloned() else {
        return Err(ApiError::NotFound(format!("test {id} has no revision {rid}")));
    };
    let mut after_withdrawal = stored.clone();
    after_withdrawal.push(review::StoredRevision {
        id: i64::MAX,
        withdraws: Some(rid),
        choices: None,
        ..target.clone()
    });
    let fallback =
        review::in_force(&after_withdrawal).into_iter().find(|r| r.seq == target.seq).and_then(|r| r.choices.clone());
    let seq = target.seq;
    let (current, trial) = trial(&state, id, seq, fallback).await?;
    let (before, after) = (scope_values(&current, seq), scope_values(&trial, seq));
    let scope = seq.map_or("the e–log σ′ curve".to_string(), |s| format!("load step {s}"));
    let revision = NewRevision {
        test_id: id,
        frame_key: current.test.frame_key,
        seq,
        choices: None,
        withdraws: Some(rid),
        reason: reason.clone(),
        actor: who.clone(),
        at_us: state.clock.now_us(),
        before: before.to_string(),
        after: after.to_string(),
        message: format!("test {id}, {scope}: revision {rid} withdrawn by {who}: {reason}"),
    };
    let done = state.blocking(move |state| Ok(review::add_revision(&state.writer, revision)?)).await?;
    let body =
        json!({ "revision": done.id, "withdrew_approval": done.withdrew_approval, "before": before, "after": after });
    Ok((StatusCode::CREATED, Json(body)))
}

/// `POST /api/tests/{id}/preview`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct PreviewBody {
    #[serde(default)]
    seq: Option<i64>,
    choices: Value,
}

async fn preview(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<PreviewBody>,
) -> Result<Json<Value>, ApiError> {
    engineer(caller.as_ref())?;
    let id = test_id(&id)?;
    let seq = body.seq;
    let choices = parse_choices(seq, &body.choices)?;
    let (current, trial) = trial(&state, id, seq, Some(choices)).await?;
    if let Some(seq) = seq {
        check_step(&current, seq)?;
    }
    let adjusted = check_trial(&trial, seq)?;
    let out = match seq {
        Some(seq) => {
            let step = trial.increments.into_iter().find(|i| i.row.seq == seq);
            let reduction = step.as_ref().and_then(|s| s.curve.clone());
            json!({
                "seq": seq,
                "adjusted": adjusted,
                "values": step.as_ref().map(|s| s.values()),
                "proposal": scope_values(&current, Some(seq)),
                "constructions": reduction.as_ref().map(constructions),
                "reduction": reduction,
            })
        }
        None => json!({
            "adjusted": adjusted,
            "values": CurveValues::of(trial.compression.as_ref()),
            "proposal": scope_values(&current, None),
            "compression": trial.compression,
        }),
    };
    Ok(Json(out))
}

/// `POST /api/tests/{id}/approve` (the body is optional).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ApproveBody {
    /// The engineer's note (up to 1000 characters).
    #[serde(default)]
    note: Option<String>,
}

async fn approve(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    OptionalJsonBody(body): OptionalJsonBody<ApproveBody>,
) -> Result<(StatusCode, Json<Value>), ApiError> {
    let who = engineer(caller.as_ref())?;
    let id = test_id(&id)?;
    let note = typed_text("note", body.and_then(|b| b.note).as_deref().unwrap_or(""), 0, 1000, true)?;
    let summary = state.reduce_test(id).await?;
    let finished: Vec<&queries::IncrementSummary> = summary
        .increments
        .iter()
        .filter(|i| {
            let ended = i.row.ready_at.is_some() || i.row.ended_at.is_some();
            i.row.void.is_none() && ended && i.settlement_mm.is_some()
        })
        .collect();
    if finished.is_empty() {
        return Err(ApiError::Conflict(format!(
            "test {id} has no finished load step to approve (one with readings that reached its end of primary or ended)"
        )));
    }
    let covered: Vec<i64> = finished.iter().map(|i| i.row.seq).collect();
    let frozen = json!({
        "load_steps": summary.increments.iter().filter(|i| covered.contains(&i.row.seq)).map(|i| json!({
            "seq": i.row.seq,
            "stress_kpa": i.row.stress_kpa,
            "values": i.values(),
            "cv_method": i.cv_method,
            "adjusted": i.adjusted,
        })).collect::<Vec<_>>(),
        "curve": CurveValues::of(summary.compression.as_ref()),
        "curve_adjusted": summary.review.compression_adjusted,
        "e0": summary.compression.as_ref().map(|c| c.e0),
        "points": summary.compression.as_ref().map(|c| c.points.iter().map(|p| json!([p.stress_kpa, p.e])).collect::<Vec<_>>()),
    });
    let in_force: Vec<i64> = summary.review.revisions.iter().filter(|r| r.in_force).map(|r| r.id).collect();
    let at_us = state.clock.now_us();
    let steps = match (covered.first(), covered.last()) {
        (Some(a), Some(b)) if a != b => format!("load steps {a}–{b}"),
        (Some(a), _) => format!("load step {a}"),
        _ => String::new(),
    };
    let adjustments =
        if in_force.is_empty() { "no adjustments".to_string() } else { format!("{} adjustment(s)", in_force.len()) };
    let message = format!(
        "test {id} reviewed and approved by {who} ({steps}, {adjustments}){}",
        if note.is_empty() { String::new() } else { format!(": {note}") }
    );
    let approval = NewApproval {
        test_id: id,
        frame_key: summary.test.frame_key,
        actor: who.clone(),
        at_us,
        note,
        revisions: json!(in_force).to_string(),
        frozen: frozen.to_string(),
        message,
    };
    let approval_id = state.blocking(move |state| Ok(review::approve(&state.writer, approval)?)).await?;
    let body = json!({
        "approval": approval_id,
        "approved_by": who,
        "approved_at": crate::clock::rfc3339(at_us),
        "load_steps": covered,
        "revisions": in_force,
    });
    Ok((StatusCode::CREATED, Json(body)))
}

pub(super) fn router() -> Router<AppState> {
    Router::new()
        .route("/api/tests/{id}/revisions", post(revise))
        .route("/api/tests/{id}/revisions/{rid}/withdraw", post(withdraw))
        .route("/api/tests/{id}/preview", post(preview))
        .route("/api/tests/{id}/approve", post(approve))
}
