//! Hourly runs: a background worker reconciles every period whose inputs changed (its dirty
//! mark) once the period is closed — its end plus a grace delay has passed, so the historian's
//! late readings of the hour are in — and again whenever a reading of it is added or replaced.
//!
//! A pass claims closed dirty periods (`claims`: claim, renew, release around each run) and
//! runs them `workers` at a time; each run (`record`) is the pure period run
//! (`crate::period_run`) between reading the store and recording in it.

use std::collections::VecDeque;
use std::sync::Arc;
use std::time::Duration;

use chrono::{DateTime, TimeDelta, Utc};
use tokio::sync::watch;

use crate::revisions::{Models, RevisionError};
use crate::service::Service;
use crate::store::{Claim, PlantRow, StoreError};

mod claims;
mod record;

pub use crate::claimant::{instance_name, Claimant};
pub use crate::period_run::{MeterInput, RunInputs, UNSTEADY_SPREAD_SIGMAS};
pub use claims::run_period;
pub use record::{RunError, RunOutcome};

use claims::run_claimed_batch;

/// When the worker runs periods.
#[derive(Debug, Clone, Copy)]
pub struct Schedule {
    /// A period is closed this long after its end.
    pub grace: Duration,
    /// How often the worker looks for due periods (it also wakes on every stored batch).
    pub tick: Duration,
    /// Periods run at once (each solve on its own blocking thread).
    pub workers: usize,
}

impl Default for Schedule {
    fn default() -> Schedule {
        Schedule {
            grace: Duration::from_secs(300),
            tick: Duration::from_secs(30),
            workers: default_workers(),
        }
    }
}

/// One worker per core.
pub fn default_workers() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// A batch holds as many periods as make about this many states in all: on a loop of a few
/// dozen states a batch is the longest, for a network of thousands a single period (whose run
/// alone outweighs the store's round trips).
pub const BATCH_STATES: usize = 4096;
/// The most periods in one batch: a batch's runs are recorded together, so this bounds how
/// long the first of them waits to be seen.
pub const MAX_BATCH: usize = 48;

/// Periods of `model` run as one batch (see [`BATCH_STATES`]).
pub fn batch_size(model: &reconcile::Plant) -> usize {
    (BATCH_STATES / crate::run_limit::states(model).max(1)).clamp(1, MAX_BATCH)
}

/// A plant with dirty periods in this pass: its models, the latest period start that is
/// closed, and how many periods a worker runs at once.
struct Plan {
    plant: PlantRow,
    models: Arc<Models>,
    starts_up_to: DateTime<Utc>,
    batch: usize,
}

/// Claim and run every closed dirty period of every plant that no other instance holds, oldest
/// first per plant, the plants taking turns, up to `schedule.workers` batches at a time (see
/// [`batch_size`]; each batch's runs are recorded in one transaction); returns how many ran.
/// Periods are claimed only when a worker is free to run them, so no claim waits in a queue
/// while its lease runs down.
pub async fn run_due(service: &Service, schedule: &Schedule) -> Result<usize, RunError> {
    let mut plans = plans(service, schedule, Utc::now()).await?;
    let workers = schedule.workers.max(1);
    let claimant = &service.claimant;
    let mut ran = 0;
    let mut failure: Option<RunError> = None;
    let mut running = tokio::task::JoinSet::new();
    loop {
        while running.len() < workers && failure.is_none() {
            let Some(plan) = plans.front() else { break };
            let free = workers - running.len();
            let wanted = free * plan.batch;
            let claims = match service
                .store
                .claim_due(
                    &plan.plant,
                    &claimant.instance,
                    DateTime::<Utc>::MIN_UTC..=plan.starts_up_to,
                    claimant.lease,
                    wanted,
                )
                .await
            {
                Ok(claims) => claims,
                Err(e) => {
                    failure = Some(e.into());
                    break;
                }
            };
            let exhausted = claims.len() < wanted;
            spawn_batches(&mut running, service, plan, claims, free, claimant.lease);
            if exhausted {
                // Nothing more of this plant is free this pass.
                plans.pop_front();
            } else {
                plans.rotate_left(1);
            }
        }
        let Some(joined) = running.join_next().await else {
            break;
        };
        let (plant, outcomes) = match joined.map_err(|e| RunError::Task(e.to_string())) {
            Ok((plant, Ok(outcomes))) => (plant, outcomes),
            Ok((_, Err(RunError::Store(e)))) => {
                failure.get_or_insert(e.into());
                continue;
            }
            Ok((plant, Err(e))) => {
                tracing::error!(plant = %plant, error = %e, "a batch of period runs failed");
                continue;
            }
            Err(e) => {
                failure.get_or_insert(e);
                continue;
            }
        };
        for (start, outcome) in outcomes {
            match outcome {
                Ok(_) => ran += 1,
                Err(RunError::Store(StoreError::ClaimLost(_))) => {
                    tracing::warn!(plant = %plant, period = %start,
                        "period run outlived its claim; another instance ran the period, this result was dropped");
                }
                Err(RunError::Store(e)) => {
                    failure.get_or_insert(e.into());
                }
                Err(e @ RunError::TimedOut { .. }) => {
                    // Its failure is recorded and its claim given up (claims::run_claimed_batch):
                    // the period is retried after its backoff, and this pass goes on with the
                    // others.
                    tracing::warn!(plant = %plant, period = %start, error = %e,
                        "period run abandoned at its time limit; retried after a backoff");
                }
                Err(e) => {
                    tracing::error!(plant = %plant, period = %start, error = %e, "period run failed");
                }
            }
        }
    }
    match failure {
        Some(e) => Err(e),
        None => Ok(ran),
    }
}

