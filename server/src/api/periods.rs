//! Periods and their runs: the listing with each period's status, the report of one period,
//! and an administrator's request to run a period again now.

use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::Json;

use super::access::{Admin, OnPlant, Read};
use super::problem::Problem;
use super::range::{self, RangeQuery};
use super::AppState;
use crate::results::periods::{self, PeriodList, PeriodRun};
use crate::schedule;

/// Every period of a range with the status of its run.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/periods",
    tag = "periods",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), RangeQuery),
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
    access: OnPlant<Read>,
    query: Result<Query<RangeQuery>, QueryRejection>,
) -> Result<Json<PeriodList>, Problem> {
    let Query(query) = query?;
    let plant = &access.plant;
    // The same grid as the figures and balances of a range.
    let range = range::periods(&state, plant, &query.from, &query.to).await?;
    Ok(Json(periods::listing(&state, plant, &range).await?))
}

/// The report of one period: its current run.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/periods/{start}",
    tag = "periods",
    params(
        ("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"),
        ("start" = String, Path, description = "The period's start, RFC 3339 (e.g. 2026-03-02T05:00:00Z)", format = DateTime),
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
    access: OnPlant<Read>,
    Path((_, start)): Path<(String, String)>,
) -> Result<Json<PeriodRun>, Problem> {
    let start = periods::period_start(&state, &access.plant, &start).await?;
    Ok(Json(periods::current(&state, &access.plant, start).await?))
}

/// Run one period again now, whatever its state (a period waiting out the backoff of an
/// abandoned run too); answers the new current run.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/periods/{start}/reconcile",
    tag = "periods",
    params(
        ("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"),
        ("start" = String, Path, description = "The period's start, RFC 3339", format = DateTime),
    ),
    responses(
        (status = 200, description = "The new current run with its report", body = PeriodRun),
        (status = 400, description = "Not an RFC 3339 time, or not the start of a period", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not admin, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 503, description = "The run passed its time limit and was abandoned (`run-timed-out`, naming the plant, the period and the limit); nothing was stored, and a dirty period is retried after a backoff", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn rerun_period(
    State(state): State<AppState>,
    access: OnPlant<Admin>,
    Path((_, start)): Path<(String, String)>,
) -> Result<Json<PeriodRun>, Problem> {
    let start = periods::period_start(&state, &access.plant, &start).await?;
    schedule::run_period(&state, &access.plant, start).await?;
    Ok(Json(periods::current(&state, &access.plant, start).await?))
}
