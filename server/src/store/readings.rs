//! Readings and the dirty marks of the periods they belong to.

use std::collections::{BTreeMap, BTreeSet};

use chrono::{DateTime, Utc};
use reconcile::period::period_start;
use reconcile::{Quality, Reading};
use sqlx::Row;

use super::{from_ms, now_ms, to_ms, PlantRow, Result, SqliteStore, StoreError};

/// What one batch did: `accepted` readings were new, `replaced` changed the value or quality
/// of a stored one, `unchanged` were identical resends.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct IngestCounts {
    pub accepted: usize,
    pub replaced: usize,
    pub unchanged: usize,
}

/// A reading as stored, with what the store knows about it.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredReading {
    pub reading: Reading,
    pub received_at: DateTime<Utc>,
    /// Outside the meter's instrument range when it was stored.
    pub out_of_range: bool,
}

fn quality_str(q: Quality) -> &'static str {
    match q {
        Quality::Good => "good",
        Quality::Uncertain => "uncertain",
        Quality::Bad => "bad",
    }
}

impl SqliteStore {
    pub(super) async fn ingest_readings(
        &self,
        plant: &PlantRow,
        readings: &[Reading],
        period_seconds: i64,
        ranges: &BTreeMap<String, [f64; 2]>,
    ) -> Result<IngestCounts> {
        if period_seconds <= 0 {
            return Err(StoreError::InvalidPeriod(period_seconds));
        }
        let received_at = now_ms();
        let mut counts = IngestCounts::default();
        let mut dirty = BTreeSet::new();
        // One transaction: a batch is stored whole or not at all. Dropping `tx` on an error
        // rolls it back.
        let mut tx = self.write().await?;
        for r in readings {
            let out_of_range = ranges
                .get(&r.tag)
                .is_some_and(|[lo, hi]| !(*lo..=*hi).contains(&r.value));
            // The upsert's WHERE leaves an identical resend untouched (no row returned); a
            // changed one bumps `replacements`, so 0 in the answer means a new row.
            let replacements: Option<i64> = sqlx::query_scalar(
                "INSERT INTO readings
                     (plant_id, tag, time, value, quality, received_at, out_of_range)
                 VALUES (?, ?, ?, ?, ?, ?, ?)
                 ON CONFLICT (plant_id, tag, time) DO UPDATE SET
                     value = excluded.value,
                     quality = excluded.quality,
                     received_at = excluded.received_at,
                     out_of_range = excluded.out_of_range,
                     replacements = readings.replacements + 1
                 WHERE readings.value IS NOT excluded.value
                    OR readings.quality IS NOT excluded.quality
                 RETURNING replacements",
            )
            .bind(plant.id)
            .bind(&r.tag)
            .bind(to_ms(r.time))
            .bind(r.value)
            .bind(quality_str(r.quality))
            .bind(received_at)
            .bind(out_of_range)
            .fetch_optional(&mut *tx)
            .await?;
            match replacements {
                None => {
                    counts.unchanged += 1;
                    continue;
                }
                Some(0) => counts.accepted += 1,
                Some(_) => counts.replaced += 1,
            }
            dirty.insert(to_ms(period_start(r.time, period_seconds)));
        }
        for start in dirty {
            // A re-mark always moves marked_at forward, even within one millisecond, so a run
            // that started from an older mark never clears a newer one (see clear_dirty).
            sqlx::query(
                "INSERT INTO dirty_periods (plant_id, period_start, marked_at) VALUES (?, ?, ?)
                 ON CONFLICT (plant_id, period_start) DO UPDATE SET
                     marked_at = MAX(excluded.marked_at, dirty_periods.marked_at + 1)",
            )
            .bind(plant.id)
            .bind(start)
            .bind(received_at)
            .execute(&mut *tx)
            .await?;
        }
        tx.commit().await?;
        Ok(counts)
    }

    pub(super) async fn readings_in(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<StoredReading>> {
        let rows = sqlx::query(
            "SELECT tag, time, value, quality, received_at, out_of_range FROM readings
             WHERE plant_id = ? AND time >= ? AND time < ? ORDER BY time, tag",
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

    pub(super) async fn dirty_periods(
        &self,
        plant: &PlantRow,
    ) -> Result<Vec<(DateTime<Utc>, DateTime<Utc>)>> {
        let rows = sqlx::query(
            "SELECT period_start, marked_at FROM dirty_periods
             WHERE plant_id = ? ORDER BY period_start",
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

    pub(super) async fn clear_dirty(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
        marked_up_to: DateTime<Utc>,
    ) -> Result<bool> {
        let done = sqlx::query(
            "DELETE FROM dirty_periods
             WHERE plant_id = ? AND period_start = ? AND marked_at <= ?",
        )
        .bind(plant.id)
        .bind(to_ms(period_start))
        .bind(to_ms(marked_up_to))
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }
}
