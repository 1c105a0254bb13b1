//! Loop figures as time series: each figure of the current report of every period of a range
//! (purge fraction, inert fraction at the reactor inlet, conversions ...), with its σ, as JSON
//! or as CSV for the spreadsheets and trending tools engineers already use.
//!
//! Also the period range both this and the balances answer cover: the periods of the plant's
//! grid from the one containing `from` to the last starting before `to`.

use std::collections::BTreeMap;

use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::{DateTime, TimeDelta, Utc};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

use super::auth::Caller;
use super::problem::Problem;
use super::readings::parse_time;
use super::{rfc3339, run_problem, AppState};
use crate::revisions;
use crate::store::{PlantRow, Role};

/// Most periods one answer covers (a leap year of hours is 8,784).
pub(super) const MAX_PERIODS: i64 = 10_000;

/// The status of a period of the range that has no run.
pub(super) const NO_RUN: &str = "no_run";

/// The periods a range query covers, on the grid of the model in effect at its end (as the
/// period listing has them).
pub(super) struct PeriodRange {
    pub row: PlantRow,
    pub from: DateTime<Utc>,
    pub to: DateTime<Utc>,
    pub period_seconds: i64,
    /// Start of every period of the range, oldest first.
    pub starts: Vec<DateTime<Utc>>,
}

impl PeriodRange {
    /// Parse and check `from` and `to`, find the plant and its period grid; refuse a range of
    /// more than [`MAX_PERIODS`] periods.
    pub(super) async fn resolve(
        state: &AppState,
        plant: &str,
        from: &str,
        to: &str,
    ) -> Result<PeriodRange, Problem> {
        let from = parse_time("from", from)?;
        let to = parse_time("to", to)?;
        if from >= to {
            return Err(Problem::bad_request("from must be before to"));
        }
        let row = super::plant_row(state, plant).await?;
        let (model, _) = revisions::model_at(&state.store, &row, to)
            .await
            .map_err(run_problem)?;
        let secs = model.period_seconds;
        let first = reconcile::period::period_start(from, secs);
        let count = ((to - first).num_seconds() + secs - 1).div_euclid(secs);
        if count > MAX_PERIODS {
            return Err(Problem::unprocessable(format!(
                "the range holds {count} periods, more than the {MAX_PERIODS} one answer \
                 covers; ask for a shorter range"
            )));
        }
        let starts = (0..count)
            .map(|k| first + TimeDelta::seconds(k * secs))
            .collect();
        Ok(PeriodRange {
            row,
            from,
            to,
            period_seconds: secs,
            starts,
        })
    }
}

/// A stored report part that does not read as expected is a fault of ours.
pub(super) fn corrupt(plant: &str, start: DateTime<Utc>, e: serde_json::Error) -> Problem {
    tracing::error!(plant, period = %rfc3339(start), error = %e, "stored report unreadable");
    Problem::internal()
}

#[derive(Debug, Deserialize, IntoParams)]
pub struct FiguresQuery {
    /// Start of the range, RFC 3339 (the period containing it is the first).
    from: String,
    /// End of the range, RFC 3339, exclusive.
    to: String,
    /// Only the figures of this name (e.g. `purge_fraction`).
    name: Option<String>,
    /// Only the figures of this subject (e.g. `purge`, `conv:Ar`).
    subject: Option<String>,
    /// `json` or `csv`: overrides the Accept header (for tools that cannot set headers).
    format: Option<String>,
}

/// The figures of a range, one series per figure.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigureSeriesList {
    pub plant: String,
    /// The range asked for, RFC 3339, UTC.
    pub from: String,
    pub to: String,
    pub period_seconds: i64,
    /// Periods in the range: every series has one point for each.
    pub periods: usize,
    /// Every figure name found in the range (before the name and subject filters).
    pub names: Vec<String>,
    pub series: Vec<FigureSeries>,
}

/// One figure of one subject over the range.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigureSeries {
    pub name: String,
    /// A reaction, a stream, a unit, a component, or `item:component`.
    pub subject: String,
    /// `fraction`, `ratio`, `%` or `kmol/h`.
    pub uom: String,
    /// One point per period of the range, oldest first.
    pub points: Vec<FigurePoint>,
}

/// The figure in one period. Value and σ are null where the period has no run, its run did
/// not converge, or the figure is not observable that period: a gap, never a made-up number.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigurePoint {
    pub period_start: String,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
    /// The period's run status (solved, unobservable, not_converged, infeasible, no_data), or
    /// `no_run`.
    pub status: String,
}

/// The part of a stored report this answer reads.
#[derive(Debug, Deserialize)]
struct ReportFigures {
    status: Option<String>,
    #[serde(default)]
    figures: Option<Vec<StoredFigure>>,
}

