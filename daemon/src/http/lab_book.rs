//! Tests on a frame: start one with its specimen data (`POST /api/frames/{id}/tests`), finish the running
//! one, read a test with its increments, and its e–log σ′ reduction (`GET /api/tests/{id}/compression`).
//! SpecimenRecord data is checked here, in full, before anything is stored.

use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::Json;
use axum::routing::{get, post};
use axum::{Extension, Router};
use serde::{Deserialize, Serialize};

use super::auth::{Caller, actor};
use super::body::{JsonBody, OptionalJsonBody};
use super::queries::{self, IncrementView, TestRow};
use super::{ApiError, AppState};
use crate::lab::{RunningTest, SpecimenRecord};
use crate::store::lab_book;

/// `POST /api/frames/{id}/tests`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct NewTest {
    /// SpecimenRecord / sample reference (1–100 characters).
    pub specimen: String,
    /// Soil description, borehole, depth (up to 500 characters).
    #[serde(default)]
    pub description: String,
    /// Initial height H0, mm (5–100).
    pub height_mm: f64,
    /// Ring inside diameter, mm (20–200).
    pub diameter_mm: f64,
    /// Dry mass of the solids, g (> 0).
    pub dry_mass_g: f64,
    /// Specific gravity of the solids Gs (2.0–3.2).
    pub specific_gravity: f64,
    /// Seating stress, kPa (0.5–100).
    pub seating_kpa: f64,
    /// Initial water content as a ratio (0–5), optional.
    pub initial_water_content: Option<f64>,
    /// Final water content as a ratio (0–5), optional.
    pub final_water_content: Option<f64>,
}

/// A remark on accepted specimen data.
#[derive(Debug, Serialize, PartialEq)]
pub(crate) struct Warning {
    /// Machine name.
    pub code: &'static str,
    /// The field it concerns.
    pub field: &'static str,
    /// What a person reads.
    pub message: String,
}

fn in_range(field: &str, value: f64, low: f64, high: f64, unit: &str) -> Result<f64, ApiError> {
    if value.is_finite() && value >= low && value <= high {
        Ok(value)
    } else {
        Err(ApiError::invalid(field, format!("{value} is out of range"), format!("{low} to {high}{unit}")))
    }
}

/// Checks a new test's data; the warnings do not refuse it.
pub(crate) fn validate(t: &NewTest) -> Result<Vec<Warning>, ApiError> {
    if t.specimen.trim().is_empty() {
        return Err(ApiError::invalid("specimen", "must name the specimen", "1 to 100 characters"));
    }
    super::body::typed_text("specimen", &t.specimen, 1, 100, false)?;
    super::body::typed_text("description", &t.description, 0, 500, true)?;
    in_range("height_mm", t.height_mm, 5.0, 100.0, " mm")?;
    in_range("diameter_mm", t.diameter_mm, 20.0, 200.0, " mm")?;
    if !(t.dry_mass_g.is_finite() && t.dry_mass_g > 0.0) {
        return Err(ApiError::invalid("dry_mass_g", format!("{} is not allowed", t.dry_mass_g), "a mass > 0 g"));
    }
    in_range("specific_gravity", t.specific_gravity, 2.0, 3.2, "")?;
    in_range("seating_kpa", t.seating_kpa, 0.5, 100.0, " kPa")?;
    if let Some(w) = t.initial_water_content {
        in_range("initial_water_content", w, 0.0, 5.0, " (a ratio: 0.35 = 35 %)")?;
    }
    if let Some(w) = t.final_water_content {
        in_range("final_water_content", w, 0.0, 5.0, " (a ratio: 0.35 = 35 %)")?;
    }
    // The solids must fit in the specimen: Hs = Ms/(Gs·ρw·A) < H0, else e0 ≤ 0 (phase relations).
    let area_mm2 = std::f64::consts::PI * t.diameter_mm * t.diameter_mm / 4.0;
    let solids_height_mm = t.dry_mass_g * 1000.0 / (t.specific_gravity * area_mm2);
    if solids_height_mm >= t.height_mm {
        return Err(ApiError::invalid(
            "dry_mass_g",
            format!("{} g of solids would stand {solids_height_mm:.2} mm high, above the specimen", t.dry_mass_g),
            format!("a dry mass whose height of solids is below the {} mm specimen (e0 > 0)", t.height_mm),
        ));
    }
    let mut warnings = Vec::new();
    let ratio = t.diameter_mm / t.height_mm;
    // Diameter at least 2.5 times the height limits side friction [ref: specimen-dimensions] (the anchors
    // are in daemon/core/REFERENCES.md).
    if ratio < 2.5 {
        warnings.push(Warning {
            code: "diameter-height-ratio-low",
            field: "diameter_mm",
            message: format!("diameter/height = {ratio:.2}, below the usual minimum of 2.5: ring friction may matter"),
        });
    }
    Ok(warnings)
}

