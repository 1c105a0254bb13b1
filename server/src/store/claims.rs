//! Claims on dirty periods, so that several instances sharing one database never run the same
//! period at once and never forget one (migrations/0003_period_claims.sql). An instance claims
//! a closed dirty period for a lease, renews the lease while the run goes on, and records the
//! run and settles the claim in one transaction: the mark is deleted if no reading changed the
//! period since the claim, and otherwise only the claim is released so that the period runs
//! again. A claim whose lease lapsed (its instance died or stalled) may be taken by another
//! instance; the first one's late result is then refused ([`StoreError::ClaimLost`]).
//!
//! Taking and renewing a claim is each dialect's own (SQLite's single writer and the service's
//! clock; PostgreSQL's SKIP LOCKED and the database's clock); giving one up and settling it
//! are the same statements on both.

use std::ops::RangeInclusive;
use std::time::Duration;

use chrono::{DateTime, Utc};

use super::rows::{Claim, PlantRow, Settled};
use super::values::Millis;
use super::{Result, Store, StoreError, Tx};

/// A lease as whole milliseconds, at least one.
pub(super) fn lease_ms(lease: Duration) -> i64 {
    i64::try_from(lease.as_millis()).unwrap_or(i64::MAX).max(1)
}

/// Give up the claim `$3` holds on period `$2` of plant `$1`.
pub(super) const RELEASE: &str = "
    UPDATE dirty_periods SET claimed_by = NULL, lease_until = NULL
    WHERE plant_id = $1 AND period_start = $2 AND claimed_by = $3";

impl Store {
    /// Claim for `instance`, for `lease`, up to `limit` of the plant's dirty periods that start
    /// within `starts` and that no live claim holds, oldest first.
    pub async fn claim_due(
        &self,
        plant: &PlantRow,
        instance: &str,
        starts: RangeInclusive<DateTime<Utc>>,
        lease: Duration,
        limit: usize,
    ) -> Result<Vec<Claim>> {
        on_backend!(self, s => s.claim_due(plant, instance, &starts, lease, limit).await)
    }

    /// Extend a held claim by `lease` from now; false if it is no longer held.
    pub async fn renew_claim(
        &self,
        plant: &PlantRow,
        claim: &Claim,
        lease: Duration,
    ) -> Result<bool> {
        on_backend!(self, s => s.renew_claim(plant, claim, lease).await)
    }

    /// Give a claim up without recording a run (the run failed); the period stays dirty and
    /// claimable. False if it was no longer held.
    pub async fn release_claim(&self, plant: &PlantRow, claim: &Claim) -> Result<bool> {
        let done = on_backend!(self, s => sqlx::query(RELEASE)
            .bind(plant.id)
            .bind(Millis::from(claim.period_start))
            .bind(&claim.instance)
            .execute(&s.pool)
            .await?
            .rows_affected());
        Ok(done > 0)
    }
}

/// Check that `claim` is still held and settle it (inside the transaction recording its run):
/// delete the mark if no reading changed the period since the claim, otherwise release it.
pub(super) async fn settle(tx: &mut Tx, plant: &PlantRow, claim: &Claim) -> Result<Settled> {
    const CLEAR: &str = "
        DELETE FROM dirty_periods
        WHERE plant_id = $1 AND period_start = $2 AND claimed_by = $3 AND marked_at <= $4";
    let start = Millis::from(claim.period_start);
    let cleared = in_tx!(tx, t => sqlx::query(CLEAR)
        .bind(plant.id)
        .bind(start)
        .bind(&claim.instance)
        .bind(Millis::from(claim.marked_at))
        .execute(&mut **t)
        .await?
        .rows_affected());
    if cleared > 0 {
        return Ok(Settled::Cleared);
    }
    let released = in_tx!(tx, t => sqlx::query(RELEASE)
        .bind(plant.id)
        .bind(start)
        .bind(&claim.instance)
        .execute(&mut **t)
        .await?
        .rows_affected());
    if released > 0 {
        Ok(Settled::StillDirty)
    } else {
        Err(StoreError::ClaimLost(claim.period_start))
    }
}
