//! Storing a batch of readings in SQLite: per run of readings, a probe of what the batch would
//! do and the upsert itself, each one statement of many rows (multi-row VALUES), under the
//! write lock taken at BEGIN. A run whose every reading is later than anything stored for its
//! tag (a historian posting the hours since its last batch, the usual case) needs no probe:
//! the latest stored instant of each tag of the batch, read once (one index seek a tag), tells
//! that every reading of it is new.

use std::collections::{BTreeSet, HashMap};
use std::sync::OnceLock;

use reconcile::period::period_start;
use sqlx::{Row, Sqlite, Transaction};

use super::super::readings::{runs, Batch};
use super::super::rows::{quality_str, IngestCounts};
use super::super::values::Millis;
use super::super::{Result, StoreError};
use super::SqliteStore;

/// Readings per statement: 7 parameters a row in the upsert, far under SQLite's limit of
/// 32 766 (3.32 and later). A few hundred rows per statement take most of the gain over one
/// statement per row (a round trip to sqlx's connection thread each) and stay cheap to prepare.
pub(in crate::store) const READINGS_PER_STATEMENT: usize = 500;

/// Dirty marks per statement (3 parameters each).
pub(in crate::store) const MARKS_PER_STATEMENT: usize = 500;

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

/// The latest stored instant of each of `tags` tags, given as (plant, tag) pairs; NULL for a
/// tag with none: a correlated MAX per tag, which SQLite answers with one seek of the primary
/// key each (a GROUP BY would read every reading of the tags).
fn latest_sql(tags: usize) -> String {
    format!(
        "WITH batch (plant_id, tag) AS (VALUES {})
         SELECT b.tag, (SELECT MAX(r.time) FROM readings AS r
                        WHERE r.plant_id = b.plant_id AND r.tag = b.tag)
         FROM batch AS b",
        values(tags, 2)
    )
}

/// Tags per statement of [`latest_sql`].
const TAGS_PER_STATEMENT: usize = 500;

/// Whether every reading of `run` is later than the latest instant `latest` holds for its tag
/// (stored, or written by an earlier run of the batch): then each one is new.
fn all_later(run: &[reconcile::Reading], latest: &HashMap<&str, i64>) -> bool {
    run.iter().all(|r| {
        latest
            .get(r.tag.as_str())
            .is_none_or(|&t| Millis::from(r.time).0 > t)
    })
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

/// The latest stored instant of every tag of the batch (tags with none are left out).
async fn latest_stored<'b>(
    tx: &mut Transaction<'static, Sqlite>,
    batch: &Batch<'b>,
) -> Result<HashMap<&'b str, i64>> {
    let tags: Vec<&str> = batch
        .readings
        .iter()
        .map(|r| r.tag.as_str())
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    let mut latest = HashMap::with_capacity(tags.len());
    for chunk in tags.chunks(TAGS_PER_STATEMENT) {
        let sql = latest_sql(chunk.len());
        let mut query = sqlx::query(&sql).persistent(false);
        for tag in chunk {
            query = query.bind(batch.plant.id).bind(*tag);
        }
        for row in query.fetch_all(&mut **tx).await? {
            let tag: String = row.try_get(0)?;
            let Ok(at) = chunk.binary_search(&tag.as_str()) else {
                return Err(StoreError::Corrupt(format!(
                    "the latest instants answered for tag \"{tag}\", not in the batch"
                )));
            };
            if let Some(t) = row.try_get::<Option<i64>, _>(1)? {
                latest.insert(chunk[at], t);
            }
        }
    }
    Ok(latest)
}

