//! Increments of the running test and the frame's journal notes: arm the next load by stress or hanger mass,
//! say the load went on, answer a gauge re-seat, add a note; read an increment's readings thinned in
//! log-time bins and its analysis with the constructions. Arming records what a person will put on the
//! frame: oedolog never changes a load itself.

use axum::extract::{Path, Query, State};
use axum::http::StatusCode;
use axum::response::Json;
use axum::routing::{get, post};
use axum::{Extension, Router};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

use super::auth::{Caller, actor};
use super::body::JsonBody;
use super::cache::IncrementStamp;
use super::frames::json_bytes;
use super::queries::{self, IncrementSummary, IncrementView, Poll, TestRow};
use super::{ApiError, AppState};
use crate::clock::rfc3339;
use crate::config::Loading;
use crate::store::lab_book::{self, Step};
use crate::store::{Event, EventKind, Reader, journal};
use axum::body::Bytes;
use oedolog_core::analysis::IncrementReduction;

use oedolog_core::quantity::{FrameCapacity, MAX_HANGER_KG, check_stress};
pub use oedolog_core::quantity::{STANDARD_GRAVITY_M_PER_S2, hanger_stress_kpa};

/// `POST /api/frames/{id}/increments`: exactly one of the two.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct Arm {
    /// Target effective vertical stress, kPa.
    pub stress_kpa: Option<f64>,
    /// Total mass on the hanger, kg (dead-weight frames: stress = m·g·lever ratio / ring area).
    pub hanger_mass_kg: Option<f64>,
}

/// What frame `frame` can put on its specimen (the shared rule of `oedolog_core::quantity`).
pub(crate) fn frame_capacity(frame: &crate::config::Frame) -> Option<FrameCapacity> {
    let lever = match frame.loading {
        Loading::DeadWeight { lever_ratio } => Some(lever_ratio),
        Loading::Pneumatic | Loading::Motor => None,
    };
    FrameCapacity::of(frame.ring_area_mm2, frame.load.as_ref().map(|l| l.range.end), lever)
}

#[derive(Debug, Serialize)]
struct Armed {
    frame: String,
    seq: i64,
    stress_kpa: f64,
    from_kpa: Option<f64>,
    hanger_mass_kg: Option<f64>,
    note: &'static str,
}

async fn arm(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<Arm>,
) -> Result<(StatusCode, Json<Armed>), ApiError> {
    let index = state.frame_index(&id)?;
    let frame = &state.frames[index];
    let capacity = frame_capacity(frame);
    let stress_kpa = match (body.stress_kpa, body.hanger_mass_kg) {
        (Some(s), None) => check_stress(s, capacity.as_ref())
            .map_err(|r| ApiError::invalid("stress_kpa", format!("{} kPa is not allowed", r.value), r.allowed))?,
        (None, Some(m)) => {
            let Loading::DeadWeight { lever_ratio } = frame.loading else {
                return Err(ApiError::invalid(
                    "hanger_mass_kg",
                    format!("frame `{id}` has no hanger (it is not a dead-weight frame)"),
                    "stress_kpa on this frame",
                ));
            };
            if !(m.is_finite() && m > 0.0 && m <= MAX_HANGER_KG) {
                return Err(ApiError::invalid("hanger_mass_kg", format!("{m} is out of range"), "0 < mass ≤ 2000 kg"));
            }
            let s = hanger_stress_kpa(m, lever_ratio, frame.ring_area_mm2);
            check_stress(s, capacity.as_ref()).map_err(|r| {
                ApiError::invalid(
                    "hanger_mass_kg",
                    format!("{m} kg gives {s:.1} kPa"),
                    format!("a mass giving {}", r.allowed),
                )
            })?
        }
        _ => {
            return Err(ApiError::invalid(
                "stress_kpa",
                "give the stress or the hanger mass",
                "exactly one of stress_kpa, hanger_mass_kg",
            ));
        }
    };
    let who = actor(caller.as_ref());
    let hanger_mass_kg = body.hanger_mass_kg;
    let armed = state
        .blocking(move |state| {
            if state.lab.snapshot()[index].is_none() {
                return Err(ApiError::Conflict(format!("no test runs on frame `{id}`: start one first")));
            }
            state.hub.arm(index, stress_kpa, who)?;
            let test =
                state.lab.snapshot()[index].clone().ok_or_else(|| ApiError::Conflict("the test ended".into()))?;
            Ok(Armed {
                frame: id,
                seq: test.increment,
                stress_kpa,
                from_kpa: test.from_kpa,
                hanger_mass_kg,
                note: "armed: put the load on the frame; oedolog finds t0 from the readings and never changes the load",
            })
        })
        .await?;
    Ok((StatusCode::CREATED, Json(armed)))
}

