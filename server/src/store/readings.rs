//! Readings and the dirty marks of the periods they belong to.

use std::collections::{BTreeMap, BTreeSet, HashSet};
use std::sync::OnceLock;

use chrono::{DateTime, Utc};
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

pub(super) fn quality_str(q: Quality) -> &'static str {
    match q {
        Quality::Good => "good",
        Quality::Uncertain => "uncertain",
        Quality::Bad => "bad",
    }
}

/// Readings per statement: 7 parameters a row in the upsert, far under SQLite's limit of
/// 32 766 (3.32 and later). A few hundred rows per statement take most of the gain over one
/// statement per row (a round trip to sqlx's connection thread each) and stay cheap to prepare.
const READINGS_PER_STATEMENT: usize = 500;

/// Dirty marks per statement (3 parameters each).
const MARKS_PER_STATEMENT: usize = 500;

/// `rows` groups of `width` anonymous parameters: `(?, ?), (?, ?)`. Anonymous, not numbered:
/// sqlx asks SQLite for every parameter's name when it binds, and SQLite finds a numbered
/// parameter's name by a linear search, which made binding a statement of a few thousand
/// `?NNN` quadratic (more than half the time of a batch).
fn values(rows: usize, width: usize) -> String {
    let group = format!("({})", vec!["?"; width].join(", "));
    vec![group; rows].join(", ")
}

/// What `rows` readings (tag, time, value, quality, then the plant and the period in ms) would
/// do, before they are written: how many there are, how many are new, how many change a
/// stored reading, and the distinct period starts of the new and changed ones as one
/// comma-separated text. One answer row whatever the number of readings: the rows of an answer
/// cross from sqlx's connection thread one by one, and one row per reading (`RETURNING`) would
/// cost a thread hand-over each.
fn probe_sql(rows: usize) -> String {
    // The period start is the Euclidean floor of the time to a multiple of the period, as in
    // reconcile::period::period_start (SQLite's % truncates towards zero).
    format!(
        "WITH batch (tag, time, value, quality) AS (VALUES {}),
              given (plant_id, period) AS (VALUES (?, ?)),
              probe AS (
                  SELECT b.time - ((b.time % g.period) + g.period) % g.period AS period_start,
                         r.time IS NULL AS new,
                         r.time IS NOT NULL
                             AND (r.value IS NOT b.value OR r.quality IS NOT b.quality)
                             AS changed
                  FROM batch AS b
                  CROSS JOIN given AS g
                  LEFT JOIN readings AS r
                      ON r.plant_id = g.plant_id AND r.tag = b.tag AND r.time = b.time
              )
         SELECT COUNT(*), SUM(new), SUM(changed),
                GROUP_CONCAT(DISTINCT CASE WHEN new OR changed THEN period_start END)
         FROM probe",
        values(rows, 4)
    )
}

/// The upsert of `rows` readings (plant, tag, time, value, quality, received_at, out_of_range).
fn upsert_sql(rows: usize) -> String {
    // An identical resend is left untouched (the WHERE); a changed one bumps `replacements`.
    format!(
        "INSERT INTO readings
             (plant_id, tag, time, value, quality, received_at, out_of_range)
         VALUES {}
         ON CONFLICT (plant_id, tag, time) DO UPDATE SET
             value = excluded.value,
             quality = excluded.quality,
             received_at = excluded.received_at,
             out_of_range = excluded.out_of_range,
             replacements = readings.replacements + 1
         WHERE readings.value IS NOT excluded.value
            OR readings.quality IS NOT excluded.quality",
        values(rows, 7)
    )
}

/// Dirty marks of `rows` periods (plant, period_start, marked_at).
fn mark_sql(rows: usize) -> String {
    // A re-mark always moves marked_at forward, even within one millisecond, so a run that
    // started from an older mark never clears a newer one (see `claims::settle`).
    format!(
        "INSERT INTO dirty_periods (plant_id, period_start, marked_at) VALUES {}
         ON CONFLICT (plant_id, period_start) DO UPDATE SET
             marked_at = MAX(excluded.marked_at, dirty_periods.marked_at + 1)",
        values(rows, 3)
    )
}

