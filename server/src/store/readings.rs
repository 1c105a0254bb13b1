//! Readings and the dirty marks of the periods they belong to. Storing a batch is each
//! dialect's own (`sqlite/readings.rs`, `pg/readings.rs`); what it must do, and every read, is
//! here.

use std::collections::{BTreeMap, HashSet};

use chrono::{DateTime, Utc};
use reconcile::Reading;

use super::rows::{self, IngestCounts, PlantRow, StoredReading};
use super::values::Millis;
use super::{Result, Store, StoreError};

/// Whether a reading lies outside its meter's instrument range (the caller knows which model
/// revision judges each reading).
pub type OutOfRange<'a> = &'a (dyn Fn(&Reading) -> bool + Sync);

/// The range check of one map of instrument ranges by tag.
pub fn outside(ranges: &BTreeMap<String, [f64; 2]>) -> impl Fn(&Reading) -> bool + Sync + '_ {
    move |r| {
        ranges
            .get(&r.tag)
            .is_some_and(|[lo, hi]| !(*lo..=*hi).contains(&r.value))
    }
}

/// The batch cut into runs of at most `per_statement` readings with no (tag, instant) twice in
/// one run: within a statement the probe sees the table as it was before the statement (and
/// PostgreSQL's upsert refuses to touch one row twice), so a repeat must wait for the next
/// statement to see its predecessor, as it would with one statement per reading.
pub(super) fn runs(readings: &[Reading], per_statement: usize) -> Vec<&[Reading]> {
    let mut runs = Vec::with_capacity(readings.len() / per_statement + 1);
    let mut keys: HashSet<(&str, Millis)> =
        HashSet::with_capacity(per_statement.min(readings.len()));
    let mut start = 0;
    for (i, r) in readings.iter().enumerate() {
        let key = (r.tag.as_str(), Millis::from(r.time));
        if i - start == per_statement || keys.contains(&key) {
            runs.push(&readings[start..i]);
            start = i;
            keys.clear();
        }
        keys.insert(key);
    }
    if start < readings.len() {
        runs.push(&readings[start..]);
    }
    runs
}

impl IngestCounts {
    /// Count a run of `len` readings of which `new` were new and `changed` replaced a stored
    /// one; the database's answer is checked against the run first.
    pub(super) fn add_run(&mut self, len: usize, new: usize, changed: usize) -> Result<()> {
        if new + changed > len {
            return Err(StoreError::Corrupt(format!(
                "{len} readings stored as {new} new and {changed} changed"
            )));
        }
        self.accepted += new;
        self.replaced += changed;
        self.unchanged += len - new - changed;
        Ok(())
    }
}

/// What every dialect's batch shares: the plant, the period length in ms and the one instant
/// every row of the batch is received at.
pub(super) struct Batch<'a> {
    pub plant: &'a PlantRow,
    pub readings: &'a [Reading],
    pub period_ms: i64,
    pub received_at: Millis,
    pub out_of_range: OutOfRange<'a>,
}

impl Store {
    /// Store a batch of checked readings in one transaction, idempotently by (plant, tag,
    /// time), and mark the period of every new or changed reading dirty. A reading for which
    /// `out_of_range` holds is stored flagged.
    pub async fn ingest_readings(
        &self,
        plant: &PlantRow,
        readings: &[Reading],
        period_seconds: i64,
        out_of_range: OutOfRange<'_>,
    ) -> Result<IngestCounts> {
        if period_seconds <= 0 {
            return Err(StoreError::InvalidPeriod(period_seconds));
        }
        let period_ms = period_seconds
            .checked_mul(1000)
            .ok_or(StoreError::InvalidPeriod(period_seconds))?;
        let batch = Batch {
            plant,
            readings,
            period_ms,
            received_at: Millis::now(),
            out_of_range,
        };
        on_backend!(self, s => s.ingest(&batch).await)
    }

    /// Readings with `from <= time < to`, by time then tag.
    pub async fn readings_in(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<StoredReading>> {
        const SQL: &str = "
            SELECT tag, time, value, quality, received_at, out_of_range FROM readings
            WHERE plant_id = $1 AND time >= $2 AND time < $3 ORDER BY time, tag";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::stored_reading)
            .collect())
    }

    /// Whether the plant has any dirty period: the scheduler's cheap look on every pass.
    /// SQLite's 0/1 decodes as a bool.
    pub async fn has_dirty_periods(&self, plant: &PlantRow) -> Result<bool> {
        const SQL: &str = "SELECT EXISTS (SELECT 1 FROM dirty_periods WHERE plant_id = $1)";
        Ok(on_backend!(self, s => sqlx::query_scalar::<_, bool>(SQL)
            .bind(plant.id)
            .fetch_one(&s.pool)
            .await?))
    }

    /// Dirty periods of a plant with the instant each was last marked, oldest period first.
    pub async fn dirty_periods(
        &self,
        plant: &PlantRow,
    ) -> Result<Vec<(DateTime<Utc>, DateTime<Utc>)>> {
        const SQL: &str = "
            SELECT period_start, marked_at FROM dirty_periods
            WHERE plant_id = $1 ORDER BY period_start";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::dirty_period)
            .collect())
    }

    /// Clear a dirty mark unless it was set after `marked_up_to`, without a run: for tests
    /// that reset marks (the service settles marks only by recording claimed runs).
    #[cfg(test)]
    pub async fn clear_dirty(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
        marked_up_to: DateTime<Utc>,
    ) -> Result<bool> {
        const SQL: &str = "
            DELETE FROM dirty_periods
            WHERE plant_id = $1 AND period_start = $2 AND marked_at <= $3";
        let done = on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(Millis::from(period_start))
            .bind(Millis::from(marked_up_to))
            .execute(&s.pool)
            .await?
            .rows_affected());
        Ok(done > 0)
    }
}