async fn applied(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let index = state.frame_index(&id)?;
    let who = actor(caller.as_ref());
    let key = state.lab.key(index);
    let now = state.clock.now_us();
    let (test_id, seq) = state
        .blocking(move |state| {
            let Some(test) = state.lab.snapshot()[index].clone() else {
                return Err(ApiError::Conflict(format!("no test runs on frame `{id}`")));
            };
            if test.increment == 0 {
                return Err(ApiError::Conflict(format!("frame `{id}` has no armed increment: arm one first")));
            }
            let (test_id, seq) = (test.test_id, test.increment);
            let message =
                format!("load step {seq}: the operator reports the load is on (t0 is still found from the readings)");
            lab_book::report_load(&state.writer, Step { test_id, frame_key: key, seq }, now, who, message)?;
            Ok((test_id, seq))
        })
        .await?;
    Ok(Json(serde_json::json!({ "test_id": test_id, "seq": seq, "reported_at": rfc3339(now) })))
}

/// `POST /api/frames/{id}/increments/current/withdraw` (body `{}`): the armed step goes, if its load has
/// not gone on.
async fn withdraw(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(_): JsonBody<Empty>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let index = state.frame_index(&id)?;
    let who = actor(caller.as_ref());
    let (seq, test) = state
        .blocking(move |state| {
            if state.lab.snapshot()[index].is_none() {
                return Err(ApiError::Conflict(format!("no test runs on frame `{id}`")));
            }
            let seq = state.hub.withdraw(index, who)?;
            Ok((seq, state.lab.snapshot()[index].clone()))
        })
        .await?;
    Ok(Json(serde_json::json!({
        "frame": state.frames[index].id,
        "withdrawn": seq,
        "state": test.as_ref().map(|t| t.state),
        "increment": test.as_ref().map(|t| t.increment),
    })))
}

/// An empty object, the body of actions that take no values.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Empty {}

/// `POST /api/frames/{id}/increments/{seq}/void`: the step is kept and shown, and left out of the
/// reduction.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Void {
    /// Why, for the journal and the report: 3–500 characters.
    reason: String,
}

async fn void(
    State(state): State<AppState>,
    Path((id, seq)): Path<(String, String)>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<Void>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let reason = super::body::typed_text("reason", &body.reason, 3, 500, false)?;
    set_void(state, id, seq, Some(reason), caller).await
}

/// `POST /api/frames/{id}/increments/{seq}/restore` (body `{}`): a void step counts again.
async fn restore(
    State(state): State<AppState>,
    Path((id, seq)): Path<(String, String)>,
    caller: Option<Extension<Caller>>,
    JsonBody(_): JsonBody<Empty>,
) -> Result<Json<serde_json::Value>, ApiError> {
    set_void(state, id, seq, None, caller).await
}

async fn set_void(
    state: AppState,
    id: String,
    seq: String,
    reason: Option<String>,
    caller: Option<Extension<Caller>>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let index = state.frame_index(&id)?;
    let seq = seq_of(&seq)?;
    let who = actor(caller.as_ref());
    let void = reason.is_some();
    state.blocking(move |state| Ok(state.hub.set_void(index, seq, reason, who)?)).await?;
    Ok(Json(serde_json::json!({ "frame": state.frames[index].id, "seq": seq, "void": void })))
}

/// `POST /api/frames/{id}/reseat`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Reseat {
    /// true: the jump was a re-seat, stitch the curve; false: the jump is real.
    accept: bool,
}

async fn reseat(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<Reseat>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let index = state.frame_index(&id)?;
    let who = actor(caller.as_ref());
    state.blocking(move |state| Ok(state.hub.resolve_reseat(index, body.accept, who)?)).await?;
    Ok(Json(serde_json::json!({ "frame": state.frames[index].id, "accepted": body.accept })))
}