#[derive(Debug, Deserialize)]
struct StoredFigure {
    name: String,
    subject: String,
    uom: String,
    value: Option<f64>,
    sigma: Option<f64>,
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
    params(("plant" = String, Path, description = "Plant name"), FiguresQuery),
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
    caller: Caller,
    Path(plant): Path<String>,
    headers: HeaderMap,
    query: Result<Query<FiguresQuery>, QueryRejection>,
) -> Result<Response, Problem> {
    caller.require(Role::Read, &plant)?;
    let Query(query) = query.map_err(super::query_problem)?;
    let csv = wants_csv(query.format.as_deref(), &headers)?;
    let range = PeriodRange::resolve(&state, &plant, &query.from, &query.to).await?;
    let first = range.starts.first().copied().unwrap_or(range.from);
    let stored = state
        .store
        .current_reports(&range.row, first, range.to, &["status", "figures"])
        .await?;
    let mut reports: BTreeMap<DateTime<Utc>, ReportFigures> = BTreeMap::new();
    for (start, part) in stored {
        let part: ReportFigures =
            serde_json::from_value(part).map_err(|e| corrupt(&plant, start, e))?;
        reports.insert(start, part);
    }

    // Series in the order the reports list their figures (model order), each keyed by
    // name, subject and uom (a new model revision may change a figure's uom).
    let mut keys: Vec<(String, String, String)> = Vec::new();
    let mut index: BTreeMap<(String, String, String), usize> = BTreeMap::new();
    let mut names: Vec<String> = Vec::new();
    for report in reports.values() {
        for f in report.figures.iter().flatten() {
            if !names.contains(&f.name) {
                names.push(f.name.clone());
            }
            let key = (f.name.clone(), f.subject.clone(), f.uom.clone());
            if !index.contains_key(&key) {
                index.insert(key.clone(), keys.len());
                keys.push(key);
            }
        }
    }
    if let Some(name) = &query.name {
        if !names.is_empty() && !names.contains(name) {
            return Err(Problem::new(
                StatusCode::NOT_FOUND,
                "no-such-figure",
                format!(
                    "no figure named \"{name}\" in the range; the figures there are: {}",
                    names.join(", ")
                ),
            ));
        }
    }
    let wanted = |(n, s, _): &(String, String, String)| {
        query.name.as_ref().is_none_or(|q| q == n) && query.subject.as_ref().is_none_or(|q| q == s)
    };
    if let Some(subject) = &query.subject {
        if !names.is_empty() && !keys.iter().any(wanted) {
            let mut subjects: Vec<&str> = keys
                .iter()
                .filter(|(n, _, _)| query.name.as_ref().is_none_or(|q| q == n))
                .map(|(_, s, _)| s.as_str())
                .collect();
            subjects.sort_unstable();
            subjects.dedup();
            return Err(Problem::new(
                StatusCode::NOT_FOUND,
                "no-such-figure",
                format!(
                    "no figure of subject \"{subject}\"{} in the range; the subjects there \
                     are: {}",
                    query
                        .name
                        .as_ref()
                        .map(|n| format!(" named \"{n}\""))
                        .unwrap_or_default(),
                    subjects.join(", ")
                ),
            ));
        }
    }

    // cells[series][period]: the figure's value and σ in that period, if it has the figure.
    let position: BTreeMap<DateTime<Utc>, usize> = range
        .starts
        .iter()
        .enumerate()
        .map(|(i, s)| (*s, i))
        .collect();
    let mut cells = vec![vec![None; range.starts.len()]; keys.len()];
    for (start, report) in &reports {
        let Some(&p) = position.get(start) else {
            continue;
        };
        for f in report.figures.iter().flatten() {
            let key = (f.name.clone(), f.subject.clone(), f.uom.clone());
            if let Some(&k) = index.get(&key) {
                // A σ without its value would be no use to anyone.
                cells[k][p] = Some((f.value, f.value.and(f.sigma)));
            }
        }
    }
    let statuses: Vec<String> = range
        .starts
        .iter()
        .map(|start| match reports.get(start) {
            Some(r) => r.status.clone().unwrap_or_else(|| "unknown".into()),
            None => NO_RUN.into(),
        })
        .collect();
    let series: Vec<FigureSeries> = keys
        .iter()
        .zip(&cells)
        .filter(|(key, _)| wanted(key))
        .map(|((name, subject, uom), row)| FigureSeries {
            name: name.clone(),
            subject: subject.clone(),
            uom: uom.clone(),
            points: range
                .starts
                .iter()
                .zip(row)
                .zip(&statuses)
                .map(|((start, cell), status)| FigurePoint {
                    period_start: rfc3339(*start),
                    value: cell.and_then(|c| c.0),
                    sigma: cell.and_then(|c| c.1),
                    status: status.clone(),
                })
                .collect(),
        })
        .collect();

    let answer = FigureSeriesList {
        plant,
        from: rfc3339(range.from),
        to: rfc3339(range.to),
        period_seconds: range.period_seconds,
        periods: range.starts.len(),
        names,
        series,
    };
    if csv {
        csv_response(&answer)
    } else {
        Ok(Json(answer).into_response())
    }
}

/// The series as CSV: `period_start,name,subject,uom,value,sigma`, series after series, empty
/// cells for null. Numbers are written in Rust's shortest form that reads back as the same
/// f64, so the CSV and JSON answers agree number for number.
fn csv_response(answer: &FigureSeriesList) -> Result<Response, Problem> {
    let mut out = csv::Writer::from_writer(Vec::new());
    let write = |out: &mut csv::Writer<Vec<u8>>| -> Result<(), csv::Error> {
        out.write_record(["period_start", "name", "subject", "uom", "value", "sigma"])?;
        let number = |v: Option<f64>| v.map(|v| v.to_string()).unwrap_or_default();
        for s in &answer.series {
            for p in &s.points {
                out.write_record([
                    p.period_start.as_str(),
                    &s.name,
                    &s.subject,
                    &s.uom,
                    &number(p.value),
                    &number(p.sigma),
                ])?;
            }
        }
        out.flush()?;
        Ok(())
    };
    write(&mut out).map_err(|e| {
        tracing::error!(error = %e, "writing figures CSV");
        Problem::internal()
    })?;
    let body = out.into_inner().map_err(|e| {
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
