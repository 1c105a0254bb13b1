//! One period run against the store: the period's stored readings read, with the meters out of
//! service at its start (from the technicians' notes), the pure run (`period_run`) on a
//! blocking thread so requests keep flowing, under the model's time limit (`run_limit`), and
//! the report with its per-meter records stored in one transaction as the period's new current
//! run (earlier runs stay as history). A run that passes its limit is abandoned: nothing is
//! stored, and the caller gets [`RunError::TimedOut`].

use std::sync::Arc;
use std::time::{Duration, Instant};

use chrono::{DateTime, SecondsFormat, Utc};
use reconcile::{Cancel, Plant, Report};

use crate::period_run::{self, RunInputs};
use crate::revisions::RevisionError;
use crate::run_limit;
use crate::service::Service;
use crate::store::{Claim, NewRun, PlantRow, StoreError};

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
    let began = Instant::now();
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
    let run = tokio::task::spawn_blocking(move || {
        // The clock starts here, not while the run waits for a blocking thread.
        let cancel = Cancel::after(limit);
        period_run::run_period(&model, revision, start, readings, left_out, &cancel)
    })
    .await
    .map_err(|e| engine(e.to_string()))?;
    let Ok(run) = run else {
        service.metrics.run_abandoned();
        return Err(RunError::TimedOut {
            plant: plant.name.clone(),
            period: start,
            limit,
        });
    };
    let status = run.report.status;
    let new = NewRun {
        meters: run.meters,
        period_start: start,
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status,
        report: serde_json::to_value(&run.report)
            .map_err(|e| engine(format!("report does not serialise: {e}")))?,
        inputs: serde_json::to_value(&run.inputs)
            .map_err(|e| engine(format!("inputs do not serialise: {e}")))?,
    };
    let run_id = match claim {
        Some(claim) => {
            service
                .store
                .record_claimed_run(plant, &new, claim)
                .await?
                .0
        }
        None => service.store.record_run(plant, &new).await?,
    };
    service.metrics.run(status.as_str(), began.elapsed());
    tracing::info!(plant = %plant.name, period = %start, status = %status, "period run");
    Ok(RunOutcome {
        run_id,
        report: run.report,
        inputs: run.inputs,
    })
}
