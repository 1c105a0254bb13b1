//! What PostgreSQL does its own way: connecting, the plant's row lock where SQLite's write lock
//! orders writers, batches as arrays (`UNNEST`, one statement for many rows), claims that skip
//! rows another transaction holds (`FOR UPDATE SKIP LOCKED`) with leases timed by the
//! database's clock, and picking fields out of reports with its JSON operators. The schema
//! (migrations/postgres/) is kept equivalent to the SQLite one.

use std::ops::RangeInclusive;
use std::time::Duration;

use chrono::{DateTime, Utc};
use reconcile::model::MeterSpec;
use sqlx::postgres::{PgConnection, PgPool, PgPoolOptions};
use sqlx::{Postgres, Transaction};

use super::claims::lease_ms;
use super::meter_health::StateWrite;
use super::rows::{self, Claim, PlantRow};
use super::values::{JsonText, Millis};
use super::{Result, StoreError};
use crate::health::MeterPeriod;

mod readings;

/// The PostgreSQL schema, embedded in the binary and applied at start-up. sqlx reads only the
/// files directly in a migration folder, so the SQLite migrator never sees this subfolder.
pub(super) static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations/postgres");

/// The database's clock in ms since the epoch (the statement's own instant).
const DB_NOW_MS: &str = "(EXTRACT(EPOCH FROM clock_timestamp()) * 1000)::BIGINT";

/// PostgreSQL through a connection pool. Concurrent writers are ordered by row locks and
/// constraints, not by one database-wide write lock as in SQLite.
#[derive(Debug, Clone)]
pub struct PgStore {
    pub(super) pool: PgPool,
}

impl PgStore {
    /// Connect to `url` (`postgres://...` or `postgresql://...`) and apply any newer
    /// migrations. The database itself must exist.
    pub(super) async fn open(url: &str) -> Result<PgStore> {
        let pool = PgPoolOptions::new().connect(url).await?;
        // sqlx takes an advisory lock while migrating, so two services starting together
        // apply each migration once.
        MIGRATOR.run(&pool).await?;
        Ok(PgStore { pool })
    }

    /// A transaction holding the plant's row lock (see [`lock_plant`]).
    pub(super) async fn write_for(
        &self,
        plant: &PlantRow,
    ) -> Result<Transaction<'static, Postgres>> {
        let mut tx = self.pool.begin().await?;
        lock_plant(&mut tx, plant).await?;
        Ok(tx)
    }

    /// Claim up to `limit` of the plant's dirty periods starting within `starts` that no live
    /// claim holds and no recorded failure holds back (its `retry_after`, by this instance's
    /// clock as it was written, still to come), oldest first. Rows another claimer holds are
    /// skipped, so two instances claiming at once take different periods and never wait on
    /// each other; the lease is timed by the database's clock, so instances whose clocks
    /// disagree still agree on when a claim lapses.
    pub(super) async fn claim_due(
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
                   AND NOT EXISTS (
                       SELECT 1 FROM run_failures f
                       WHERE f.plant_id = d.plant_id AND f.period_start = d.period_start
                         AND f.retry_after > $7)
                 ORDER BY d.period_start LIMIT $3
                 FOR UPDATE OF d SKIP LOCKED)
             UPDATE dirty_periods t
             SET claimed_by = $4, lease_until = (SELECT ms FROM now) + $5
             FROM due
             WHERE t.plant_id = due.plant_id AND t.period_start = due.period_start
             RETURNING t.period_start, t.marked_at"
        ))
        .bind(plant.id)
        .bind(Millis::from(*starts.end()))
        .bind(i64::try_from(limit).unwrap_or(i64::MAX))
        .bind(instance)
        .bind(lease_ms(lease))
        .bind(Millis::from(*starts.start()))
        .bind(Millis::now())
        .fetch_all(&self.pool)
        .await?;
        rows::claims(instance, &rows)
    }

    /// Extend a claim's lease from the database's clock; false if it is no longer held.
    pub(super) async fn renew_claim(
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
        .bind(Millis::from(claim.period_start))
        .bind(&claim.instance)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }

    /// Parts of the current report of every period starting in `[from, to)`: PostgreSQL picks
    /// the fields out (`->` with the names bound as one array), so the reports' other parts
    /// never leave the server.
    pub(super) async fn current_reports(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        fields: &[&str],
    ) -> Result<Vec<(DateTime<Utc>, serde_json::Value)>> {
        let rows = sqlx::query(
            "SELECT period_start,
                    COALESCE(
                        (SELECT json_object_agg(f.name, report_json -> f.name ORDER BY f.n)
                         FROM UNNEST($4::text[]) WITH ORDINALITY AS f (name, n)),
                        '{}'::json) AS part
             FROM runs
             WHERE plant_id = $1 AND current AND period_start >= $2 AND period_start < $3
             ORDER BY period_start",
        )
        .bind(plant.id)
        .bind(Millis::from(from))
        .bind(Millis::from(to))
        .bind(fields)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(rows::report_part).collect()
    }
}

