//! Alarms: `GET /api/alarms` (the open ones from the board; `?state=all` adds the closed ones from the
//! store, newest first) and `POST /api/alarms/{id}/acknowledge` (an operator says someone is on it; the
//! alarm stays open until its condition is gone, then clears by itself).

use std::collections::HashMap;

use axum::extract::{Path, Query, State};
use axum::response::Json;
use axum::routing::{get, post};
use axum::{Extension, Router};
use serde::Serialize;

use super::auth::{Caller, actor};
use super::increments::{int_param, only_params};
use super::{ApiError, AppState};
use crate::alarms::AlarmView;
use crate::alarms::task::{AckError, acknowledge};
use crate::clock::rfc3339;
use crate::store::alarms::history;
use oedolog_core::alarms::Code;

/// One alarm of the store, open or closed.
#[derive(Debug, Serialize)]
struct StoredAlarm {
    id: i64,
    code: String,
    frame: Option<String>,
    bus: Option<String>,
    outlet: Option<String>,
    message: String,
    raised_at: String,
    acknowledged_by: Option<String>,
    acknowledged_at: Option<String>,
    cleared_at: Option<String>,
    open: bool,
}

async fn list(
    State(state): State<AppState>,
    Query(query): Query<HashMap<String, String>>,
) -> Result<Json<serde_json::Value>, ApiError> {
    only_params(&query, &["state", "limit"])?;
    let limit = int_param(&query, "limit", 200, 1, 1000)?;
    match query.get("state").map(String::as_str) {
        None | Some("open") => Ok(Json(serde_json::to_value(state.alarms.open()).unwrap_or_default())),
        Some("all") => {
            let rows = state
                .read(move |conn| {
                    let rows = history(conn, limit)?.into_iter().map(|a| {
                        let (bus, outlet) = match Code::from_name(&a.code) {
                            Some(code) => crate::alarms::place(code, a.bus),
                            None => (a.bus, None),
                        };
                        StoredAlarm {
                            id: a.id,
                            code: a.code,
                            frame: a.frame,
                            bus,
                            outlet,
                            message: a.message,
                            raised_at: rfc3339(a.raised_us),
                            acknowledged_by: a.acknowledged_by,
                            acknowledged_at: a.acknowledged_us.map(rfc3339),
                            cleared_at: a.cleared_us.map(rfc3339),
                            open: a.cleared_us.is_none(),
                        }
                    });
                    Ok(rows.collect::<Vec<_>>())
                })
                .await?;
            Ok(Json(serde_json::to_value(rows).unwrap_or_default()))
        }
        Some(other) => Err(ApiError::bad_query("state", format!("`{other}` is not an alarm state"), "open, all")),
    }
}

async fn ack(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
) -> Result<Json<AlarmView>, ApiError> {
    let id: i64 = id
        .parse()
        .ok()
        .filter(|n| *n > 0)
        .ok_or_else(|| ApiError::bad_query("id", format!("`{id}` is not an alarm id"), "a whole number ≥ 1"))?;
    // Without configured users (loopback only) nobody is named; the journal says so.
    let who = actor(caller.as_ref()).unwrap_or_else(|| "an unnamed local user".into());
    let now = state.clock.now_us();
    let view = state
        .blocking(move |state| {
            acknowledge(&state.writer, &state.alarms, id, who, now).map_err(|e| match e {
                AckError::NotFound(_) => ApiError::NotFound(e.to_string()),
                AckError::Closed(..) => ApiError::Conflict(e.to_string()),
                AckError::Store(s) => ApiError::from(s),
            })
        })
        .await?;
    Ok(Json(view))
}

pub(super) fn router() -> Router<AppState> {
    Router::new().route("/api/alarms", get(list)).route("/api/alarms/{id}/acknowledge", post(ack))
}
