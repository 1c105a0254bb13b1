//! Readings and the dirty marks of their periods, in PostgreSQL.

use std::collections::BTreeSet;

use chrono::{DateTime, Utc};
use reconcile::{Quality, Reading};
use sqlx::Row;

use super::super::readings::{quality_str, runs};
use super::super::{
    from_ms, now_ms, to_ms, IngestCounts, OutOfRange, PlantRow, Result, StoreError, StoredReading,
};
use super::PgStore;

/// Readings per statement. The readings travel as five arrays, so there is no parameter limit
/// to respect; the cap only bounds the size of one message and of the statement's work.
const READINGS_PER_STATEMENT: usize = 10_000;

/// The upsert of one run of readings, given as arrays ($2 tags, $3 instants, $4 values,
/// $5 qualities, $7 out-of-range flags) for plant $1, received at $6, and what it did: how
/// many rows it inserted, how many it replaced, and the distinct starts of their periods of
/// $8 ms. An identical resend is left untouched (the WHERE) and so is not returned; a changed
/// one bumps `replacements`, which tells a replaced row from an inserted one (0).
const UPSERT: &str = "
    WITH written AS (
        INSERT INTO readings AS r
            (plant_id, tag, time, value, quality, received_at, out_of_range)
        SELECT $1, b.tag, b.time, b.value, b.quality, $6, b.out_of_range
        FROM UNNEST($2::text[], $3::int8[], $4::float8[], $5::text[], $7::bool[])
            AS b (tag, time, value, quality, out_of_range)
        ON CONFLICT (plant_id, tag, time) DO UPDATE SET
            value = excluded.value,
            quality = excluded.quality,
            received_at = excluded.received_at,
            out_of_range = excluded.out_of_range,
            replacements = r.replacements + 1
        WHERE r.value IS DISTINCT FROM excluded.value
           OR r.quality IS DISTINCT FROM excluded.quality
        RETURNING r.time, r.replacements = 0 AS new
    )
    SELECT COUNT(*) FILTER (WHERE new) AS new,
           COUNT(*) FILTER (WHERE NOT new) AS changed,
           -- The Euclidean floor of the time to a multiple of the period, as in
           -- reconcile::period::period_start (PostgreSQL's % truncates towards zero).
           ARRAY(SELECT DISTINCT time - ((time % $8) + $8) % $8 FROM written) AS periods
    FROM written";

/// Dirty marks of the periods $2 of plant $1, at $3. A re-mark always moves marked_at
/// forward, even within one millisecond, so a run that started from an older mark never
/// clears a newer one (see `claims::settle`).
const MARK: &str = "
    INSERT INTO dirty_periods (plant_id, period_start, marked_at)
    SELECT $1, p, $3 FROM UNNEST($2::int8[]) AS p
    ON CONFLICT (plant_id, period_start) DO UPDATE SET
        marked_at = GREATEST(excluded.marked_at, dirty_periods.marked_at + 1)";

impl PgStore {
    pub(in crate::store) async fn ingest_readings(
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
        let received_at = now_ms();
        let mut counts = IngestCounts::default();
        let mut dirty = BTreeSet::new();
        // One transaction: a batch is stored whole or not at all. Dropping `tx` on an error
        // rolls it back. Each upsert takes the row locks of the readings it meets, so a
        // concurrent batch touching the same readings waits for this one.
        let mut tx = self.pool.begin().await?;
        // The rows are written, and so locked, in key order whatever the batch's order: two
        // batches over the same readings then queue one behind the other, where in their own
        // orders they could each hold a row the other waits for, a deadlock PostgreSQL ends by
        // aborting one. The sort is stable and by the stored key (a time is kept to the ms),
        // so repeats of one reading keep their order and the last still wins.
        let mut ordered = readings.to_vec();
        ordered.sort_by(|a, b| a.tag.cmp(&b.tag).then(to_ms(a.time).cmp(&to_ms(b.time))));
        for run in runs(&ordered, READINGS_PER_STATEMENT) {
            let found = sqlx::query(UPSERT)
                .bind(plant.id)
                .bind(run.iter().map(|r| r.tag.as_str()).collect::<Vec<_>>())
                .bind(run.iter().map(|r| to_ms(r.time)).collect::<Vec<_>>())
                .bind(run.iter().map(|r| r.value).collect::<Vec<_>>())
                .bind(
                    run.iter()
                        .map(|r| quality_str(r.quality))
                        .collect::<Vec<_>>(),
                )
                .bind(received_at)
                .bind(run.iter().map(out_of_range).collect::<Vec<_>>())
                .bind(period_ms)
                .fetch_one(&mut *tx)
                .await?;
            let new = found.try_get::<i64, _>("new")? as usize;
            let changed = found.try_get::<i64, _>("changed")? as usize;
            let periods: Vec<i64> = found.try_get("periods")?;
            if new + changed > run.len() {
                return Err(StoreError::Corrupt(format!(
                    "the upsert of {} readings wrote {new} new and {changed} changed",
                    run.len()
                )));
            }
            dirty.extend(periods);
            counts.accepted += new;
            counts.replaced += changed;
            counts.unchanged += run.len() - new - changed;
        }
        if !dirty.is_empty() {
            sqlx::query(MARK)
                .bind(plant.id)
                .bind(dirty.into_iter().collect::<Vec<i64>>())
                .bind(received_at)
                .execute(&mut *tx)
                .await?;
        }
        tx.commit().await?;
        Ok(counts)
    }

    pub(in crate::store) async fn readings_in(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<StoredReading>> {
        let rows = sqlx::query(
            "SELECT tag, time, value, quality, received_at, out_of_range FROM readings
             WHERE plant_id = $1 AND time >= $2 AND time < $3 ORDER BY time, tag",
        )
        .bind(plant.id)
        .bind(to_ms(from))
        .bind(to_ms(to))
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let quality: String = r.try_get("quality")?;
                let quality = Quality::parse(&quality)
                    .ok_or_else(|| StoreError::Corrupt(format!("quality \"{quality}\"")))?;
                Ok(StoredReading {
                    reading: Reading {
                        tag: r.try_get("tag")?,
                        time: from_ms(r.try_get("time")?)?,
                        value: r.try_get("value")?,
                        quality,
                    },
                    received_at: from_ms(r.try_get("received_at")?)?,
                    out_of_range: r.try_get("out_of_range")?,
                })
            })
            .collect()
    }

    pub(in crate::store) async fn dirty_periods(
        &self,
        plant: &PlantRow,
    ) -> Result<Vec<(DateTime<Utc>, DateTime<Utc>)>> {
        let rows = sqlx::query(
            "SELECT period_start, marked_at FROM dirty_periods
             WHERE plant_id = $1 ORDER BY period_start",
        )
        .bind(plant.id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok((
                    from_ms(r.try_get("period_start")?)?,
                    from_ms(r.try_get("marked_at")?)?,
                ))
            })
            .collect()
    }

    #[cfg(test)]
    pub(in crate::store) async fn clear_dirty(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
        marked_up_to: DateTime<Utc>,
    ) -> Result<bool> {
        let done = sqlx::query(
            "DELETE FROM dirty_periods
             WHERE plant_id = $1 AND period_start = $2 AND marked_at <= $3",
        )
        .bind(plant.id)
        .bind(to_ms(period_start))
        .bind(to_ms(marked_up_to))
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }
}
