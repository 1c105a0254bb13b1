//! `GET /meter-value`: what each meter is worth to a figure and which new meter would help it
//! most, for a stored period or each period of a range (computed in
//! [`crate::results::meter_value`]).

use axum::extract::rejection::QueryRejection;
use axum::extract::{Query, State};
use axum::response::{IntoResponse, Response};
use axum::Json;
use serde::Deserialize;
use utoipa::IntoParams;

use super::access::{OnPlant, Read};
use super::problem::Problem;
use super::AppState;
use crate::meter_value::request;
use crate::results::meter_value;
use crate::results::meter_value::MeterValueAnswer;
use crate::results::range::parse_time;

#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct MeterValueQuery {
    /// The period containing this time, RFC 3339 (or give `from` and `to`).
    #[param(format = DateTime)]
    period: Option<String>,
    /// Start of a range, RFC 3339: each of its periods is valued (at most 168).
    #[param(format = DateTime)]
    from: Option<String>,
    /// End of the range, RFC 3339, exclusive.
    #[param(format = DateTime)]
    to: Option<String>,
    /// `NAME:SUBJECT`: a loop figure as a report names it, or `molar_flow:STREAM`,
    /// `component_flow:STREAM:COMPONENT`, `split_fraction:STREAM`. Several, comma-separated,
    /// each with an optional `=WEIGHT`, for the set the best additions are chosen for; the
    /// meters and candidates are valued for the first.
    #[param(pattern = r"^[a-z_]+:[^,=]+(=[^,]+)?(,[a-z_]+:[^,=]+(=[^,]+)?)*$")]
    figure: String,
    /// Choose the best this many new meters together.
    add_best: Option<usize>,
    /// A candidate flow meter's σ, percent of reading (default 1).
    flow_sigma_pct: Option<f64>,
    /// A candidate flow meter's σ in kmol/h, instead of the percentage.
    flow_sigma: Option<f64>,
    /// A candidate analyser's σ, mol % (default 0.2).
    analyser_sigma: Option<f64>,
}

/// What each meter is worth to a figure (the figure's σ with the meter's σ halved, and
/// without it), and what each candidate new meter would buy, for a stored period reconciled
/// again; over a range, each period's answer and the repairs and additions that came first.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/meter-value",
    tag = "results",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), MeterValueQuery),
    responses(
        (status = 200, description = "For a period: the figure, the meters (best repair first), the candidates (best buy first), the accuracies and, with add_best, the best set; for a range: the same per period with the repairs and additions that came first. See docs/meter-value.md", body = MeterValueAnswer),
        (status = 400, description = "A time not RFC 3339, neither period nor from and to, an unknown figure or subject (the detail lists those there are), or an accuracy or weight that is not positive", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant, or no readings in the period", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "add_best more than the candidates, or the period was not reconciled", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_meter_value(
    State(state): State<AppState>,
    access: OnPlant<Read>,
    query: Result<Query<MeterValueQuery>, QueryRejection>,
) -> Result<Response, Problem> {
    let Query(q) = query?;
    let figures: Vec<String> = q.figure.split(',').map(str::to_string).collect();
    let request = request(
        &figures,
        q.add_best,
        q.flow_sigma_pct,
        q.flow_sigma,
        q.analyser_sigma,
    )
    .map_err(Problem::bad_request)?;
    let plant = &access.plant;
    match (q.period.as_deref(), q.from.as_deref(), q.to.as_deref()) {
        (Some(period), None, None) => {
            let start = parse_time("period", period)?;
            let answer = meter_value::of_stored_period(&state, plant, start, request).await?;
            Ok(Json(MeterValueAnswer::Period(Box::new(answer))).into_response())
        }
        (None, Some(from), Some(to)) => {
            let (from, to) = (parse_time("from", from)?, parse_time("to", to)?);
            let answer = meter_value::of_stored_range(&state, plant, from, to, request).await?;
            Ok(Json(MeterValueAnswer::Range(answer)).into_response())
        }
        _ => Err(Problem::bad_request(
            "give either period, or from and to (RFC 3339 times)".to_string(),
        )),
    }
}
