//! Runs under a claim. Several instances may share one database: each period is claimed before
//! it runs (see `store::claims`), for a lease the instance renews while the run goes on, and
//! its run is recorded only while the claim is held. No period runs on two instances at once,
//! and the claims of an instance that dies lapse, so its periods are taken by another.

use std::time::Duration;

use chrono::{DateTime, Utc};

use super::record::{record_batch, record_period, RunError, RunOutcome};
use crate::revisions::Models;
use crate::run_limit;
use crate::service::Service;
use crate::store::{Claim, PlantRow, StoreError};

/// Run one period now and store the run as its current one. If the period is dirty and no
/// other instance holds it, it is claimed first and the run settles its mark; if another
/// instance is running it, this run is recorded as well, and whichever is recorded last is
/// current.
pub async fn run_period(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
) -> Result<RunOutcome, RunError> {
    let claimant = &service.claimant;
    let claim = service
        .store
        .claim_due(plant, &claimant.instance, start..=start, claimant.lease, 1)
        .await?
        .pop();
    match claim {
        Some(claim) => {
            let models = service.models(plant).await?;
            run_claimed(service, plant, &models, &claim, claimant.lease).await
        }
        None => {
            let (model, revision) = service.model_at(plant, start).await?;
            record_period(service, plant, start, model, revision, None).await
        }
    }
}

/// Run a claimed period, renewing the claim every third of its lease until the run is
/// recorded; a run that fails gives its claim up, so the period stays dirty and runs again. A
/// run abandoned at its time limit records the failure as it gives the claim up (one
/// transaction), and the period waits out its backoff (`run_limit::backoff`) before it is
/// claimed again.
pub(super) async fn run_claimed(
    service: &Service,
    plant: &PlantRow,
    models: &Models,
    claim: &Claim,
    lease: Duration,
) -> Result<RunOutcome, RunError> {
    let start = claim.period_start;
    let outcome = match models.at(start) {
        Ok((model, revision)) => {
            let run = record_period(service, plant, start, model, revision, Some(claim));
            tokio::pin!(run);
            let mut beat = tokio::time::interval((lease / 3).max(Duration::from_millis(1)));
            beat.tick().await; // the first tick is immediate: the claim is fresh
            loop {
                tokio::select! {
                    outcome = &mut run => break outcome,
                    _ = beat.tick() => match service.store.renew_claim(plant, claim, lease).await {
                        Ok(true) => {}
                        Ok(false) => tracing::warn!(plant = %plant.name, period = %start,
                            "the claim on this period lapsed during its run; its result will be refused"),
                        Err(e) => tracing::warn!(plant = %plant.name, period = %start, error = %e,
                            "could not renew the claim on this period"),
                    },
                }
            }
        }
        Err(e) => Err(e.into()),
    };
    match &outcome {
        Ok(_) | Err(RunError::Store(StoreError::ClaimLost(_))) => {}
        Err(e) => give_up(service, plant, claim, e).await,
    }
    outcome
}

/// Run a batch of claimed periods of one plant (oldest first, see
/// [`super::record::record_batch`]), renewing every claim of the batch every third of its
/// lease until the batch is recorded; the claim of each period that failed is given up, so the
/// period stays dirty and runs again (after its backoff when it was abandoned at its time
/// limit). A store error gives every claim of the batch up and is returned; otherwise each
/// period's outcome.
pub(super) async fn run_claimed_batch(
    service: &Service,
    plant: &PlantRow,
    models: &Models,
    claims: &[Claim],
    lease: Duration,
) -> Result<Vec<(DateTime<Utc>, Result<RunOutcome, RunError>)>, RunError> {
    let run = record_batch(service, plant, models, claims);
    tokio::pin!(run);
    let mut beat = tokio::time::interval((lease / 3).max(Duration::from_millis(1)));
    beat.tick().await; // the first tick is immediate: the claims are fresh
    let outcomes = loop {
        tokio::select! {
            outcomes = &mut run => break outcomes,
            _ = beat.tick() => for claim in claims {
                match service.store.renew_claim(plant, claim, lease).await {
                    Ok(true) => {}
                    Ok(false) => tracing::warn!(plant = %plant.name, period = %claim.period_start,
                        "the claim on this period lapsed during its run; its result will be refused"),
                    Err(e) => tracing::warn!(plant = %plant.name, period = %claim.period_start,
                        error = %e, "could not renew the claim on this period"),
                }
            },
        }
    };
    let outcomes = match outcomes {
        Ok(outcomes) => outcomes,
        Err(e) => {
            // Nothing of the batch was recorded: every period runs again.
            for claim in claims {
                give_up(service, plant, claim, &e).await;
            }
            return Err(e);
        }
    };
    let mut each = Vec::with_capacity(claims.len());
    for (claim, outcome) in claims.iter().zip(outcomes) {
        match &outcome {
            Ok(_) | Err(RunError::Store(StoreError::ClaimLost(_))) => {}
            Err(e) => give_up(service, plant, claim, e).await,
        }
        each.push((claim.period_start, outcome));
    }
    Ok(each)
}

/// Give up the claim of a failed run: with its failure recorded when the run was abandoned,
/// else simply released. Either way the period stays dirty; a store that fails here leaves
/// the claim to lapse with its lease.
async fn give_up(service: &Service, plant: &PlantRow, claim: &Claim, error: &RunError) {
    let start = claim.period_start;
    let given_up = match error.failure_reason() {
        Some(reason) => service
            .store
            .record_run_failure(plant, claim, &reason, run_limit::backoff)
            .await
            .map(|failure| match failure {
                Some(f) => tracing::debug!(plant = %plant.name, period = %start,
                    failures = f.failures, retry_after = %f.retry_after,
                    "the period's failure is recorded; it is retried after its backoff"),
                None => tracing::warn!(plant = %plant.name, period = %start,
                    "the claim on this period lapsed during its run; its failure is not recorded"),
            }),
        None => service.store.release_claim(plant, claim).await.map(drop),
    };
    if let Err(e) = given_up {
        tracing::warn!(plant = %plant.name, period = %start, error = %e,
            "could not give up the claim of a failed run; it lapses with its lease");
    }
}