/// Lock the plant's row until the transaction ends, so that writes which read before they
/// write (the next revision number, the current run to demote) take turns per plant, as
/// SQLite's one write lock makes them. NO KEY UPDATE does not conflict with the KEY SHARE
/// locks that foreign-key checks take, so ingestion into the plant goes on meanwhile.
async fn lock_plant(tx: &mut PgConnection, plant: &PlantRow) -> Result<()> {
    let locked = sqlx::query("SELECT id FROM plants WHERE id = $1 FOR NO KEY UPDATE")
        .bind(plant.id)
        .fetch_optional(&mut *tx)
        .await?;
    match locked {
        Some(_) => Ok(()),
        None => Err(StoreError::NoPlant(plant.name.clone())),
    }
}

/// A column of a batch, for binding as one array.
fn column<'a, T, U>(items: &'a [T], f: impl Fn(&'a T) -> U) -> Vec<U> {
    items.iter().map(f).collect()
}

/// The meters of a new revision, in one statement.
pub(super) async fn insert_meters(
    tx: &mut PgConnection,
    plant: &PlantRow,
    revision: i64,
    meters: &[MeterSpec],
) -> Result<()> {
    sqlx::query(
        "INSERT INTO meters
             (plant_id, revision, tag, stream, quantity, component, uom, range_lo, range_hi)
         SELECT $1, $2, m.*
         FROM UNNEST($3::text[], $4::text[], $5::text[], $6::text[], $7::text[],
                     $8::float8[], $9::float8[]) AS m",
    )
    .bind(plant.id)
    .bind(revision)
    .bind(column(meters, |m| m.tag.as_str()))
    .bind(column(meters, |m| m.stream.as_str()))
    .bind(column(meters, |m| m.quantity.as_str()))
    .bind(column(meters, |m| m.component.as_deref()))
    .bind(column(meters, |m| m.uom.as_str()))
    .bind(column(meters, |m| m.range.map(|r| r[0])))
    .bind(column(meters, |m| m.range.map(|r| r[1])))
    .execute(&mut *tx)
    .await?;
    Ok(())
}