/// `POST /api/frames/{id}/notes`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Note {
    /// 1–2000 characters.
    text: String,
}

async fn note(
    State(state): State<AppState>,
    Path(id): Path<String>,
    caller: Option<Extension<Caller>>,
    JsonBody(body): JsonBody<Note>,
) -> Result<(StatusCode, Json<queries::EventView>), ApiError> {
    let index = state.frame_index(&id)?;
    let text = super::body::typed_text("text", &body.text, 1, 2000, true)?;
    let who = actor(caller.as_ref());
    let key = state.lab.key(index);
    let now = state.clock.now_us();
    let (frame, message, actor) = (id.clone(), text.clone(), who.clone());
    let event_id = state
        .blocking(move |state| {
            let note = Event {
                at_us: now,
                frame_key: Some(key),
                kind: EventKind::Note,
                message: text,
                actor: who,
                data: None,
            };
            Ok(journal::append(&state.writer, note)?)
        })
        .await?;
    let view = queries::EventView {
        id: event_id,
        at: rfc3339(now),
        frame: Some(frame),
        kind: EventKind::Note,
        message,
        actor,
        data: None,
    };
    Ok((StatusCode::CREATED, Json(view)))
}

/// One point of a thinned time curve.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub(crate) struct BinPoint {
    /// Mean time since t0 of the readings in the bin, min.
    pub t_min: f64,
    /// Mean displacement, mm.
    pub displacement_mm: Option<f64>,
    /// Mean load, kN.
    pub load_kn: Option<f64>,
    /// Readings in the bin.
    pub count: usize,
}

/// One poll on the increment's clock: (t_min since t0, displacement mm, load kN).
pub(crate) type TimedPoll = (f64, Option<f64>, Option<f64>);

/// Thins `(t_min, d, load)` polls (time order) to at most `max_points` by log-time bins: equal widths in
/// log10 t between the first positive time and the last, so the early minutes keep their detail; t = 0
/// has its own bin. Each non-empty bin gives its mean.
pub(crate) fn log_time_bins(polls: &[TimedPoll], max_points: usize) -> Vec<BinPoint> {
    let single =
        |&(t, d, l): &(f64, Option<f64>, Option<f64>)| BinPoint { t_min: t, displacement_mm: d, load_kn: l, count: 1 };
    if polls.len() <= max_points || max_points < 2 {
        return polls.iter().map(single).collect();
    }
    let first_positive = polls.iter().map(|p| p.0).find(|t| *t > 0.0);
    let last = polls.last().map_or(0.0, |p| p.0);
    let Some(low) = first_positive else { return polls.iter().take(max_points).map(single).collect() };
    let bins = max_points - 1;
    let (log_low, log_high) = (low.log10(), last.max(low).log10());
    let width = ((log_high - log_low) / bins as f64).max(f64::MIN_POSITIVE);
    // (sum t, sum d, n d, sum load, n load, count) per bin; bin 0 is t ≤ 0.
    let mut sums = vec![(0.0, 0.0, 0usize, 0.0, 0usize, 0usize); bins + 1];
    for &(t, d, l) in polls {
        let bin =
            if t <= 0.0 { 0 } else { 1 + (((t.log10() - log_low) / width).floor().max(0.0) as usize).min(bins - 1) };
        let s = &mut sums[bin];
        s.0 += t;
        if let Some(d) = d {
            s.1 += d;
            s.2 += 1;
        }
        if let Some(l) = l {
            s.3 += l;
            s.4 += 1;
        }
        s.5 += 1;
    }
    sums.into_iter()
        .filter(|s| s.5 > 0)
        .map(|(t, d, nd, l, nl, n)| BinPoint {
            t_min: t / n as f64,
            displacement_mm: (nd > 0).then(|| d / nd as f64),
            load_kn: (nl > 0).then(|| l / nl as f64),
            count: n,
        })
        .collect()
}

/// The test an increment route on a frame refers to: the running one, else the frame's latest.
fn frame_test(conn: &Reader, key: i64, id: &str) -> Result<TestRow, ApiError> {
    queries::latest_test(conn, key)?.ok_or_else(|| ApiError::NotFound(format!("frame `{id}` has had no test")))
}