/// The texts of full-size statements, made once: sqlx keeps a prepared statement per text.
struct FullSize {
    probe: String,
    upsert: String,
    mark: String,
}

fn full_size() -> &'static FullSize {
    static SQL: OnceLock<FullSize> = OnceLock::new();
    SQL.get_or_init(|| FullSize {
        probe: probe_sql(READINGS_PER_STATEMENT),
        upsert: upsert_sql(READINGS_PER_STATEMENT),
        mark: mark_sql(MARKS_PER_STATEMENT),
    })
}

/// The batch cut into runs of at most `per_statement` readings with no (tag, instant) twice in
/// one run: within a statement the probe sees the table as it was before the statement (and
/// PostgreSQL's upsert refuses to touch one row twice), so a repeat must wait for the next
/// statement to see its predecessor, as it would with one statement per reading.
pub(super) fn runs(readings: &[Reading], per_statement: usize) -> Vec<&[Reading]> {
    let mut runs = Vec::with_capacity(readings.len() / per_statement + 1);
    let mut keys: HashSet<(&str, i64)> = HashSet::with_capacity(per_statement.min(readings.len()));
    let mut start = 0;
    for (i, r) in readings.iter().enumerate() {
        let key = (r.tag.as_str(), to_ms(r.time));
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

impl SqliteStore {
    pub(super) async fn ingest_readings(
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
        let full = full_size();
        // One transaction: a batch is stored whole or not at all. Dropping `tx` on an error
        // rolls it back. BEGIN IMMEDIATE holds the write lock throughout, so what the probe
        // finds is what the upsert that follows it meets.
        let mut tx = self.write().await?;
        for run in runs(readings, READINGS_PER_STATEMENT) {
            let is_full = run.len() == READINGS_PER_STATEMENT;
            // A shorter run's one-off text is prepared for this call only, so it does not push
            // the full-size statements out of sqlx's statement cache.
            let (probe_text, upsert_text) = if is_full {
                (None, None)
            } else {
                (Some(probe_sql(run.len())), Some(upsert_sql(run.len())))
            };
            let mut probe =
                sqlx::query(probe_text.as_deref().unwrap_or(&full.probe)).persistent(is_full);
            for r in run {
                probe = probe
                    .bind(r.tag.as_str())
                    .bind(to_ms(r.time))
                    .bind(r.value)
                    .bind(quality_str(r.quality));
            }
            let probe = probe.bind(plant.id).bind(period_ms);
            let found = probe.fetch_one(&mut *tx).await?;
            let total: i64 = found.try_get(0)?;
            let new = found.try_get::<i64, _>(1)? as usize;
            let changed = found.try_get::<i64, _>(2)? as usize;
            let periods: Option<String> = found.try_get(3)?;
            if total as usize != run.len() || new + changed > run.len() {
                return Err(StoreError::Corrupt(format!(
                    "the probe of {} readings answered {total} ({new} new, {changed} changed)",
                    run.len()
                )));
            }
            for p in periods.iter().flat_map(|p| p.split(',')) {
                let start: i64 = p.parse().map_err(|_| {
                    StoreError::Corrupt(format!("the probe answered period start \"{p}\""))
                })?;
                dirty.insert(start);
            }

            let mut upsert =
                sqlx::query(upsert_text.as_deref().unwrap_or(&full.upsert)).persistent(is_full);
            for r in run {
                let out_of_range = out_of_range(r);
                upsert = upsert
                    .bind(plant.id)
                    .bind(r.tag.as_str())
                    .bind(to_ms(r.time))
                    .bind(r.value)
                    .bind(quality_str(r.quality))
                    .bind(received_at)
                    .bind(out_of_range);
            }
            // SQLite counts a row inserted or updated by the upsert, not one its WHERE left.
            let written = upsert.execute(&mut *tx).await?.rows_affected() as usize;
            if written != new + changed {
                return Err(StoreError::Corrupt(format!(
                    "{written} readings written where the probe expected {new} new and \
                     {changed} changed"
                )));
            }
            counts.accepted += new;
            counts.replaced += changed;
            counts.unchanged += run.len() - new - changed;
        }
        let dirty: Vec<i64> = dirty.into_iter().collect();
        for chunk in dirty.chunks(MARKS_PER_STATEMENT) {
            let is_full = chunk.len() == MARKS_PER_STATEMENT;
            let text = (!is_full).then(|| mark_sql(chunk.len()));
            let mut mark = sqlx::query(text.as_deref().unwrap_or(&full.mark)).persistent(is_full);
            for start in chunk {
                mark = mark.bind(plant.id).bind(*start).bind(received_at);
            }
            mark.execute(&mut *tx).await?;
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

    #[cfg(test)]
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

#[cfg(test)]
mod tests {
    //! Batches longer than one statement: chunk edges must not change what a batch does. On
    //! both backends, as in store/tests.rs.

    use chrono::TimeZone;
    use reconcile::period::period_start;

    use super::super::tests::Scratch;
    use super::*;

    #[tokio::test]
    async fn long_batches_on_sqlite() {
        long_batches_count_and_mark_as_one_statement_per_reading_would(Scratch::sqlite().await)
            .await
    }

    #[tokio::test]
    #[cfg_attr(
        not(loopbal_postgres_tests),
        ignore = "set LOOPBAL_TEST_POSTGRES_URL to run it on PostgreSQL"
    )]
    async fn long_batches_on_postgres() {
        long_batches_count_and_mark_as_one_statement_per_reading_would(Scratch::postgres().await)
            .await
    }

    #[tokio::test]
    async fn periods_before_1970_on_sqlite() {
        periods_are_marked_as_the_engine_floors_them_before_1970_too(Scratch::sqlite().await).await
    }

    #[tokio::test]
    #[cfg_attr(
        not(loopbal_postgres_tests),
        ignore = "set LOOPBAL_TEST_POSTGRES_URL to run it on PostgreSQL"
    )]
    async fn periods_before_1970_on_postgres() {
        periods_are_marked_as_the_engine_floors_them_before_1970_too(Scratch::postgres().await)
            .await
    }

    fn hourly(n: usize, tags: &[&str]) -> Vec<Reading> {
        let start = Utc.with_ymd_and_hms(2026, 3, 1, 0, 0, 0).unwrap();
        (0..n)
            .map(|i| Reading {
                tag: tags[i % tags.len()].to_string(),
                time: start + chrono::Duration::hours((i / tags.len()) as i64),
                value: 10.0 + i as f64 / 8.0,
                quality: Quality::Good,
            })
            .collect()
    }

    async fn long_batches_count_and_mark_as_one_statement_per_reading_would(db: Scratch) {
        let store = &db.store;
        let plant = store.create_plant("west").await.unwrap();
        let ranges = BTreeMap::from([("FT-1".to_string(), [0.0, 100.0])]);
        let n = 2 * READINGS_PER_STATEMENT + 203;
        let batch = hourly(n, &["FT-1", "FT-2"]);
        let periods = n.div_ceil(2);
        assert!(periods > MARKS_PER_STATEMENT);

        let counts = store
            .ingest_readings(&plant, &batch, 3600, &outside(&ranges))
            .await
            .unwrap();
        assert_eq!(
            (counts.accepted, counts.replaced, counts.unchanged),
            (n, 0, 0)
        );
        let dirty = store.dirty_periods(&plant).await.unwrap();
        assert_eq!(dirty.len(), periods);
        for (start, marked) in &dirty {
            assert!(store.clear_dirty(&plant, *start, *marked).await.unwrap());
        }
        let stored = store
            .readings_in(
                &plant,
                batch[0].time,
                batch[n - 1].time + chrono::Duration::hours(1),
            )
            .await
            .unwrap();
        assert_eq!(stored.len(), n);
        // FT-1 from 100 on is outside its range [0, 100]; FT-2 has none.
        let flagged = stored.iter().filter(|s| s.out_of_range).count();
        let expected = batch
            .iter()
            .filter(|r| r.tag == "FT-1" && r.value > 100.0)
            .count();
        assert!(expected > 0);
        assert_eq!(flagged, expected);

        // Changes on both sides of each chunk edge, one quality change, the rest resent.
        let mut again = batch.clone();
        let edges = [0, READINGS_PER_STATEMENT - 1, READINGS_PER_STATEMENT, n - 1];
        for &i in &edges {
            again[i].value += 1.0;
        }
        again[7].quality = Quality::Uncertain;
        let counts = store
            .ingest_readings(&plant, &again, 3600, &outside(&ranges))
            .await
            .unwrap();
        assert_eq!(
            (counts.accepted, counts.replaced, counts.unchanged),
            (0, 5, n - 5)
        );
        let marked: Vec<_> = store
            .dirty_periods(&plant)
            .await
            .unwrap()
            .into_iter()
            .map(|d| d.0)
            .collect();
        let mut want: Vec<_> = edges.iter().chain([&7]).map(|&i| batch[i].time).collect();
        want.sort();
        want.dedup();
        assert_eq!(marked, want);

        // Repeats of one (tag, instant) within a batch, in different statements, act in
        // order: the first new, an identical repeat unchanged, a different one replaced.
        let mut repeats = hourly(3, &["FT-3"]);
        for r in &mut repeats {
            r.time += chrono::Duration::days(365);
        }
        let mut batch = hourly(READINGS_PER_STATEMENT + 10, &["FT-4"]);
        batch[3] = repeats[0].clone();
        batch[READINGS_PER_STATEMENT + 1] = repeats[0].clone();
        batch[READINGS_PER_STATEMENT + 2] = Reading {
            value: repeats[0].value + 1.0,
            ..repeats[0].clone()
        };
        let counts = store
            .ingest_readings(&plant, &batch, 3600, &outside(&ranges))
            .await
            .unwrap();
        let m = batch.len();
        assert_eq!(
            (counts.accepted, counts.replaced, counts.unchanged),
            (m - 2, 1, 1)
        );
    }

    async fn periods_are_marked_as_the_engine_floors_them_before_1970_too(db: Scratch) {
        let store = &db.store;
        let plant = store.create_plant("west").await.unwrap();
        let times = [
            "1969-12-31T23:59:59.999Z",
            "1969-12-31T22:15:00Z",
            "1970-01-01T00:00:00Z",
            "1970-01-01T00:14:59.999Z",
            "2026-03-02T05:37:12.250Z",
        ];
        let batch: Vec<Reading> = times
            .iter()
            .map(|s| Reading {
                tag: "FT-1".into(),
                time: DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc),
                value: 1.0,
                quality: Quality::Good,
            })
            .collect();
        for period in [900, 3600, 7 * 86_400] {
            let mut batch = batch.clone();
            for r in &mut batch {
                r.value += period as f64;
            }
            store
                .ingest_readings(&plant, &batch, period, &|_: &Reading| false)
                .await
                .unwrap();
            let mut want: Vec<_> = batch.iter().map(|r| period_start(r.time, period)).collect();
            want.sort();
            want.dedup();
            let marked: Vec<_> = store
                .dirty_periods(&plant)
                .await
                .unwrap()
                .into_iter()
                .map(|d| d.0)
                .collect();
            assert_eq!(marked, want, "period {period} s");
            for (start, at) in store.dirty_periods(&plant).await.unwrap() {
                store.clear_dirty(&plant, start, at).await.unwrap();
            }
        }
    }
}
