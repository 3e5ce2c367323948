//! CSV exports with units in the headers, RFC 4180 quoting, `text/csv; charset=utf-8` and a file name:
//! an increment's readings, a test's increment table, and its e–σ′ table. Read-only.
//!
//! The SI columns are pinned (their names carry their units). Where the lab's `[display]` units are not SI,
//! each converted quantity gets a second column in the lab's unit, named by it (`stress_tsf`,
//! `settlement_in`, `cv_taylor_ft2_per_day`); where the clock was simulated (the demo), a last column
//! `simulated_clock_speed` says on every row that the stamps and durations are simulated, and by how much.
//! A test an engineer adjusted gets, after the pinned columns of its load-step table, the fields set, who
//! set them and the automatic proposal's values (see `REVIEW_COLUMNS`).

use axum::Router;
use axum::extract::{Path, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use axum::routing::get;

use super::csv::{Cell, Csv};
use super::increments::{increment_polls, seq_of};
use super::lab_book::test_id;
use super::queries;
use super::{ApiError, AppState};
use crate::clock::rfc3339;
use oedolog_core::units::{DisplayUnit, DisplayUnits};

/// The columns a table adds after its SI ones: values in the lab's units, then the simulated clock's speed.
struct Extra {
    /// (column name, unit, index of the SI column converted).
    columns: Vec<(String, DisplayUnit, usize)>,
    speed: Option<f64>,
}

impl Extra {
    /// `convert` lists (SI column, base name, unit) for each quantity with a lab unit; only the units that
    /// differ from SI get a column.
    fn new(state: &AppState, header: &[&str], convert: &[(&str, &str, DisplayUnit)]) -> Extra {
        let si = DisplayUnits::default();
        let si_units = [si.stress, si.length, si.cv, si.k, si.mv()];
        let columns = convert
            .iter()
            .filter(|(_, _, unit)| !si_units.contains(unit))
            .filter_map(|(from, base, unit)| {
                let index = header.iter().position(|h| h == from)?;
                Some((format!("{base}_{}", unit.slug()), *unit, index))
            })
            .collect();
        Extra { columns, speed: state.clock.is_simulated().then(|| state.clock.speed()) }
    }

    fn header(&self, csv: &mut Csv, names: &[&str]) {
        let mut all: Vec<&str> = names.to_vec();
        all.extend(self.columns.iter().map(|(n, _, _)| n.as_str()));
        if self.speed.is_some() {
            all.push("simulated_clock_speed");
        }
        csv.header(&all);
    }

    fn row(&self, csv: &mut Csv, cells: &[Cell<'_>]) {
        let mut all: Vec<Cell<'_>> = cells.to_vec();
        for (_, unit, index) in &self.columns {
            all.push(match cells[*index] {
                Cell::Number(v) => Cell::Number(v.map(|x| unit.show(x))),
                _ => Cell::Number(None),
            });
        }
        if let Some(speed) = self.speed {
            all.push(Cell::Number(Some(speed)));
        }
        csv.row(&all);
    }
}

fn csv_response(filename: String, body: String) -> Response {
    (
        [
            (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
            (header::CONTENT_DISPOSITION, format!("attachment; filename=\"{filename}\"")),
        ],
        body,
    )
        .into_response()
}

/// Every reading of increment `seq`, from t0 to its end.
async fn readings(
    State(state): State<AppState>,
    Path((id, seq)): Path<(String, String)>,
) -> Result<Response, ApiError> {
    let id = test_id(&id)?;
    let seq = seq_of(&seq)?;
    let now = state.clock.now_us();
    const HEADER: [&str; 4] = ["time_min", "displacement_mm", "load_kn", "at_utc"];
    let extra = Extra::new(&state, &HEADER, &[("displacement_mm", "displacement", state.display.length)]);
    let body = state
        .read(move |conn| {
            let test = queries::test(conn, id)?;
            let inc = queries::increment(conn, id, seq)?;
            let onset = inc.onset_us;
            let mut csv = Csv::default();
            extra.header(&mut csv, &HEADER);
            for (t, d, l) in increment_polls(conn, &test, &inc, now)? {
                let at = onset.map(|o| rfc3339(o + (t * 6e7).round() as i64)).unwrap_or_default();
                extra.row(&mut csv, &[Cell::Number(Some(t)), Cell::Number(d), Cell::Number(l), Cell::Text(&at)]);
            }
            Ok(csv.finish())
        })
        .await?;
    Ok(csv_response(format!("test-{id}-increment-{seq}-readings.csv"), body))
}

/// The columns a reviewed test's load-step table adds: the fields an engineer set (space-separated), by whom,
/// and the automatic proposal's values beside the adjusted ones (empty where the step stands as proposed).
pub(crate) const REVIEW_COLUMNS: [&str; 7] = [
    "adjusted",
    "adjusted_by",
    "proposal_settlement_eop_mm",
    "proposal_t50_min",
    "proposal_t90_min",
    "proposal_cv_taylor_mm2_per_min",
    "proposal_cv_casagrande_mm2_per_min",
];

/// The increment table of a test.
async fn increment_table(State(state): State<AppState>, Path(id): Path<String>) -> Result<Response, ApiError> {
    let id = test_id(&id)?;
    let reduced = state.reduce_test(id).await?;
    let mut csv = Csv::default();
    let mut header = vec![
        "seq",
        "stress_kpa",
        "from_kpa",
        "armed_at_utc",
        "onset_at_utc",
        "ready_at_utc",
        "ended_at_utc",
        "readings",
        "settlement_mm",
        "settlement_eop_mm",
        "t50_min",
        "t90_min",
        "cv_taylor_mm2_per_min",
        "cv_casagrande_mm2_per_min",
        "c_alpha_strain",
        "flags",
        "settlement_measured_mm",
        "apparatus_deflection_mm",
    ];
    // A test an engineer adjusted says which steps, by whom, and what the constructions proposed.
    let reviewed = reduced.increments.iter().any(|i| !i.adjusted.is_empty());
    if reviewed {
        header.extend(REVIEW_COLUMNS);
    }
    let u = state.display;
    let extra = Extra::new(
        &state,
        &header,
        &[
            ("stress_kpa", "stress", u.stress),
            ("from_kpa", "from", u.stress),
            ("settlement_mm", "settlement", u.length),
            ("settlement_eop_mm", "settlement_eop", u.length),
            ("cv_taylor_mm2_per_min", "cv_taylor", u.cv),
            ("cv_casagrande_mm2_per_min", "cv_casagrande", u.cv),
            ("settlement_measured_mm", "settlement_measured", u.length),
            ("apparatus_deflection_mm", "apparatus_deflection", u.length),
        ],
    );
    extra.header(&mut csv, &header);
    let text = |s: &Option<String>| s.clone().unwrap_or_default();
    for inc in &reduced.increments {
        let (armed, onset, ready, ended) =
            (text(&inc.row.armed_at), text(&inc.row.onset_at), text(&inc.row.ready_at), text(&inc.row.ended_at));
        let flags = inc.flags.join(" ");
        let adjusted = inc.adjusted.join(" ");
        let by = inc.revision.as_ref().filter(|_| !inc.adjusted.is_empty()).map(|v| v.by.clone()).unwrap_or_default();
        let p = inc.proposal.as_ref();
        let review = [
            Cell::Text(&adjusted),
            Cell::Text(&by),
            Cell::Number(p.and_then(|p| p.settlement_eop_mm)),
            Cell::Number(p.and_then(|p| p.t50_min)),
            Cell::Number(p.and_then(|p| p.t90_min)),
            Cell::Number(p.and_then(|p| p.cv_taylor_mm2_per_min)),
            Cell::Number(p.and_then(|p| p.cv_casagrande_mm2_per_min)),
        ];
        let mut cells = vec![
            Cell::Int(inc.row.seq),
            Cell::Number(Some(inc.row.stress_kpa)),
            Cell::Number(inc.row.from_kpa),
            Cell::Text(&armed),
            Cell::Text(&onset),
            Cell::Text(&ready),
            Cell::Text(&ended),
            Cell::Int(inc.reading_count as i64),
            Cell::Number(inc.settlement_mm),
            Cell::Number(inc.settlement_eop_mm),
            Cell::Number(inc.t50_min),
            Cell::Number(inc.t90_min),
            Cell::Number(inc.cv_taylor_mm2_per_min),
            Cell::Number(inc.cv_casagrande_mm2_per_min),
            Cell::Number(inc.c_alpha_strain),
            Cell::Text(&flags),
            Cell::Number(inc.settlement_measured_mm),
            Cell::Number(inc.apparatus_deflection_mm),
        ];
        if reviewed {
            cells.extend(review);
        }
        extra.row(&mut csv, &cells);
    }
    Ok(csv_response(format!("test-{id}-increments.csv"), csv.finish()))
}

/// The e–σ′ table of a test.
async fn compression_table(State(state): State<AppState>, Path(id): Path<String>) -> Result<Response, ApiError> {
    let id = test_id(&id)?;
    let reduced = state.reduce_test(id).await?;
    let mut csv = Csv::default();
    let mut header = vec![
        "stress_kpa",
        "branch",
        "void_ratio",
        "void_ratio_end",
        "void_ratio_eop",
        "strain",
        "load_increment_ratio",
        "av_per_kpa",
        "mv_per_kpa",
        "k_m_per_s",
    ];
    // A test an engineer adjusted: the automatic reduction's values of each point beside.
    let proposals = reduced.review.point_proposals.as_ref();
    if proposals.is_some() {
        header.extend(["proposal_void_ratio", "proposal_mv_per_kpa", "proposal_k_m_per_s"]);
    }
    let u = state.display;
    let extra = Extra::new(
        &state,
        &header,
        &[("stress_kpa", "stress", u.stress), ("mv_per_kpa", "mv", u.mv()), ("k_m_per_s", "k", u.k)],
    );
    extra.header(&mut csv, &header);
    if let Some(c) = &reduced.compression {
        for (i, p) in c.points.iter().enumerate() {
            let branch =
                serde_json::to_value(p.branch).ok().and_then(|v| v.as_str().map(String::from)).unwrap_or_default();
            let mut cells = vec![
                Cell::Number(Some(p.stress_kpa)),
                Cell::Text(&branch),
                Cell::Number(Some(p.e)),
                Cell::Number(Some(p.e_end)),
                Cell::Number(p.e_eop),
                Cell::Number(Some(p.strain)),
                Cell::Number(p.load_increment_ratio),
                Cell::Number(p.av_per_kpa),
                Cell::Number(p.mv_per_kpa),
                Cell::Number(p.k_m_per_s),
            ];
            if let Some(proposals) = proposals {
                let q = proposals.get(i);
                cells.extend([
                    Cell::Number(q.map(|q| q.e)),
                    Cell::Number(q.and_then(|q| q.mv_per_kpa)),
                    Cell::Number(q.and_then(|q| q.k_m_per_s)),
                ]);
            }
            extra.row(&mut csv, &cells);
        }
    }
    Ok(csv_response(format!("test-{id}-e-log-stress.csv"), csv.finish()))
}

pub(super) fn router() -> Router<AppState> {
    Router::new()
        .route("/api/tests/{id}/increments/{seq}/readings.csv", get(readings))
        .route("/api/tests/{id}/increments.csv", get(increment_table))
        .route("/api/tests/{id}/compression.csv", get(compression_table))
}