pub(crate) fn seq_of(text: &str) -> Result<i64, ApiError> {
    text.parse::<i64>()
        .ok()
        .filter(|s| *s > 0)
        .ok_or_else(|| ApiError::bad_query("seq", format!("`{text}` is not an increment number"), "1, 2, …"))
}

/// Refuses query parameters other than `allowed`.
pub(crate) fn only_params(query: &HashMap<String, String>, allowed: &[&str]) -> Result<(), ApiError> {
    match query.keys().find(|k| !allowed.contains(&k.as_str())) {
        Some(k) => Err(ApiError::bad_query(k, format!("unknown query parameter `{k}`"), allowed.join(", "))),
        None => Ok(()),
    }
}

/// A whole-number query parameter within `[low, high]`.
pub(crate) fn int_param(
    query: &HashMap<String, String>,
    name: &str,
    default: i64,
    low: i64,
    high: i64,
) -> Result<i64, ApiError> {
    match query.get(name) {
        None => Ok(default),
        Some(v) => v.parse::<i64>().ok().filter(|n| (low..=high).contains(n)).ok_or_else(|| {
            ApiError::bad_query(name, format!("`{v}` is not allowed"), format!("a whole number from {low} to {high}"))
        }),
    }
}

#[derive(Debug, Serialize)]
struct Readings {
    test_id: i64,
    seq: i64,
    stress_kpa: f64,
    onset_at: Option<String>,
    reading_count: usize,
    max_points: usize,
    points: Vec<BinPoint>,
}

/// The increment's polls as (t_min since t0, d, load), from t0 to its end.
pub(crate) fn increment_polls(
    conn: &Reader,
    test: &TestRow,
    inc: &IncrementView,
    now_us: i64,
) -> Result<Vec<TimedPoll>, ApiError> {
    let Some(onset) = inc.onset_us else { return Ok(Vec::new()) };
    let end = inc.ended_us.unwrap_or(now_us);
    let polls: Vec<Poll> = queries::polls(conn, test.frame_key, onset, end)?;
    Ok(polls.into_iter().map(|(at, d, l)| ((at - onset) as f64 / 6e7, d, l)).collect())
}

async fn readings(
    State(state): State<AppState>,
    Path((id, seq)): Path<(String, String)>,
    Query(query): Query<HashMap<String, String>>,
) -> Result<axum::response::Response, ApiError> {
    only_params(&query, &["max_points"])?;
    let max_points = int_param(&query, "max_points", 500, 2, 5000)? as usize;
    let index = state.frame_index(&id)?;
    let seq = seq_of(&seq)?;
    let key = state.lab.key(index);
    let now = state.clock.now_us();
    // Read before the database: a commit after this makes the answer built now stale, never wrong.
    let commits = state.writer.commits();
    let caches = state.caches.clone();
    let body = state
        .read(move |conn| {
            let test = frame_test(conn, key, &id)?;
            let inc = queries::increment(conn, test.id, seq)?;
            let stamp = IncrementStamp::of(&inc, commits);
            caches.readings.get_or_build(&(test.id, seq, max_points), &stamp, |_| {
                let polls = caches.increment_polls(conn, &test, &inc, &stamp, now)?;
                let onset = inc.onset_us.unwrap_or(0);
                let timed: Vec<TimedPoll> = polls.iter().map(|&(at, d, l)| ((at - onset) as f64 / 6e7, d, l)).collect();
                let out = Readings {
                    test_id: test.id,
                    seq,
                    stress_kpa: inc.stress_kpa,
                    onset_at: inc.onset_at.clone(),
                    reading_count: timed.len(),
                    max_points,
                    points: log_time_bins(&timed, max_points),
                };
                serde_json::to_vec(&out).map(Bytes::from).map_err(|e| ApiError::Internal(format!("readings: {e}")))
            })
        })
        .await?;
    json_bytes(body)
}

/// A straight segment to draw, in the axes of its plot.
#[derive(Debug, Serialize)]
pub(crate) struct Segment {
    /// What it is.
    pub name: &'static str,
    /// Start (x, y).
    pub from: [f64; 2],
    /// End (x, y).
    pub to: [f64; 2],
}

/// A marked point.
#[derive(Debug, Serialize)]
pub(crate) struct Marker {
    /// What it is (`d0`, `t90`, …).
    pub name: &'static str,
    /// x in the plot's axis.
    pub x: f64,
    /// Displacement, mm.
    pub y: f64,
}

