//! What SQLite does its own way: opening a file, the write lock taken at BEGIN, batch writes as
//! multi-row VALUES or one statement a row, claims by its single writer on the service's clock,
//! and picking fields out of reports with its JSON functions.

use std::ops::RangeInclusive;
use std::time::Duration;

use chrono::{DateTime, Utc};
use reconcile::model::MeterSpec;
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use sqlx::{Sqlite, SqliteConnection, Transaction};

use super::claims::lease_ms;
use super::meter_health::StateWrite;
use super::rows::{self, Claim, PlantRow};
use super::values::{JsonText, Millis};
use super::Result;
use crate::health::MeterPeriod;

mod allocator;
mod readings;

#[cfg(test)]
pub(super) use readings::{MARKS_PER_STATEMENT, READINGS_PER_STATEMENT};

/// The SQLite schema, embedded in the binary and applied at start-up. sqlx reads only the
/// files directly in a migration folder, so migrations/postgres/ is not part of it.
pub(super) static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations");

/// How long a writer waits for SQLite's write lock before giving up.
const BUSY_TIMEOUT: Duration = Duration::from_secs(10);

/// SQLite through a connection pool. Writers serialise on SQLite's single write lock; the busy
/// timeout makes a second writer wait for it instead of failing at once.
#[derive(Debug, Clone)]
pub struct SqliteStore {
    pub(super) pool: SqlitePool,
}

impl SqliteStore {
    /// Open (creating it if missing) the database `options` name and apply any newer
    /// migrations.
    pub(super) async fn open(options: SqliteConnectOptions) -> Result<SqliteStore> {
        allocator::tune();
        let options = options
            .create_if_missing(true)
            // WAL lets readers (reports, dashboards) go on while a batch of readings is
            // written; NORMAL sync is durable across application crashes in WAL mode.
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Normal)
            .foreign_keys(true)
            .busy_timeout(BUSY_TIMEOUT);
        let pool = SqlitePoolOptions::new().connect_with(options).await?;
        MIGRATOR.run(&pool).await?;
        Ok(SqliteStore { pool })
    }

    /// A write transaction that takes SQLite's write lock at BEGIN: a deferred one that reads
    /// first could fail to upgrade when another writer commits in between, and the busy
    /// timeout does not retry that.
    pub(super) async fn write(&self) -> Result<Transaction<'static, Sqlite>> {
        Ok(self.pool.begin_with("BEGIN IMMEDIATE").await?)
    }

    /// Claim up to `limit` of the plant's dirty periods starting within `starts` that no live
    /// claim holds and no recorded failure holds back (its `retry_after` still to come), oldest
    /// first. SQLite has one writer at a time, so the single statement cannot race another
    /// claimer.
    pub(super) async fn claim_due(
        &self,
        plant: &PlantRow,
        instance: &str,
        starts: &RangeInclusive<DateTime<Utc>>,
        lease: Duration,
        limit: usize,
    ) -> Result<Vec<Claim>> {
        let now = Millis::now();
        let rows = sqlx::query(
            "UPDATE dirty_periods SET claimed_by = $1, lease_until = $2
             WHERE plant_id = $3 AND period_start IN (
                 SELECT period_start FROM dirty_periods
                 WHERE plant_id = $3 AND period_start BETWEEN $4 AND $7
                   AND (lease_until IS NULL OR lease_until <= $5)
                   AND NOT EXISTS (
                       SELECT 1 FROM run_failures f
                       WHERE f.plant_id = $3 AND f.period_start = dirty_periods.period_start
                         AND f.retry_after > $5)
                 ORDER BY period_start LIMIT $6)
             RETURNING period_start, marked_at",
        )
        .bind(instance)
        .bind(now.0.saturating_add(lease_ms(lease)))
        .bind(plant.id)
        .bind(Millis::from(*starts.start()))
        .bind(now)
        .bind(i64::try_from(limit).unwrap_or(i64::MAX))
        .bind(Millis::from(*starts.end()))
        .fetch_all(&self.pool)
        .await?;
        rows::claims(instance, &rows)
    }

    /// Extend a claim's lease from the service's clock; false if it is no longer held.
    pub(super) async fn renew_claim(
        &self,
        plant: &PlantRow,
        claim: &Claim,
        lease: Duration,
    ) -> Result<bool> {
        let done = sqlx::query(
            "UPDATE dirty_periods SET lease_until = $1
             WHERE plant_id = $2 AND period_start = $3 AND claimed_by = $4",
        )
        .bind(Millis::now().0.saturating_add(lease_ms(lease)))
        .bind(plant.id)
        .bind(Millis::from(claim.period_start))
        .bind(&claim.instance)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }

    /// Parts of the current report of every period starting in `[from, to)`: SQLite picks the
    /// fields out, so a year of hourly reports is answered without reading every meter of
    /// every one of them.
    pub(super) async fn current_reports(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        fields: &[&str],
    ) -> Result<Vec<(DateTime<Utc>, serde_json::Value)>> {
        // One `json_object(?, report_json -> ?)` pair per field; names and paths are bound.
        let pairs = vec!["?, json(report_json -> ?)"; fields.len()].join(", ");
        let sql = format!(
            "SELECT period_start, json_object({pairs}) AS part FROM runs
             WHERE plant_id = ? AND current = 1 AND period_start >= ? AND period_start < ?
             ORDER BY period_start"
        );
        let mut query = sqlx::query(&sql);
        for field in fields {
            query = query.bind(*field).bind(format!("$.\"{field}\""));
        }
        let rows = query
            .bind(plant.id)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(rows::report_part).collect()
    }
}

