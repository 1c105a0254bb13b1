//! Period runs against the store: the periods' stored readings read, with the meters out of
//! service at each start (from the technicians' notes), the pure run (`period_run`) on a
//! blocking thread so requests keep flowing, under the model's time limit (`run_limit`), and
//! each report with its per-meter records stored as the period's new current run (earlier
//! runs stay as history). A run that passes its limit is abandoned: nothing is stored for it,
//! and the caller gets [`RunError::TimedOut`].
//!
//! The scheduler runs claimed periods in batches ([`record_batch`]): one read of the batch's
//! readings and notes, the runs one after the other on one blocking thread (each under its own
//! limit, its report serialised there too), and one transaction recording them all. Per
//! period, that leaves the engine's work and the rows written; the round trips to the store
//! and the hand-offs between threads are paid once per batch.

use std::collections::HashMap;
use std::sync::Arc;
use std::time::{Duration, Instant};

use chrono::{DateTime, SecondsFormat, TimeDelta, Utc};
use reconcile::{Cancel, Plant, Prepared, Report};

use crate::out_of_service::{self, Interval};
use crate::period_run::{self, PeriodReading, RunInputs};
use crate::revisions::{Models, RevisionError};
use crate::run_limit;
use crate::service::Service;
use crate::store::{Claim, PlantRow, PreparedRun, StoreError};

/// Why a period could not be run.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error(transparent)]
    Revision(#[from] RevisionError),
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error("the engine stopped unexpectedly on period {period} of plant \"{plant}\": {reason}")]
    Engine {
        plant: String,
        period: DateTime<Utc>,
        reason: String,
    },
    /// A run's task ended without an outcome (it panicked or was cancelled).
    #[error("a period run stopped unexpectedly: {0}")]
    Task(String),
    /// The run passed its time limit and was abandoned: nothing was stored.
    #[error(
        "the run of period {} of plant \"{plant}\" was abandoned at its time limit of {}",
        period.to_rfc3339_opts(SecondsFormat::Secs, true),
        run_limit::seconds(*limit)
    )]
    TimedOut {
        plant: String,
        period: DateTime<Utc>,
        limit: Duration,
    },
}

impl RunError {
    /// Why an abandoned run failed, as its period's failure records it.
    pub fn failure_reason(&self) -> Option<String> {
        match self {
            RunError::TimedOut { limit, .. } => Some(format!(
                "the run was abandoned at its time limit of {}",
                run_limit::seconds(*limit)
            )),
            _ => None,
        }
    }
}

/// The outcome of one run.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    pub run_id: i64,
    pub report: Report,
    pub inputs: RunInputs,
}

/// A period's run done and ready to record: the store's row and the caller's outcome.
struct Done {
    new: PreparedRun,
    report: Report,
    inputs: RunInputs,
    took: Duration,
}

/// Run one period on the blocking thread the caller is on, under `limit` from now, and
/// serialise its report and inputs for the store. `None`: abandoned at the limit.
fn run_one(
    model: &Plant,
    prepared: &mut Prepared,
    revision: i64,
    start: DateTime<Utc>,
    readings: Vec<PeriodReading>,
    left_out: Vec<reconcile::LeftOut>,
    limit: Duration,
) -> Result<Option<Done>, String> {
    let began = Instant::now();
    let cancel = Cancel::after(limit);
    let Ok(run) = period_run::run_period_prepared(
        model, prepared, revision, start, readings, left_out, &cancel,
    ) else {
        return Ok(None);
    };
    let new = PreparedRun::from_report(start, revision, &run.report, &run.inputs, run.meters)
        .map_err(|e| e.to_string())?;
    Ok(Some(Done {
        new,
        report: run.report,
        inputs: run.inputs,
        took: began.elapsed(),
    }))
}

/// Run the period of `plant` starting at `start` on `model` (revision number `revision`) and
/// store the run as its current one; with a claim, the run is recorded only while the claim is
/// held, and settles it. The run is given the model's time limit (`service.run_limit`), from
/// when it starts on its blocking thread; past it, [`RunError::TimedOut`] and nothing stored
/// (the claim is the caller's to give up).
pub(super) async fn record_period(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
    model: Arc<Plant>,
    revision: i64,
    claim: Option<&Claim>,
) -> Result<RunOutcome, RunError> {
    let readings = service
        .period_readings(plant, start, model.period_seconds)
        .await?;
    let left_out = service.left_out(plant, &model, start).await?;
    let engine = |reason: String| RunError::Engine {
        plant: plant.name.clone(),
        period: start,
        reason,
    };
    let limit = service.run_limit.for_model(&model);
    let done = tokio::task::spawn_blocking(move || {
        // The clock starts here, not while the run waits for a blocking thread.
        let mut prepared = Prepared::new(&model);
        run_one(
            &model,
            &mut prepared,
            revision,
            start,
            readings,
            left_out,
            limit,
        )
    })
    .await
    .map_err(|e| engine(e.to_string()))?
    .map_err(engine)?;
    let Some(done) = done else {
        return Err(timed_out(service, plant, start, limit));
    };
    let (run_id, _) = service.store.record(plant, &done.new, claim).await?;
    Ok(landed(service, plant, run_id, done))
}

/// The error of a run abandoned at `limit`, counted.
fn timed_out(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
    limit: Duration,
) -> RunError {
    service.metrics.run_abandoned();
    RunError::TimedOut {
        plant: plant.name.clone(),
        period: start,
        limit,
    }
}