/// One plot's construction.
#[derive(Debug, Serialize)]
pub(crate) struct Plot {
    /// The x axis: `sqrt_t_min` (√min) or `log10_t_min`.
    pub x_axis: &'static str,
    /// The thinned curve, (x, displacement mm).
    pub points: Vec<[f64; 2]>,
    /// Lines of the construction.
    pub lines: Vec<Segment>,
    /// Points of the construction.
    pub markers: Vec<Marker>,
}

/// What the dashboard draws for an increment: the √t (Taylor) and log-t (Casagrande) constructions.
#[derive(Debug, Serialize)]
pub(crate) struct Constructions {
    /// √t plot.
    pub sqrt_time: Plot,
    /// log t plot.
    pub log_time: Plot,
}

/// Builds the drawable constructions from a reduction.
pub(crate) fn constructions(r: &IncrementReduction) -> Constructions {
    let t_end = r.nodes.last().map_or(1.0, |n| n.t_min).max(1e-3);
    let mut sqrt_lines = Vec::new();
    let sqrt_end = t_end.sqrt();
    if let Some(s) = &r.taylor.straight {
        sqrt_lines.push(Segment {
            name: "taylor-straight",
            from: [0.0, s.line.at(0.0)],
            to: [sqrt_end, s.line.at(sqrt_end)],
        });
    }
    if let Some(l) = &r.taylor.construction_line {
        sqrt_lines.push(Segment {
            name: "taylor-construction",
            from: [0.0, l.at(0.0)],
            to: [sqrt_end, l.at(sqrt_end)],
        });
    }
    let mut sqrt_markers = Vec::new();
    if let Some(d0) = r.taylor.d0_mm {
        sqrt_markers.push(Marker { name: "d0", x: 0.0, y: d0 });
    }
    if let (Some(t), Some(d)) = (r.taylor.t90_min, r.taylor.d90_mm) {
        sqrt_markers.push(Marker { name: "t90", x: t.sqrt(), y: d });
    }
    if let (Some(t), Some(d)) = (r.taylor.t50_min, r.taylor.d50_mm) {
        sqrt_markers.push(Marker { name: "t50", x: t.sqrt(), y: d });
    }
    if let Some(d) = r.taylor.d100_mm {
        sqrt_lines.push(Segment { name: "d100", from: [0.0, d], to: [sqrt_end, d] });
    }
    let positive: Vec<_> = r.nodes.iter().filter(|n| n.t_min > 0.0).collect();
    let (log_start, log_end) = (positive.first().map_or(-2.0, |n| n.t_min.log10()), t_end.log10());
    let mut log_lines = Vec::new();
    if let Some(i) = &r.casagrande.inflection {
        log_lines.push(Segment {
            name: "inflection-tangent",
            from: [log_start, i.line.at(log_start)],
            to: [log_end, i.line.at(log_end)],
        });
    }
    if let Some(s) = &r.casagrande.secondary {
        log_lines.push(Segment {
            name: "secondary-line",
            from: [log_start, s.line.at(log_start)],
            to: [log_end, s.line.at(log_end)],
        });
    }
    let mut log_markers = Vec::new();
    for p in &r.casagrande.offset_pairs {
        log_markers.push(Marker { name: "offset-t1", x: p.t1_min.log10(), y: p.d1_mm });
        log_markers.push(Marker { name: "offset-4t1", x: p.t2_min.log10(), y: p.d2_mm });
    }
    if let Some(d0) = r.casagrande.d0_mm {
        log_markers.push(Marker { name: "d0", x: log_start, y: d0 });
    }
    if let (Some(t), Some(d)) = (r.casagrande.t50_min, r.casagrande.d50_mm) {
        log_markers.push(Marker { name: "t50", x: t.log10(), y: d });
    }
    if let (Some(t), Some(d)) = (r.casagrande.t100_min, r.casagrande.d100_mm) {
        log_markers.push(Marker { name: "d100", x: t.log10(), y: d });
    }
    Constructions {
        sqrt_time: Plot {
            x_axis: "sqrt_t_min",
            points: r.nodes.iter().map(|n| [n.t_min.max(0.0).sqrt(), n.d_mm]).collect(),
            lines: sqrt_lines,
            markers: sqrt_markers,
        },
        log_time: Plot {
            x_axis: "log10_t_min",
            points: positive.iter().map(|n| [n.t_min.log10(), n.d_mm]).collect(),
            lines: log_lines,
            markers: log_markers,
        },
    }
}