/// Insert or replace the meter rows of a run (inside the run's transaction), all in one
/// statement: the rows travel as one array per column.
pub(super) async fn write_meter_periods(
    tx: &mut PgConnection,
    plant: &PlantRow,
    runs: &[(i64, &[(String, MeterPeriod)])],
) -> Result<()> {
    let rows: Vec<(i64, &(String, MeterPeriod))> = runs
        .iter()
        .flat_map(|(run_id, rows)| rows.iter().map(move |row| (*run_id, row)))
        .collect();
    if rows.is_empty() {
        return Ok(());
    }
    let correlations = rows
        .iter()
        .map(|(_, (_, p))| JsonText::of(&p.correlations).map(|j| j.0))
        .collect::<Result<Vec<_>>>()?;
    sqlx::query(
        "INSERT INTO meter_periods
             (plant_id, run_id, tag, period_start, measured, reconciled, sigma, adjustment,
              adjustment_sigma, normalized_adjustment, redundant, flagged, readings,
              bad_readings, out_of_range_readings, correlations)
         SELECT $1, m.run_id, m.tag, m.period_start, m.measured, m.reconciled, m.sigma,
                m.adjustment, m.adjustment_sigma, m.normalized, m.redundant, m.flagged,
                m.readings, m.bad_readings, m.out_of_range_readings, m.correlations::json
         FROM UNNEST($2::int8[], $3::text[], $4::int8[], $5::float8[], $6::float8[], $7::float8[],
                     $8::float8[], $9::float8[], $10::float8[], $11::bool[], $12::bool[],
                     $13::int8[], $14::int8[], $15::int8[], $16::text[])
             AS m (run_id, tag, period_start, measured, reconciled, sigma, adjustment,
                   adjustment_sigma, normalized, redundant, flagged, readings, bad_readings,
                   out_of_range_readings, correlations)
         ON CONFLICT (plant_id, tag, period_start) DO UPDATE SET
             run_id = excluded.run_id, measured = excluded.measured,
             reconciled = excluded.reconciled, sigma = excluded.sigma,
             adjustment = excluded.adjustment, adjustment_sigma = excluded.adjustment_sigma,
             normalized_adjustment = excluded.normalized_adjustment,
             redundant = excluded.redundant, flagged = excluded.flagged,
             readings = excluded.readings, bad_readings = excluded.bad_readings,
             out_of_range_readings = excluded.out_of_range_readings,
             correlations = excluded.correlations",
    )
    .bind(plant.id)
    .bind(column(&rows, |(run_id, _)| *run_id))
    .bind(column(&rows, |(_, (tag, _))| tag.as_str()))
    .bind(column(&rows, |(_, (_, p))| Millis::from(p.period_start).0))
    .bind(column(&rows, |(_, (_, p))| p.measured))
    .bind(column(&rows, |(_, (_, p))| p.reconciled))
    .bind(column(&rows, |(_, (_, p))| p.sigma))
    .bind(column(&rows, |(_, (_, p))| p.adjustment))
    .bind(column(&rows, |(_, (_, p))| p.adjustment_sigma))
    .bind(column(&rows, |(_, (_, p))| p.normalized))
    .bind(column(&rows, |(_, (_, p))| p.redundant))
    .bind(column(&rows, |(_, (_, p))| p.flagged))
    .bind(column(&rows, |(_, (_, p))| p.readings))
    .bind(column(&rows, |(_, (_, p))| p.bad_readings))
    .bind(column(&rows, |(_, (_, p))| p.out_of_range_readings))
    .bind(correlations)
    .execute(&mut *tx)
    .await?;
    Ok(())
}

/// Insert or replace meter health states (inside a write transaction), all in one statement.
pub(super) async fn write_health_states(
    tx: &mut PgConnection,
    plant: &PlantRow,
    states: &[StateWrite],
) -> Result<()> {
    sqlx::query(
        "INSERT INTO meter_health (plant_id, tag, since, last_period, stale, state)
         SELECT $1, s.* FROM UNNEST($2::text[], $3::int8[], $4::int8[], $5::bool[], $6::bytea[])
             AS s (tag, since, last_period, stale, state)
         ON CONFLICT (plant_id, tag) DO UPDATE SET
             since = excluded.since, last_period = excluded.last_period,
             stale = excluded.stale, state = excluded.state",
    )
    .bind(plant.id)
    .bind(column(states, |s| s.0.as_str()))
    .bind(column(states, |s| s.1 .0))
    .bind(column(states, |s| s.2.map(|m| m.0)))
    .bind(column(states, |s| s.3))
    .bind(column(states, |s| s.4.clone()))
    .execute(&mut *tx)
    .await?;
    Ok(())
}