/// A recorded run, counted and logged.
fn landed(service: &Service, plant: &PlantRow, run_id: i64, done: Done) -> RunOutcome {
    let status = done.report.status;
    service.metrics.run(status.as_str(), done.took);
    tracing::info!(plant = %plant.name, period = %done.report.period_start, status = %status, "period run");
    RunOutcome {
        run_id,
        report: done.report,
        inputs: done.inputs,
    }
}

/// Run a batch of claimed periods of `plant` (oldest first) and record their runs in one
/// transaction, each settling its claim. Each period is given its own model's time limit from
/// when its run starts. Returns each claim's outcome, in the claims' order; the claims of the
/// failed ones are the caller's to give up. `Err`: the store failed reading or recording, and
/// nothing of the batch was recorded.
pub(super) async fn record_batch(
    service: &Service,
    plant: &PlantRow,
    models: &Models,
    claims: &[Claim],
) -> Result<Vec<Result<RunOutcome, RunError>>, RunError> {
    let readings = batch_readings(service, plant, models, claims).await?;
    let intervals: Vec<Interval> = service.out_of_service(plant).await?;
    let mut outcomes: Vec<Option<Result<RunOutcome, RunError>>> = Vec::new();
    let mut work = Vec::with_capacity(claims.len());
    for (slot, (claim, readings)) in claims.iter().zip(readings).enumerate() {
        let start = claim.period_start;
        match models.at(start) {
            Ok((model, revision)) => {
                let left_out = out_of_service::left_out(&model, &intervals, start);
                let limit = service.run_limit.for_model(&model);
                work.push((slot, model, revision, start, readings, left_out, limit));
                outcomes.push(None);
            }
            Err(e) => outcomes.push(Some(Err(e.into()))),
        }
    }
    let ran = tokio::task::spawn_blocking(move || {
        // What depends only on the model revision is prepared once for the batch's periods of
        // that revision, and made again after a run abandoned part-way.
        let mut prepared: HashMap<i64, Prepared> = HashMap::new();
        work.into_iter()
            .map(
                |(slot, model, revision, start, readings, left_out, limit)| {
                    let kept = prepared
                        .entry(revision)
                        .or_insert_with(|| Prepared::new(&model));
                    let done = run_one(&model, kept, revision, start, readings, left_out, limit);
                    if !matches!(done, Ok(Some(_))) {
                        prepared.remove(&revision);
                    }
                    (slot, start, limit, done)
                },
            )
            .collect::<Vec<_>>()
    })
    .await
    .map_err(|e| RunError::Task(e.to_string()))?;
    let mut finished = Vec::with_capacity(ran.len());
    for (slot, start, limit, done) in ran {
        match done {
            Ok(Some(done)) => finished.push((slot, done)),
            Ok(None) => outcomes[slot] = Some(Err(timed_out(service, plant, start, limit))),
            Err(reason) => {
                outcomes[slot] = Some(Err(RunError::Engine {
                    plant: plant.name.clone(),
                    period: start,
                    reason,
                }))
            }
        }
    }
    let rows: Vec<(&PreparedRun, &Claim)> = finished
        .iter()
        .map(|(slot, done)| (&done.new, &claims[*slot]))
        .collect();
    let recorded = service.store.record_claimed_runs(plant, &rows).await?;
    for ((slot, done), result) in finished.into_iter().zip(recorded) {
        outcomes[slot] = Some(match result {
            Ok((run_id, _)) => Ok(landed(service, plant, run_id, done)),
            Err(e) => Err(e.into()),
        });
    }
    Ok(outcomes
        .into_iter()
        .map(|o| o.expect("every claim has an outcome"))
        .collect())
}

/// Each claimed period's stored readings, in the claims' order. Periods close together (the
/// usual batch: consecutive hours) are read in one range and split by period; far apart, each
/// is read alone, so a batch never reads the readings of long stretches it does not run.
async fn batch_readings(
    service: &Service,
    plant: &PlantRow,
    models: &Models,
    claims: &[Claim],
) -> Result<Vec<Vec<PeriodReading>>, RunError> {
    let seconds = |c: &Claim| {
        models
            .at(c.period_start)
            .map_or(3600, |(model, _)| model.period_seconds)
    };
    let spans: Vec<(DateTime<Utc>, DateTime<Utc>)> = claims
        .iter()
        .map(|c| {
            (
                c.period_start,
                c.period_start + TimeDelta::seconds(seconds(c)),
            )
        })
        .collect();
    let (Some(first), Some(last)) = (spans.first(), spans.iter().map(|s| s.1).max()) else {
        return Ok(Vec::new());
    };
    let covered: TimeDelta = spans.iter().map(|(a, b)| *b - *a).sum();
    let mut each: Vec<Vec<PeriodReading>> = vec![Vec::new(); claims.len()];
    if last - first.0 > covered * 2 {
        for ((start, end), out) in spans.iter().zip(&mut each) {
            *out = service
                .period_readings(plant, *start, (*end - *start).num_seconds())
                .await?;
        }
        return Ok(each);
    }
    let all = service
        .period_readings(plant, first.0, (last - first.0).num_seconds())
        .await?;
    for reading in all {
        let t = reading.reading.time;
        // The claims are oldest first and their periods do not overlap.
        let i = spans.partition_point(|(start, _)| *start <= t);
        if let Some(i) = i.checked_sub(1).filter(|&i| t < spans[i].1) {
            each[i].push(reading);
        }
    }
    Ok(each)
}
