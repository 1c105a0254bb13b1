//! Periods and their runs: the listing of a range with each period's status, and the current
//! run of one period with its report.

use std::collections::{HashMap, HashSet};

use chrono::{DateTime, TimeDelta, Utc};
use serde::Serialize;
use utoipa::ToSchema;

use super::range::parse_time;
use super::{rfc3339, PeriodRange, ResultsError};
use crate::service::Service;
use crate::store::{PlantRow, RunFailure};

/// One period of the listing.
#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodStatus {
    /// RFC 3339, UTC.
    pub start: String,
    pub end: String,
    /// The current report's status (solved, unobservable, not_converged, infeasible, no_data),
    /// `pending` when readings arrived but the period has not been run yet, `failed` when its
    /// last run was abandoned (see `last_failure`) and no run was recorded since, or
    /// `no_readings`.
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
    /// The period's last abandoned run, while no run of it has been recorded since.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_failure: Option<LastFailure>,
}

/// A period's last abandoned run.
#[derive(Debug, Serialize, ToSchema)]
pub struct LastFailure {
    /// When it was abandoned (RFC 3339, UTC).
    #[schema(format = DateTime)]
    pub at: String,
    /// Why.
    pub reason: String,
    /// Runs of the period abandoned in a row.
    pub failures: i64,
    /// The scheduler tries the period again from then (RFC 3339, UTC): a minute after the
    /// first failure, doubling with each, at most an hour.
    #[schema(format = DateTime)]
    pub retry_after: String,
}

impl From<&RunFailure> for LastFailure {
    fn from(f: &RunFailure) -> LastFailure {
        LastFailure {
            at: rfc3339(f.failed_at),
            reason: f.reason.clone(),
            failures: f.failures,
            retry_after: rfc3339(f.retry_after),
        }
    }
}

#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodList {
    pub plant: String,
    pub period_seconds: i64,
    pub periods: Vec<PeriodStatus>,
}

/// Every period of the range with the status of its current run, or `failed` (its last run
/// was abandoned, none recorded since), `pending` (readings arrived, not run yet) or
/// `no_readings`.
pub async fn listing(
    service: &Service,
    plant: &PlantRow,
    range: &PeriodRange,
) -> Result<PeriodList, ResultsError> {
    let secs = range.period_seconds;
    let runs = service
        .store
        .current_runs(plant, range.first(), range.to)
        .await?;
    let dirty = service.store.dirty_periods(plant).await?;
    let failures = service
        .store
        .run_failures(plant, range.first(), range.to)
        .await?;
    // By period start: a range may hold thousands of periods.
    let runs: HashMap<_, _> = runs.iter().map(|r| (r.period_start, r)).collect();
    let dirty: HashSet<_> = dirty.iter().map(|(s, _)| *s).collect();
    let failures: HashMap<_, _> = failures.iter().map(|f| (f.period_start, f)).collect();
    let mut periods = Vec::new();
    for &start in &range.starts {
        let end = start + TimeDelta::seconds(secs);
        let run = runs.get(&start).copied();
        let due = dirty.contains(&start);
        let failure = failures.get(&start).copied();
        // Recording a run deletes the period's failure, so a failure with a newer current run
        // is one whose instant was read off a clock behind the run's: the run counts.
        let failed = failure.is_some_and(|f| run.is_none_or(|r| r.created_at < f.failed_at));
        let status = match (run, due) {
            _ if failed => "failed".to_string(),
            (Some(r), _) => r.status.as_str().to_string(),
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
            last_failure: failure.map(LastFailure::from),
        });
    }
    Ok(PeriodList {
        plant: plant.name.clone(),
        period_seconds: secs,
        periods,
    })
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
    #[schema(value_type = reconcile::report::Report)]
    pub report: serde_json::Value,
}

/// The start of a period given as text, checked against the plant's period grid (of the
/// revision in effect then).
pub async fn period_start(
    service: &Service,
    plant: &PlantRow,
    text: &str,
) -> Result<DateTime<Utc>, ResultsError> {
    let start = parse_time("start", text)?;
    let (model, _) = service.model_at(plant, start).await?;
    let aligned = reconcile::period::period_start(start, model.period_seconds);
    if aligned != start {
        return Err(ResultsError::Refused(format!(
            "{text} is not the start of a period; periods of plant \"{}\" are {} s long, \
             aligned to UTC, so the period containing it starts at {}",
            plant.name,
            model.period_seconds,
            rfc3339(aligned)
        )));
    }
    Ok(start)
}

/// The current run of the period starting at `start`, with its report as stored (the
/// engine's report, passed through unchanged), or not found.
pub async fn current(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
) -> Result<PeriodRun, ResultsError> {
    let not_run = || {
        ResultsError::NotFound(format!(
            "period {} of plant \"{}\" has not been run (see /periods for its status)",
            rfc3339(start),
            plant.name
        ))
    };
    // The current run whole, and only the count of the earlier ones: a period re-run many
    // times does not make its report slower to read.
    let run = service
        .store
        .current_run(plant, start)
        .await?
        .ok_or_else(not_run)?;
    let runs = service
        .store
        .current_runs(plant, start, start + TimeDelta::milliseconds(1))
        .await?
        .first()
        .map_or(1, |r| r.runs);
    let due = service
        .store
        .dirty_periods(plant)
        .await?
        .iter()
        .any(|(s, _)| *s == start);
    Ok(PeriodRun {
        plant: plant.name.clone(),
        start: rfc3339(start),
        run_id: run.id,
        revision: run.run.revision,
        engine_version: run.run.engine_version.clone(),
        status: run.run.status.as_str().to_string(),
        run_at: rfc3339(run.created_at),
        runs: runs as usize,
        rerun_due: due,
        inputs: run.run.inputs,
        report: run.run.report,
    })
}
