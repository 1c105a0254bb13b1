//! Claims on dirty periods in PostgreSQL (see `store::claims`). Leases are timed by the
//! database's clock, so instances on machines whose clocks disagree still agree on when a claim
//! lapses; claimers skip rows another transaction holds (`FOR UPDATE SKIP LOCKED`), so two
//! instances claiming at once take different periods and never wait on each other.

use std::ops::RangeInclusive;
use std::time::Duration;

use chrono::{DateTime, Utc};
use sqlx::PgConnection;

use super::super::claims::{claims_of, lease_ms, Claim, Settled};
use super::super::{to_ms, PlantRow, Result, StoreError};
use super::PgStore;

/// The database's clock in ms since the epoch (the statement's own instant).
const DB_NOW_MS: &str = "(EXTRACT(EPOCH FROM clock_timestamp()) * 1000)::BIGINT";

impl PgStore {
    pub(in crate::store) async fn claim_due(
        &self,
        plant: &PlantRow,
        instance: &str,
        starts: &RangeInclusive<DateTime<Utc>>,
        lease: Duration,
        limit: usize,
    ) -> Result<Vec<Claim>> {
        let rows = sqlx::query(&format!(
            "WITH now AS (SELECT {DB_NOW_MS} AS ms),
             due AS (
                 SELECT d.plant_id, d.period_start FROM dirty_periods d, now
                 WHERE d.plant_id = $1 AND d.period_start BETWEEN $6 AND $2
                   AND (d.lease_until IS NULL OR d.lease_until <= now.ms)
                 ORDER BY d.period_start LIMIT $3
                 FOR UPDATE OF d SKIP LOCKED)
             UPDATE dirty_periods t
             SET claimed_by = $4, lease_until = (SELECT ms FROM now) + $5
             FROM due
             WHERE t.plant_id = due.plant_id AND t.period_start = due.period_start
             RETURNING t.period_start, t.marked_at"
        ))
        .bind(plant.id)
        .bind(to_ms(*starts.end()))
        .bind(i64::try_from(limit).unwrap_or(i64::MAX))
        .bind(instance)
        .bind(lease_ms(lease))
        .bind(to_ms(*starts.start()))
        .fetch_all(&self.pool)
        .await?;
        claims_of(instance, &rows)
    }

    pub(in crate::store) async fn renew_claim(
        &self,
        plant: &PlantRow,
        claim: &Claim,
        lease: Duration,
    ) -> Result<bool> {
        let done = sqlx::query(&format!(
            "UPDATE dirty_periods SET lease_until = {DB_NOW_MS} + $1
             WHERE plant_id = $2 AND period_start = $3 AND claimed_by = $4"
        ))
        .bind(lease_ms(lease))
        .bind(plant.id)
        .bind(to_ms(claim.period_start))
        .bind(&claim.instance)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }

    pub(in crate::store) async fn release_claim(
        &self,
        plant: &PlantRow,
        claim: &Claim,
    ) -> Result<bool> {
        let mut c = self.pool.acquire().await?;
        release(&mut c, plant, claim).await
    }
}

/// As `store::claims::settle`, in the transaction that records the run.
pub(super) async fn settle(
    tx: &mut PgConnection,
    plant: &PlantRow,
    claim: &Claim,
) -> Result<Settled> {
    let cleared = sqlx::query(
        "DELETE FROM dirty_periods
         WHERE plant_id = $1 AND period_start = $2 AND claimed_by = $3 AND marked_at <= $4",
    )
    .bind(plant.id)
    .bind(to_ms(claim.period_start))
    .bind(&claim.instance)
    .bind(to_ms(claim.marked_at))
    .execute(&mut *tx)
    .await?;
    if cleared.rows_affected() > 0 {
        return Ok(Settled::Cleared);
    }
    if release(tx, plant, claim).await? {
        Ok(Settled::StillDirty)
    } else {
        Err(StoreError::ClaimLost(claim.period_start))
    }
}

async fn release(tx: &mut PgConnection, plant: &PlantRow, claim: &Claim) -> Result<bool> {
    let done = sqlx::query(
        "UPDATE dirty_periods SET claimed_by = NULL, lease_until = NULL
         WHERE plant_id = $1 AND period_start = $2 AND claimed_by = $3",
    )
    .bind(plant.id)
    .bind(to_ms(claim.period_start))
    .bind(&claim.instance)
    .execute(&mut *tx)
    .await?;
    Ok(done.rows_affected() > 0)
}