/// The meters of a new revision, one statement each (a model has tens of meters, and a
/// revision is rare).
pub(super) async fn insert_meters(
    tx: &mut SqliteConnection,
    plant: &PlantRow,
    revision: i64,
    meters: &[MeterSpec],
) -> Result<()> {
    for m in meters {
        sqlx::query(
            "INSERT INTO meters
                 (plant_id, revision, tag, stream, quantity, component, uom,
                  range_lo, range_hi)
             VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        )
        .bind(plant.id)
        .bind(revision)
        .bind(&m.tag)
        .bind(&m.stream)
        .bind(m.quantity.as_str())
        .bind(&m.component)
        .bind(&m.uom)
        .bind(m.range.map(|r| r[0]))
        .bind(m.range.map(|r| r[1]))
        .execute(&mut *tx)
        .await?;
    }
    Ok(())
}

/// Insert or replace the meter rows of a run (inside the run's transaction), one statement a
/// row.
/// The meters' records of runs (each run's id with its rows), replacing their periods' earlier
/// rows, in one statement per chunk of rows (one round trip to the connection's thread instead
/// of one per meter); 16 values a row, far below SQLite's limit of 32,766.
pub(super) async fn write_meter_periods(
    tx: &mut SqliteConnection,
    plant: &PlantRow,
    runs: &[(i64, &[(String, MeterPeriod)])],
) -> Result<()> {
    const ROWS_PER_INSERT: usize = 100;
    let rows: Vec<(i64, &String, &MeterPeriod)> = runs
        .iter()
        .flat_map(|(run_id, rows)| rows.iter().map(move |(tag, p)| (*run_id, tag, p)))
        .collect();
    for chunk in rows.chunks(ROWS_PER_INSERT) {
        let values =
            vec!["(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"; chunk.len()].join(", ");
        let sql = format!(
            "INSERT INTO meter_periods
                 (plant_id, tag, period_start, run_id, measured, reconciled, sigma, adjustment,
                  adjustment_sigma, normalized_adjustment, redundant, flagged, readings,
                  bad_readings, out_of_range_readings, correlations)
             VALUES {values}
             ON CONFLICT (plant_id, tag, period_start) DO UPDATE SET
                 run_id = excluded.run_id, measured = excluded.measured,
                 reconciled = excluded.reconciled, sigma = excluded.sigma,
                 adjustment = excluded.adjustment, adjustment_sigma = excluded.adjustment_sigma,
                 normalized_adjustment = excluded.normalized_adjustment,
                 redundant = excluded.redundant, flagged = excluded.flagged,
                 readings = excluded.readings, bad_readings = excluded.bad_readings,
                 out_of_range_readings = excluded.out_of_range_readings,
                 correlations = excluded.correlations"
        );
        let mut query = sqlx::query(&sql);
        for (run_id, tag, p) in chunk {
            query = query
                .bind(plant.id)
                .bind(*tag)
                .bind(Millis::from(p.period_start))
                .bind(*run_id)
                .bind(p.measured)
                .bind(p.reconciled)
                .bind(p.sigma)
                .bind(p.adjustment)
                .bind(p.adjustment_sigma)
                .bind(p.normalized)
                .bind(p.redundant)
                .bind(p.flagged)
                .bind(p.readings)
                .bind(p.bad_readings)
                .bind(p.out_of_range_readings)
                .bind(JsonText::of(&p.correlations)?);
        }
        query.execute(&mut *tx).await?;
    }
    Ok(())
}

/// Insert or replace meter health states (inside a write transaction), one statement a state.
pub(super) async fn write_health_states(
    tx: &mut SqliteConnection,
    plant: &PlantRow,
    states: &[StateWrite],
) -> Result<()> {
    for (tag, since, last, stale, state) in states {
        sqlx::query(
            "INSERT INTO meter_health (plant_id, tag, since, last_period, stale, state)
             VALUES (?, ?, ?, ?, ?, ?)
             ON CONFLICT (plant_id, tag) DO UPDATE SET
                 since = excluded.since, last_period = excluded.last_period,
                 stale = excluded.stale, state = excluded.state",
        )
        .bind(plant.id)
        .bind(tag)
        .bind(since)
        .bind(last)
        .bind(stale)
        .bind(state)
        .execute(&mut *tx)
        .await?;
    }
    Ok(())
}
