//! One period run against the store: the period's stored readings read, with the meters out of
//! service at its start (from the technicians' notes), the pure run (`period_run`) on a
//! blocking thread so requests keep flowing, and the report with its per-meter records stored
//! in one transaction as the period's new current run (earlier runs stay as history).

use std::sync::Arc;
use std::time::Instant;

use chrono::{DateTime, Utc};
use reconcile::{Plant, Report};

use crate::period_run::{self, RunInputs};
use crate::revisions::RevisionError;
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
/// held, and settles it.
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
    let run = tokio::task::spawn_blocking(move || {
        period_run::run_period(&model, revision, start, readings, left_out)
    })
    .await
    .map_err(|e| engine(e.to_string()))?;
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
