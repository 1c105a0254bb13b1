//! Periods and their runs: the listing with each period's status, the report of one period,
//! and an administrator's request to run a period again now.

use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::Json;
use chrono::{DateTime, TimeDelta, Utc};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

use super::auth::Caller;
use super::figures::PeriodRange;
use super::problem::Problem;
use super::readings::parse_time;
use super::{plant_row, rfc3339, run_problem, AppState};
use crate::revisions;
use crate::schedule;
use crate::store::{PlantRow, Role};

#[derive(Debug, Deserialize, IntoParams)]
pub struct RangeQuery {
    /// Start of the range, RFC 3339, inclusive.
    from: String,
    /// End of the range, RFC 3339, exclusive.
    to: String,
}

/// One period of the listing.
#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodStatus {
    /// RFC 3339, UTC.
    pub start: String,
    pub end: String,
    /// The current report's status (solved, unobservable, not_converged, infeasible, no_data),
    /// `pending` when readings arrived but the period has not been run yet, or `no_readings`.
    pub status: String,
    /// Readings changed since the current run (or since none): a run is due.
    pub rerun_due: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub run_id: Option<i64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub revision: Option<i64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub run_at: Option<String>,
    /// Runs of this period so far (history included).
    pub runs: i64,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodList {
    pub plant: String,
    pub period_seconds: i64,
    pub periods: Vec<PeriodStatus>,
}

/// Every period of a range with the status of its run.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/periods",
    tag = "periods",
    params(("plant" = String, Path, description = "Plant name"), RangeQuery),
    responses(
        (status = 200, description = "Each period of the range, oldest first", body = PeriodList),
        (status = 400, description = "A time is not RFC 3339, or from is not before to", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The range holds more than 10,000 periods", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn list_periods(
    State(state): State<AppState>,
    caller: Caller,
    Path(plant): Path<String>,
    query: Result<Query<RangeQuery>, QueryRejection>,
) -> Result<Json<PeriodList>, Problem> {
    caller.require(Role::Read, &plant)?;
    let Query(query) = query.map_err(super::query_problem)?;
    // The same grid as the figures and balances of a range.
    let range = PeriodRange::resolve(&state, &plant, &query.from, &query.to).await?;
    let secs = range.period_seconds;
    let first = range.starts.first().copied().unwrap_or(range.from);
    let runs = state
        .store
        .current_runs(&range.row, first, range.to)
        .await?;
    let dirty = state.store.dirty_periods(&range.row).await?;
    let mut periods = Vec::new();
    for &start in &range.starts {
        let end = start + TimeDelta::seconds(secs);
        let run = runs.iter().find(|r| r.period_start == start);
        let due = dirty.iter().any(|(s, _)| *s == start);
        let status = match (run, due) {
            (Some(r), _) => r.status.clone(),
            (None, true) => "pending".to_string(),
            (None, false) => "no_readings".to_string(),
        };
        periods.push(PeriodStatus {
            start: rfc3339(start),
            end: rfc3339(end),
            status,
            rerun_due: due,
            run_id: run.map(|r| r.id),
            revision: run.map(|r| r.revision),
            run_at: run.map(|r| rfc3339(r.created_at)),
            runs: run.map_or(0, |r| r.runs),
        });
    }
    Ok(Json(PeriodList {
        plant,
        period_seconds: secs,
        periods,
    }))
}

/// The current run of one period: its report (docs/report.md), what it
/// ran on, and when.
#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodRun {
    pub plant: String,
    pub start: String,
    pub run_id: i64,
    pub revision: i64,
    pub engine_version: String,
    pub status: String,
    pub run_at: String,
    /// Runs of this period so far; the earlier ones are kept as history.
    pub runs: usize,
    /// Readings changed since this run: a new run is due.
    pub rerun_due: bool,
    /// Meter values the engine used, missing tags, unsteady tags.
    #[schema(value_type = Object)]
    pub inputs: serde_json::Value,
    /// The period's report.
    #[schema(value_type = Object)]
    pub report: serde_json::Value,
}

/// The period's start from the path, checked against the plant's period grid.
async fn period_start(
    state: &AppState,
    row: &PlantRow,
    text: &str,
) -> Result<DateTime<Utc>, Problem> {
    let start = parse_time("start", text)?;
    let (model, _) = revisions::model_at(&state.store, row, start)
        .await
        .map_err(run_problem)?;
    let aligned = reconcile::period::period_start(start, model.period_seconds);
    if aligned != start {
        return Err(Problem::bad_request(format!(
            "{text} is not the start of a period; periods of plant \"{}\" are {} s long, \
             aligned to UTC, so the period containing it starts at {}",
            row.name,
            model.period_seconds,
            rfc3339(aligned)
        )));
    }
    Ok(start)
}

async fn current(
    state: &AppState,
    row: &PlantRow,
    start: DateTime<Utc>,
) -> Result<PeriodRun, Problem> {
    let not_run = || {
        Problem::not_found(format!(
            "period {} of plant \"{}\" has not been run (see /periods for its status)",
            rfc3339(start),
            row.name
        ))
    };
    // The current run whole, and only the count of the earlier ones: a period re-run many
    // times does not make its report slower to read.
    let run = state
        .store
        .current_run(row, start)
        .await?
        .ok_or_else(not_run)?;
    let runs = state
        .store
        .current_runs(row, start, start + TimeDelta::milliseconds(1))
        .await?
        .first()
        .map_or(1, |r| r.runs);
    let due = state
        .store
        .dirty_periods(row)
        .await?
        .iter()
        .any(|(s, _)| *s == start);
    Ok(PeriodRun {
        plant: row.name.clone(),
        start: rfc3339(start),
        run_id: run.id,
        revision: run.run.revision,
        engine_version: run.run.engine_version.clone(),
        status: run.run.status.clone(),
        run_at: rfc3339(run.created_at),
        runs: runs as usize,
        rerun_due: due,
        inputs: run.run.inputs,
        report: run.run.report,
    })
}

/// The report of one period: its current run.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/periods/{start}",
    tag = "periods",
    params(
        ("plant" = String, Path, description = "Plant name"),
        ("start" = String, Path, description = "The period's start, RFC 3339 (e.g. 2026-03-02T05:00:00Z)"),
    ),
    responses(
        (status = 200, description = "The current run with its report", body = PeriodRun),
        (status = 400, description = "Not an RFC 3339 time, or not the start of a period", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant, or the period has not been run", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_period(
    State(state): State<AppState>,
    caller: Caller,
    Path((plant, start)): Path<(String, String)>,
) -> Result<Json<PeriodRun>, Problem> {
    caller.require(Role::Read, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let start = period_start(&state, &row, &start).await?;
    Ok(Json(current(&state, &row, start).await?))
}

/// Run one period again now, whatever its state; answers the new current run.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/periods/{start}/reconcile",
    tag = "periods",
    params(
        ("plant" = String, Path, description = "Plant name"),
        ("start" = String, Path, description = "The period's start, RFC 3339"),
    ),
    responses(
        (status = 200, description = "The new current run with its report", body = PeriodRun),
        (status = 400, description = "Not an RFC 3339 time, or not the start of a period", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not admin, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn rerun_period(
    State(state): State<AppState>,
    caller: Caller,
    Path((plant, start)): Path<(String, String)>,
) -> Result<Json<PeriodRun>, Problem> {
    caller.require(Role::Admin, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let start = period_start(&state, &row, &start).await?;
    schedule::run_period(&state, &row, start)
        .await
        .map_err(run_problem)?;
    Ok(Json(current(&state, &row, start).await?))
}