/// The plants with dirty periods at `now`, each with its validated models and the latest
/// period start that is closed then.
async fn plans(
    service: &Service,
    schedule: &Schedule,
    now: DateTime<Utc>,
) -> Result<VecDeque<Plan>, RunError> {
    let grace = TimeDelta::from_std(schedule.grace).unwrap_or(TimeDelta::zero());
    let mut plans = VecDeque::new();
    for plant in service.store.plants().await? {
        if !service.store.has_dirty_periods(&plant).await? {
            continue;
        }
        // Read once per plant and pass, not once per period; validated once per process.
        let models = match service.models(&plant).await {
            Ok(models) => models,
            Err(RevisionError::Store(e)) => return Err(e.into()),
            Err(e) => {
                // One plant's broken revision must not hold up the others' runs.
                tracing::error!(plant = %plant.name, error = %e, "the plant's periods cannot run");
                continue;
            }
        };
        let Ok((current, _)) = models.at(now) else {
            continue;
        };
        let starts_up_to = now - TimeDelta::seconds(current.period_seconds) - grace;
        let batch = batch_size(&current);
        plans.push_back(Plan {
            plant,
            models: Arc::new(models),
            starts_up_to,
            batch,
        });
    }
    Ok(plans)
}

type Joined = (
    String,
    Result<Vec<(DateTime<Utc>, Result<RunOutcome, RunError>)>, RunError>,
);

/// Run `claims` (oldest first) as up to `free` batches of consecutive periods, as even as they
/// divide.
fn spawn_batches(
    running: &mut tokio::task::JoinSet<Joined>,
    service: &Service,
    plan: &Plan,
    claims: Vec<Claim>,
    free: usize,
    lease: Duration,
) {
    if claims.is_empty() {
        return;
    }
    let size = claims.len().div_ceil(free.max(1));
    let mut claims = claims.into_iter().peekable();
    while claims.peek().is_some() {
        let batch: Vec<Claim> = claims.by_ref().take(size).collect();
        let service = service.clone();
        let plant = plan.plant.clone();
        let models = Arc::clone(&plan.models);
        running.spawn(async move {
            let outcome = run_claimed_batch(&service, &plant, &models, &batch, lease).await;
            (plant.name, outcome)
        });
    }
}

/// The background worker: runs due periods on every tick and whenever the service's `wake` is
/// notified (a batch changed stored readings), until `stop` turns true. A run in progress is
/// finished before it stops.
pub async fn worker(service: Service, schedule: Schedule, mut stop: watch::Receiver<bool>) {
    loop {
        if *stop.borrow() {
            break;
        }
        match run_due(&service, &schedule).await {
            Ok(0) => {}
            // Runs landed: the meter health of each plant that has caught up is assessed now,
            // while nobody waits for it, so the next meter list is read from the memo.
            Ok(_) => crate::results::meters::refresh_all(&service).await,
            Err(e) => {
                tracing::error!(error = %e, "scheduler pass failed; retrying on the next tick");
            }
        }
        tokio::select! {
            _ = tokio::time::sleep(schedule.tick) => {}
            _ = service.wake.notified() => {}
            _ = stop.changed() => {}
        }
    }
    tracing::info!("scheduler stopped");
}

#[cfg(test)]
mod tests;
