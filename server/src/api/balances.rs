//! `GET /balances`: reconciled balances of a range (the sums, their σ and the coverage are
//! computed in [`crate::results::balances`]).

use axum::extract::rejection::QueryRejection;
use axum::extract::{Query, State};
use axum::Json;

use super::access::{OnPlant, Read};
use super::problem::Problem;
use super::range::{self, RangeQuery};
use super::AppState;
use crate::results::balances::{self, Balances};
use crate::results::stored;

/// Reconciled stream flows of every period of a range, and the amounts over the range with σ.
///
/// σ of a total assumes independent errors from period to period (each period is reconciled
/// on its own): σ = sqrt(Σ (σ_h·Δt_h)²). A biased meter's error does not average out, so for
/// it this understates σ.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/balances",
    tag = "results",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), RangeQuery),
    responses(
        (status = 200, description = "Each period's stream flows, the coverage of the range and the totals over it", body = Balances),
        (status = 400, description = "A time is not RFC 3339, or from is not before to", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The range holds more than 10,000 periods", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_balances(
    State(state): State<AppState>,
    access: OnPlant<Read>,
    query: Result<Query<RangeQuery>, QueryRejection>,
) -> Result<Json<Balances>, Problem> {
    let Query(query) = query?;
    let plant = &access.plant;
    let range = range::periods(&state, plant, &query.from, &query.to).await?;
    let reports = stored::current_parts(&state.store, plant, &range).await?;
    Ok(Json(balances::balances(&plant.name, &range, reports)))
}