/// The answer to a started test.
#[derive(Debug, Serialize)]
struct Started {
    test: RunningTest,
    warnings: Vec<Warning>,
}

async fn start(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(new): JsonBody<NewTest>,
) -> Result<(StatusCode, Json<Started>), ApiError> {
    let index = state.frame_index(&id)?;
    let warnings = validate(&new)?;
    let who = actor(caller.as_ref());
    let test = state
        .blocking(move |state| {
            if let Some(t) = state.lab.snapshot()[index].as_ref() {
                return Err(ApiError::Conflict(format!(
                    "test {} ({}) runs on frame `{id}`: finish it first",
                    t.test_id, t.specimen
                )));
            }
            let specimen = SpecimenRecord {
                specimen: new.specimen.trim().to_string(),
                description: new.description.trim().to_string(),
                height_mm: new.height_mm,
                diameter_mm: new.diameter_mm,
                dry_mass_g: Some(new.dry_mass_g),
                specific_gravity: Some(new.specific_gravity),
            };
            let test = state.hub.start_test(index, specimen, new.seating_kpa, who)?;
            let (w0, wf, test_id) = (new.initial_water_content, new.final_water_content, test.test_id);
            if w0.is_some() || wf.is_some() {
                lab_book::set_water_contents(&state.writer, test_id, w0, wf)?;
            }
            Ok(test)
        })
        .await?;
    Ok((StatusCode::CREATED, Json(Started { test, warnings })))
}

/// `POST /api/frames/{id}/tests/current/finish` (the body is optional).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Finish {
    /// Why, for the journal (up to 500 characters).
    reason: Option<String>,
}

async fn finish(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    OptionalJsonBody(body): OptionalJsonBody<Finish>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let index = state.frame_index(&id)?;
    let reason = body.and_then(|b| b.reason).unwrap_or_default();
    let reason = super::body::typed_text("reason", &reason, 0, 500, true)?;
    let who = actor(caller.as_ref());
    let key = state.lab.key(index);
    let test_id = state
        .blocking(move |state| {
            let Some(test) = state.lab.snapshot()[index].clone() else {
                return Err(ApiError::Conflict(format!("no test runs on frame `{id}`")));
            };
            let why = match (reason.trim(), who.as_deref()) {
                ("", Some(w)) => format!("finished by {w}"),
                ("", None) => "finished by the operator".to_string(),
                (r, _) => r.to_string(),
            };
            state.hub.finish_test(index, &why)?;
            // The lab book journals the finish without an actor; name the user on that entry.
            if let Some(who) = who {
                lab_book::name_finisher(&state.writer, key, who)?;
            }
            Ok(test.test_id)
        })
        .await?;
    Ok(Json(serde_json::json!({ "test_id": test_id, "state": "finished" })))
}

/// `GET /api/tests/{id}`.
#[derive(Debug, Serialize)]
struct TestDetail {
    test: TestRow,
    increments: Vec<IncrementView>,
    /// The engineer whose approval is in force, or null.
    approved_by: Option<String>,
    /// When, RFC 3339 UTC, or null.
    approved_at: Option<String>,
    /// Every revision (adjustment or withdrawal), oldest first.
    revisions: Vec<queries::RevisionView>,
    /// Every approval, oldest first, withdrawn ones marked.
    approvals: Vec<queries::ApprovalView>,
}

pub(crate) fn test_id(text: &str) -> Result<i64, ApiError> {
    text.parse::<i64>()
        .ok()
        .filter(|id| *id > 0)
        .ok_or_else(|| ApiError::bad_query("id", format!("`{text}` is not a test id"), "a positive integer"))
}

async fn get_test(State(state): State<AppState>, Path(id): Path<String>) -> Result<Json<TestDetail>, ApiError> {
    let id = test_id(&id)?;
    let detail = state
        .read(move |conn| {
            let test = queries::test(conn, id)?;
            let (review, _) = queries::review_of(conn, id)?;
            Ok(TestDetail {
                test,
                increments: queries::increments(conn, id)?,
                approved_by: review.approval.as_ref().map(|a| a.by.clone()),
                approved_at: review.approval.as_ref().map(|a| a.at.clone()),
                revisions: review.revisions,
                approvals: review.approvals,
            })
        })
        .await?;
    Ok(Json(detail))
}

async fn compression(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<queries::TestSummary>, ApiError> {
    let id = test_id(&id)?;
    Ok(Json(state.reduce_test(id).await?))
}

pub(super) fn router() -> Router<AppState> {
    Router::new()
        .route("/api/frames/{id}/tests", post(start))
        .route("/api/frames/{id}/tests/current/finish", post(finish))
        .route("/api/tests/{id}", get(get_test))
        .route("/api/tests/{id}/compression", get(compression))
}
