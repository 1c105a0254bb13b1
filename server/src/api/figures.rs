//! `GET /figures`: loop figures of a range as time series, JSON or CSV (the series are built
//! in [`crate::results::figures`]).

use axum::extract::rejection::QueryRejection;
use axum::extract::{Query, State};
use axum::http::{header, HeaderMap, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::Json;
use serde::Deserialize;
use utoipa::IntoParams;

use super::access::{OnPlant, Read};
use super::problem::Problem;
use super::range;
use super::AppState;
use crate::results::figures::{self, FigureSeriesList};

#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct FiguresQuery {
    /// Start of the range, RFC 3339 (the period containing it is the first).
    #[param(format = DateTime)]
    from: String,
    /// End of the range, RFC 3339, exclusive.
    #[param(format = DateTime)]
    to: String,
    /// Only the figures of this name (e.g. `purge_fraction`).
    name: Option<String>,
    /// Only the figures of this subject (e.g. `purge`, `conv:Ar`).
    subject: Option<String>,
    /// `json` or `csv`: overrides the Accept header (for tools that cannot set headers).
    format: Option<String>,
    /// At most this many points per series in a JSON answer (2 to 100,000): a longer range is
    /// thinned to each bucket's lowest and highest value (`bucket_seconds` says how long a
    /// bucket is). CSV is always every period's point.
    #[param(minimum = 2, maximum = 100000)]
    points: Option<usize>,
}

/// Does the caller want CSV? `format=` first, then the Accept header: CSV when it names
/// `text/csv` with a quality at least that of `application/json`.
fn wants_csv(format: Option<&str>, headers: &HeaderMap) -> Result<bool, Problem> {
    if let Some(f) = format {
        return match f.to_ascii_lowercase().as_str() {
            "csv" => Ok(true),
            "json" => Ok(false),
            _ => Err(Problem::bad_request(format!(
                "format \"{f}\" is not one of json, csv"
            ))),
        };
    }
    let accept = headers
        .get_all(header::ACCEPT)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(','))
        .map(str::to_string)
        .collect::<Vec<_>>();
    let quality = |media: &str| -> Option<f64> {
        accept.iter().find_map(|range| {
            let mut parts = range.split(';');
            let m = parts.next()?.trim();
            if !m.eq_ignore_ascii_case(media) {
                return None;
            }
            let q = parts
                .filter_map(|p| p.trim().strip_prefix("q="))
                .find_map(|q| q.trim().parse::<f64>().ok())
                .unwrap_or(1.0);
            Some(q)
        })
    };
    Ok(match quality("text/csv") {
        Some(csv) if csv > 0.0 => csv >= quality("application/json").unwrap_or(0.0),
        _ => false,
    })
}

/// Loop figures of every period of a range as time series with their σ, from each period's
/// current run.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/figures",
    tag = "results",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), FiguresQuery),
    responses(
        (status = 200, description = "One series per figure, one point per period (null where not computable). As CSV (`Accept: text/csv` or `format=csv`): header period_start,name,subject,uom,value,sigma, one row per point, empty cells for null", content(
            (FigureSeriesList = "application/json"),
            (String = "text/csv"),
        )),
        (status = 400, description = "A time is not RFC 3339, from is not before to, or an unknown format", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant, or no figure of that name (or subject) in the range; the detail names those there are", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The range holds more than 10,000 periods", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_figures(
    State(state): State<AppState>,
    access: OnPlant<Read>,
    headers: HeaderMap,
    query: Result<Query<FiguresQuery>, QueryRejection>,
) -> Result<Response, Problem> {
    let Query(query) = query?;
    let csv = wants_csv(query.format.as_deref(), &headers)?;
    if let Some(points) = query.points {
        if !(2..=100_000).contains(&points) {
            return Err(Problem::bad_request(format!(
                "points {points} is not between 2 and 100000"
            )));
        }
    }
    let plant = &access.plant;
    let range = range::periods(&state, plant, &query.from, &query.to).await?;
    let (name, subject) = (query.name.as_deref(), query.subject.as_deref());
    let stored = figures::Stored::read(&state.store, plant, &range, name, subject).await?;
    let answer = figures::series(&plant.name, &range, &stored, name, subject)?;
    if !csv {
        let mut answer = answer;
        if let Some(points) = query.points {
            figures::thin(&mut answer, points);
        }
        return Ok(Json(answer).into_response());
    }
    let body = figures::to_csv(&answer).map_err(|e| {
        tracing::error!(error = %e, "writing figures CSV");
        Problem::internal()
    })?;
    let mut response = body.into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/csv; charset=utf-8"),
    );
    Ok(response)
}

#[cfg(test)]
mod tests {
    use super::wants_csv;
    use axum::http::{header, HeaderMap, HeaderValue};

    fn accept(v: &'static str) -> HeaderMap {
        let mut h = HeaderMap::new();
        h.insert(header::ACCEPT, HeaderValue::from_static(v));
        h
    }

    #[test]
    fn csv_is_chosen_by_format_or_accept() {
        assert!(!wants_csv(None, &HeaderMap::new()).unwrap());
        assert!(wants_csv(None, &accept("text/csv")).unwrap());
        assert!(wants_csv(None, &accept("Text/CSV; charset=utf-8")).unwrap());
        assert!(!wants_csv(None, &accept("application/json, text/csv;q=0.5")).unwrap());
        assert!(wants_csv(None, &accept("application/json;q=0.4, text/csv")).unwrap());
        assert!(!wants_csv(None, &accept("text/csv;q=0")).unwrap());
        assert!(!wants_csv(None, &accept("*/*")).unwrap());
        assert!(wants_csv(Some("CSV"), &accept("application/json")).unwrap());
        assert!(!wants_csv(Some("json"), &accept("text/csv")).unwrap());
        assert!(wants_csv(Some("xml"), &HeaderMap::new()).is_err());
    }
}
