//! Periods whose run was abandoned at its time limit (migrations/0006_run_failures.sql): the
//! claim given up and the failure recorded in one transaction, with when the period may be
//! claimed again; the row is deleted when a run of the period is recorded (`runs::record`), and
//! claims skip the period until then (each dialect's `claim_due`).

use std::time::Duration;

use chrono::{DateTime, TimeDelta, Utc};

use super::claims::RELEASE;
use super::rows::{self, Claim, PlantRow, RunFailure};
use super::values::{param_list, Millis};
use super::{Result, Store, Tx};

impl Store {
    /// Give up `claim` after its run was abandoned and record why: the period's failures count
    /// one more (`failures`), and it may be claimed again `backoff(failures)` from now. In one
    /// transaction, and only while the claim is held: `None`, and nothing recorded, when the
    /// claim lapsed and another instance took the period (whose run then settles it).
    pub async fn record_run_failure(
        &self,
        plant: &PlantRow,
        claim: &Claim,
        reason: &str,
        backoff: impl Fn(i64) -> Duration,
    ) -> Result<Option<RunFailure>> {
        const EARLIER: &str = "
            SELECT failures FROM run_failures WHERE plant_id = $1 AND period_start = $2";
        const UPSERT: &str = "
            INSERT INTO run_failures
                (plant_id, period_start, failures, reason, failed_at, retry_after)
            VALUES ($1, $2, $3, $4, $5, $6)
            ON CONFLICT (plant_id, period_start) DO UPDATE SET
                failures = excluded.failures, reason = excluded.reason,
                failed_at = excluded.failed_at, retry_after = excluded.retry_after";
        let start = Millis::from(claim.period_start);
        // The failures of the period take turns with its runs' records (the write lock in
        // SQLite, the plant's row lock in PostgreSQL), so the count read here stays true.
        let mut tx = self.write_for(plant).await?;
        let released = in_tx!(&mut tx, t => sqlx::query(RELEASE)
            .bind(plant.id)
            .bind(start)
            .bind(&claim.instance)
            .execute(&mut **t)
            .await?
            .rows_affected());
        if released == 0 {
            // Dropped unapplied.
            return Ok(None);
        }
        let earlier: Option<i64> = in_tx!(&mut tx, t => sqlx::query_scalar(EARLIER)
            .bind(plant.id)
            .bind(start)
            .fetch_optional(&mut **t)
            .await?);
        let failures = earlier.unwrap_or(0).saturating_add(1);
        let failed_at = Millis::now().to_utc()?;
        let retry_after = TimeDelta::from_std(backoff(failures))
            .ok()
            .and_then(|wait| failed_at.checked_add_signed(wait))
            .unwrap_or(DateTime::<Utc>::MAX_UTC);
        in_tx!(&mut tx, t => sqlx::query(UPSERT)
            .bind(plant.id)
            .bind(start)
            .bind(failures)
            .bind(reason)
            .bind(Millis::from(failed_at))
            .bind(Millis::from(retry_after))
            .execute(&mut **t)
            .await
            .map(drop)?);
        tx.commit().await?;
        Ok(Some(RunFailure {
            period_start: claim.period_start,
            failures,
            reason: reason.to_string(),
            failed_at,
            retry_after,
        }))
    }

    /// The recorded failures of the plant's periods starting in `[from, to)`, oldest first.
    pub async fn run_failures(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<RunFailure>> {
        const SQL: &str = "
            SELECT period_start, failures, reason, failed_at, retry_after FROM run_failures
            WHERE plant_id = $1 AND period_start >= $2 AND period_start < $3
            ORDER BY period_start";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::run_failure)
            .collect())
    }
}

/// Forget the failures of the periods `starts` (inside the transaction recording runs of
/// them): the engine finished them.
pub(super) async fn clear(tx: &mut Tx, plant: &PlantRow, starts: &[Millis]) -> Result<()> {
    for chunk in starts.chunks(500) {
        let sql = format!(
            "DELETE FROM run_failures WHERE plant_id = $1 AND period_start IN ({})",
            param_list(2, chunk.len())
        );
        in_tx!(tx, t => {
            let mut query = sqlx::query(&sql).bind(plant.id);
            for start in chunk {
                query = query.bind(*start);
            }
            query.execute(&mut **t).await.map(drop)?
        });
    }
    Ok(())
}