#[derive(Debug, Serialize)]
struct Analysis {
    test_id: i64,
    seq: i64,
    stress_kpa: f64,
    running: bool,
    /// Where the reduction came from: `live-watch` (the running increment, as the watch sees it, re-seats
    /// stitched) or `stored-readings` (the increment's readings reduced now).
    source: &'static str,
    /// The cv the step's checks trust (`reduction.cv_choice`), mm²/min; null when neither construction holds.
    cv_mm2_per_min: Option<f64>,
    /// `"taylor"` or `"casagrande"`; null with the flag `cv_not_chosen`.
    cv_method: Option<&'static str>,
    /// Why, in words.
    cv_reason: Option<String>,
    reduction: Option<IncrementReduction>,
    constructions: Option<Constructions>,
    unavailable: Option<String>,
    caution: &'static str,
}

/// The caution every analysis carries.
pub(crate) const CAUTION: &str =
    "Results are proposals for a qualified engineer to review; follow the governing standard and local codes.";

async fn analysis(
    State(state): State<AppState>,
    Path((id, seq)): Path<(String, String)>,
) -> Result<Json<Analysis>, ApiError> {
    let index = state.frame_index(&id)?;
    let seq = seq_of(&seq)?;
    let key = state.lab.key(index);
    let now = state.clock.now_us();
    let live = state.hub.reduction(index).filter(|(s, _)| *s == seq).map(|(_, r)| r);
    let commits = state.writer.commits();
    let caches = state.caches.clone();
    let frames = state.frames.clone();
    let out = state
        .read(move |conn| {
            let test = frame_test(conn, key, &id)?;
            let inc = queries::increment(conn, test.id, seq)?;
            let running = test.finished_at.is_none() && inc.ended_us.is_none();
            // A step an engineer adjusted is drawn as the adjusted reduction, which the live watch does not know.
            let adjusted = queries::review_of(conn, test.id)?.1.iter().any(|(s, _)| *s == Some(seq));
            let live = live.filter(|_| running && !adjusted);
            let source = if live.is_some() { "live-watch" } else { "stored-readings" };
            let (reduction, unavailable) = match live {
                Some(r) => (Some(r), None),
                // The stored increment as the test's one reduction gives it (its curve kept in the caches).
                None => {
                    let reduced = queries::reduce_test(conn, &caches, commits, test.id, now, &frames)?;
                    match reduced.increments.into_iter().find(|i| i.row.seq == seq) {
                        Some(IncrementSummary { curve: Some(r), .. }) => (Some(r), None),
                        Some(IncrementSummary { curve_refused: Some(why), .. }) => (None, Some(why)),
                        _ => (None, Some("no readings after the onset yet".to_string())),
                    }
                }
            };
            Ok(Analysis {
                test_id: test.id,
                seq,
                stress_kpa: inc.stress_kpa,
                running,
                source,
                cv_mm2_per_min: reduction.as_ref().and_then(|r| r.cv_choice.cv_mm2_per_min),
                cv_method: reduction.as_ref().and_then(|r| r.cv_choice.method_name()),
                cv_reason: reduction.as_ref().map(|r| r.cv_choice.reason.clone()),
                constructions: reduction.as_ref().map(constructions),
                reduction,
                unavailable,
                caution: CAUTION,
            })
        })
        .await?;
    Ok(Json(out))
}

pub(super) fn router() -> Router<AppState> {
    Router::new()
        .route("/api/frames/{id}/increments", post(arm))
        .route("/api/frames/{id}/increments/current/applied", post(applied))
        .route("/api/frames/{id}/increments/current/withdraw", post(withdraw))
        .route("/api/frames/{id}/increments/{seq}/void", post(void))
        .route("/api/frames/{id}/increments/{seq}/restore", post(restore))
        .route("/api/frames/{id}/reseat", post(reseat))
        .route("/api/frames/{id}/notes", post(note))
        .route("/api/frames/{id}/increments/{seq}/readings", get(readings))
        .route("/api/frames/{id}/increments/{seq}/analysis", get(analysis))
}
