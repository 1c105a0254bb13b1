//! Claims on dirty periods, so that several instances sharing one database never run the same
//! period at once and never forget one (migrations/0003_period_claims.sql). An instance claims
//! a closed dirty period for a lease, renews the lease while the run goes on, and records the
//! run and settles the claim in one transaction: the mark is deleted if no reading changed the
//! period since the claim, and otherwise only the claim is released so that the period runs
//! again. A claim whose lease lapsed (its instance died or stalled) may be taken by another
//! instance; the first one's late result is then refused ([`StoreError::ClaimLost`]).

use std::ops::RangeInclusive;
use std::time::Duration;

use chrono::{DateTime, Utc};
use sqlx::Row;

use super::{from_ms, now_ms, to_ms, PlantRow, Result, SqliteStore, StoreError};

/// A held claim on one dirty period.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Claim {
    /// The instance that holds it.
    pub instance: String,
    pub period_start: DateTime<Utc>,
    /// The period's dirty mark when it was claimed: a later mark means readings changed
    /// during the run, and the period must run again.
    pub marked_at: DateTime<Utc>,
}

/// How a recorded run settled its claim.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Settled {
    /// The period's mark was deleted: its current run is up to date.
    Cleared,
    /// Readings changed the period during the run: the mark stays, unclaimed, and the period
    /// runs again.
    StillDirty,
}

/// A lease as whole milliseconds, at least one.
pub(super) fn lease_ms(lease: Duration) -> i64 {
    i64::try_from(lease.as_millis()).unwrap_or(i64::MAX).max(1)
}

/// Rows of `(period_start, marked_at)` as claims of `instance`.
pub(super) fn claims_of<R: Row>(instance: &str, rows: &[R]) -> Result<Vec<Claim>>
where
    for<'r> i64: sqlx::Decode<'r, R::Database> + sqlx::Type<R::Database>,
    for<'r> &'r str: sqlx::ColumnIndex<R>,
{
    let mut claims = rows
        .iter()
        .map(|r| {
            Ok(Claim {
                instance: instance.to_string(),
                period_start: from_ms(r.try_get("period_start")?)?,
                marked_at: from_ms(r.try_get("marked_at")?)?,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    claims.sort_by_key(|c| c.period_start);
    Ok(claims)
}

impl SqliteStore {
    /// Claim up to `limit` of the plant's dirty periods starting within `starts` that no live
    /// claim holds, oldest first. SQLite has one writer at a time, so the single statement
    /// cannot race another claimer.
    pub(super) async fn claim_due(
        &self,
        plant: &PlantRow,
        instance: &str,
        starts: &RangeInclusive<DateTime<Utc>>,
        lease: Duration,
        limit: usize,
    ) -> Result<Vec<Claim>> {
        let now = now_ms();
        let rows = sqlx::query(
            "UPDATE dirty_periods SET claimed_by = ?1, lease_until = ?2
             WHERE plant_id = ?3 AND period_start IN (
                 SELECT period_start FROM dirty_periods
                 WHERE plant_id = ?3 AND period_start BETWEEN ?4 AND ?7
                   AND (lease_until IS NULL OR lease_until <= ?5)
                 ORDER BY period_start LIMIT ?6)
             RETURNING period_start, marked_at",
        )
        .bind(instance)
        .bind(now.saturating_add(lease_ms(lease)))
        .bind(plant.id)
        .bind(to_ms(*starts.start()))
        .bind(now)
        .bind(i64::try_from(limit).unwrap_or(i64::MAX))
        .bind(to_ms(*starts.end()))
        .fetch_all(&self.pool)
        .await?;
        claims_of(instance, &rows)
    }

    /// Extend a claim's lease; false if the claim is no longer held.
    pub(super) async fn renew_claim(
        &self,
        plant: &PlantRow,
        claim: &Claim,
        lease: Duration,
    ) -> Result<bool> {
        let done = sqlx::query(
            "UPDATE dirty_periods SET lease_until = ?
             WHERE plant_id = ? AND period_start = ? AND claimed_by = ?",
        )
        .bind(now_ms().saturating_add(lease_ms(lease)))
        .bind(plant.id)
        .bind(to_ms(claim.period_start))
        .bind(&claim.instance)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }

    /// Give a claim up without a run (the run failed): the mark stays and the period is free
    /// to be claimed again. False if the claim was no longer held.
    pub(super) async fn release_claim(&self, plant: &PlantRow, claim: &Claim) -> Result<bool> {
        let mut tx = self.pool.acquire().await?;
        release(&mut tx, plant, claim).await
    }
}

/// Check that `claim` is still held and settle it (inside the transaction recording its run):
/// delete the mark if no reading changed the period since the claim, otherwise release it.
pub(super) async fn settle(
    tx: &mut sqlx::SqliteConnection,
    plant: &PlantRow,
    claim: &Claim,
) -> Result<Settled> {
    let cleared = sqlx::query(
        "DELETE FROM dirty_periods
         WHERE plant_id = ? AND period_start = ? AND claimed_by = ? AND marked_at <= ?",
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

async fn release(tx: &mut sqlx::SqliteConnection, plant: &PlantRow, claim: &Claim) -> Result<bool> {
    let done = sqlx::query(
        "UPDATE dirty_periods SET claimed_by = NULL, lease_until = NULL
         WHERE plant_id = ? AND period_start = ? AND claimed_by = ?",
    )
    .bind(plant.id)
    .bind(to_ms(claim.period_start))
    .bind(&claim.instance)
    .execute(&mut *tx)
    .await?;
    Ok(done.rows_affected() > 0)
}