/// What `run` would do (the probe): how many of its readings are new and how many change a
/// stored one; the periods of those are added to `dirty`.
async fn probe(
    tx: &mut Transaction<'static, Sqlite>,
    batch: &Batch<'_>,
    run: &[reconcile::Reading],
    dirty: &mut BTreeSet<i64>,
) -> Result<(usize, usize)> {
    let is_full = run.len() == READINGS_PER_STATEMENT;
    let text = (!is_full).then(|| probe_sql(run.len()));
    let mut probe = sqlx::query(text.as_deref().unwrap_or(&full_size().probe)).persistent(is_full);
    for r in run {
        probe = probe
            .bind(r.tag.as_str())
            .bind(Millis::from(r.time))
            .bind(r.value)
            .bind(quality_str(r.quality));
    }
    let probe = probe.bind(batch.plant.id).bind(batch.period_ms);
    let found = probe.fetch_one(&mut **tx).await?;
    let total: i64 = found.try_get(0)?;
    let new = found.try_get::<i64, _>(1)? as usize;
    let changed = found.try_get::<i64, _>(2)? as usize;
    let periods: Option<String> = found.try_get(3)?;
    if total as usize != run.len() {
        return Err(StoreError::Corrupt(format!(
            "the probe of {} readings answered {total} ({new} new, {changed} changed)",
            run.len()
        )));
    }
    for p in periods.iter().flat_map(|p| p.split(',')) {
        let start: i64 = p
            .parse()
            .map_err(|_| StoreError::Corrupt(format!("the probe answered period start \"{p}\"")))?;
        dirty.insert(start);
    }
    Ok((new, changed))
}

impl SqliteStore {
    pub(in crate::store) async fn ingest(&self, batch: &Batch<'_>) -> Result<IngestCounts> {
        let mut counts = IngestCounts::default();
        let mut dirty = BTreeSet::new();
        let full = full_size();
        // One transaction: a batch is stored whole or not at all. Dropping `tx` on an error
        // rolls it back. BEGIN IMMEDIATE holds the write lock throughout, so what the probe
        // finds is what the upsert that follows it meets.
        let mut tx = self.write().await?;
        let mut latest = latest_stored(&mut tx, batch).await?;
        for run in runs(batch.readings, READINGS_PER_STATEMENT) {
            let is_full = run.len() == READINGS_PER_STATEMENT;
            // A shorter run's one-off text is prepared for this call only, so it does not push
            // the full-size statements out of sqlx's statement cache.
            let upsert_text = (!is_full).then(|| upsert_sql(run.len()));
            let (new, changed) = if all_later(run, &latest) {
                // The engine's own floor (the probe's SQL computes the same in ms).
                let seconds = batch.period_ms / 1000;
                dirty.extend(
                    run.iter()
                        .map(|r| Millis::from(period_start(r.time, seconds)).0),
                );
                (run.len(), 0)
            } else {
                probe(&mut tx, batch, run, &mut dirty).await?
            };
            counts.add_run(run.len(), new, changed)?;
            for r in run {
                let t = Millis::from(r.time).0;
                let kept = latest.entry(r.tag.as_str()).or_insert(t);
                *kept = (*kept).max(t);
            }
            let mut upsert =
                sqlx::query(upsert_text.as_deref().unwrap_or(&full.upsert)).persistent(is_full);
            for r in run {
                upsert = upsert
                    .bind(batch.plant.id)
                    .bind(r.tag.as_str())
                    .bind(Millis::from(r.time))
                    .bind(r.value)
                    .bind(quality_str(r.quality))
                    .bind(batch.received_at)
                    .bind((batch.out_of_range)(r));
            }
            // SQLite counts a row inserted or updated by the upsert, not one its WHERE left.
            let written = upsert.execute(&mut *tx).await?.rows_affected() as usize;
            if written != new + changed {
                return Err(StoreError::Corrupt(format!(
                    "{written} readings written where the probe expected {new} new and \
                     {changed} changed"
                )));
            }
        }
        let dirty: Vec<i64> = dirty.into_iter().collect();
        for chunk in dirty.chunks(MARKS_PER_STATEMENT) {
            let is_full = chunk.len() == MARKS_PER_STATEMENT;
            let text = (!is_full).then(|| mark_sql(chunk.len()));
            let mut mark = sqlx::query(text.as_deref().unwrap_or(&full.mark)).persistent(is_full);
            for start in chunk {
                mark = mark
                    .bind(batch.plant.id)
                    .bind(*start)
                    .bind(batch.received_at);
            }
            mark.execute(&mut *tx).await?;
        }
        tx.commit().await?;
        Ok(counts)
    }
}
