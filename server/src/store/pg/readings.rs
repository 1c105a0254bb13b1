//! Storing a batch of readings in PostgreSQL: per run of readings, one upsert of arrays that
//! answers what it did, then one statement marking the periods it changed.

use std::collections::BTreeSet;

use sqlx::Row;

use super::super::readings::{runs, Batch};
use super::super::rows::{quality_str, IngestCounts};
use super::super::values::Millis;
use super::super::Result;
use super::{column, PgStore};

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
    pub(in crate::store) async fn ingest(&self, batch: &Batch<'_>) -> Result<IngestCounts> {
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
        let mut ordered = batch.readings.to_vec();
        ordered.sort_by(|a, b| {
            (a.tag.as_str(), Millis::from(a.time)).cmp(&(b.tag.as_str(), Millis::from(b.time)))
        });
        for run in runs(&ordered, READINGS_PER_STATEMENT) {
            let found = sqlx::query(UPSERT)
                .bind(batch.plant.id)
                .bind(column(run, |r| r.tag.as_str()))
                .bind(column(run, |r| Millis::from(r.time).0))
                .bind(column(run, |r| r.value))
                .bind(column(run, |r| quality_str(r.quality)))
                .bind(batch.received_at)
                .bind(column(run, batch.out_of_range))
                .bind(batch.period_ms)
                .fetch_one(&mut *tx)
                .await?;
            let new: i64 = found.try_get("new")?;
            let changed: i64 = found.try_get("changed")?;
            let periods: Vec<i64> = found.try_get("periods")?;
            counts.add_run(run.len(), new as usize, changed as usize)?;
            dirty.extend(periods);
        }
        if !dirty.is_empty() {
            sqlx::query(MARK)
                .bind(batch.plant.id)
                .bind(dirty.into_iter().collect::<Vec<i64>>())
                .bind(batch.received_at)
                .execute(&mut *tx)
                .await?;
        }
        tx.commit().await?;
        Ok(counts)
    }
}
