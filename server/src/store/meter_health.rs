//! Each meter's running health state (`meter_health`, migrations/0007): folded forward in the
//! transaction that records a run ([`advance`]), brought up to date by a reader when a re-run
//! made it stale or its record's start moved ([`Store::health_states`]). The state is derived:
//! whatever is in the table, the answer is that of the record in `meter_periods`.

use chrono::{DateTime, TimeDelta, Utc};

use super::rows::{self, PlantRow};
use super::values::{Millis, StoreRow};
use super::{pg, sqlite, Result, Store, Tx};
use crate::health::{MeterPeriod, Running};

/// A state as written: the tag, its record's start and last period, whether stale, the state.
pub(super) type StateWrite = (String, Millis, Option<Millis>, bool, Vec<u8>);

/// The states of plant $1.
const STATES: &str = "SELECT tag, stale, state FROM meter_health WHERE plant_id = $1";

/// The record of tag $2 of plant $1 in `[$3, $4)`, without the correlations (the health state
/// does not read them), oldest first.
const RECORD: &str = "
    SELECT period_start, measured, reconciled, sigma, adjustment, adjustment_sigma,
           normalized_adjustment, redundant, flagged, readings, bad_readings,
           out_of_range_readings
    FROM meter_periods
    WHERE plant_id = $1 AND tag = $2 AND period_start >= $3 AND period_start < $4
    ORDER BY period_start";

/// The first period of tag $2 of plant $1 at or after $3.
const FIRST: &str = "
    SELECT MIN(period_start) FROM meter_periods
    WHERE plant_id = $1 AND tag = $2 AND period_start >= $3";

/// A stored state: none when it is stale or its bytes are not a state.
struct Stored {
    tag: String,
    running: Option<Running>,
}

fn stored_row<R: StoreRow>(r: &R) -> Result<Stored> {
    let stale: bool = r.read("stale")?;
    let bytes: Vec<u8> = r.read("state")?;
    Ok(Stored {
        tag: r.read("tag")?,
        running: if stale { None } else { Running::decode(&bytes) },
    })
}

fn write(tag: &str, running: &Running, stale: bool) -> StateWrite {
    (
        tag.to_string(),
        Millis::from(running.since),
        running.last.map(Millis::from),
        stale,
        running.encode(),
    )
}

/// The hook in the transaction that records a run (`runs::record`, after the run's meter rows
/// are written): each of the run's meter rows is folded into its meter's state when it is
/// later than the state's last period (O(1) a meter), and the state is marked stale when it is
/// at or before it (a re-run or late data: a reader rebuilds it). A row before the state's
/// record start (a stray old period) changes nothing; a meter without a state (or a stale one)
/// is left for a reader to build.
pub(super) async fn advance(
    tx: &mut Tx,
    plant: &PlantRow,
    rows: &[(String, MeterPeriod)],
) -> Result<()> {
    if rows.is_empty() {
        return Ok(());
    }
    let states: Vec<Stored> = in_tx!(&mut *tx, t => sqlx::query(STATES)
        .bind(plant.id)
        .fetch_all(&mut **t)
        .await?
        .iter()
        .map(stored_row)
        .collect::<Result<_>>()?);
    let mut writes = Vec::new();
    for (tag, p) in rows {
        let Some(mut running) = states
            .iter()
            .find(|s| &s.tag == tag)
            .and_then(|s| s.running.clone())
        else {
            continue;
        };
        if p.period_start < running.since {
            continue;
        }
        if running.last.is_none_or(|last| p.period_start > last) {
            running.fold(p);
            writes.push(write(tag, &running, false));
        } else {
            writes.push(write(tag, &running, true));
        }
    }
    put(tx, plant, &writes).await
}

/// Write `states` (one statement a row in SQLite, one in all in PostgreSQL).
async fn put(tx: &mut Tx, plant: &PlantRow, states: &[StateWrite]) -> Result<()> {
    if states.is_empty() {
        return Ok(());
    }
    match tx {
        Tx::Sqlite(t) => sqlite::write_health_states(t, plant, states).await,
        Tx::Postgres(t) => pg::write_health_states(t, plant, states).await,
    }
}

impl Store {
    /// The running health state of each of `wanted` (a tag and where its record starts: its
    /// last reset or the health window's start), in that order, each over the meter's record
    /// from that start to its last period. States that are current are read as they are; the
    /// others are brought up to date in one write transaction (taking turns with the runs
    /// being recorded): a state whose start moved forward by less than a quarter of `window`
    /// drops the periods before the new start, unless a CUSUM excursion began before it; any
    /// other (stale, absent, or moved further) is rebuilt from the record, which the window
    /// bounds.
    pub async fn health_states(
        &self,
        plant: &PlantRow,
        wanted: &[(String, DateTime<Utc>)],
        window: TimeDelta,
    ) -> Result<Vec<Running>> {
        let stored: Vec<Stored> = on_backend!(self, s => sqlx::query(STATES)
            .bind(plant.id)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(stored_row)
            .collect::<Result<_>>()?);
        let current = |stored: &[Stored]| -> Vec<Option<Running>> {
            wanted
                .iter()
                .map(|(tag, since)| {
                    stored
                        .iter()
                        .find(|s| &s.tag == tag)
                        .and_then(|s| s.running.clone())
                        .filter(|r| r.since == *since)
                })
                .collect()
        };
        let found = current(&stored);
        if found.iter().all(Option::is_some) {
            return Ok(found.into_iter().flatten().collect());
        }
        let mut tx = self.write_for(plant).await?;
        // Read again inside the transaction: a run may have landed meanwhile.
        let stored: Vec<Stored> = in_tx!(&mut tx, t => sqlx::query(STATES)
            .bind(plant.id)
            .fetch_all(&mut **t)
            .await?
            .iter()
            .map(stored_row)
            .collect::<Result<_>>()?);
        let found = current(&stored);
        let mut states = Vec::with_capacity(wanted.len());
        let mut writes = Vec::new();
        for ((tag, since), found) in wanted.iter().zip(found) {
            if let Some(running) = found {
                states.push(running);
                continue;
            }
            let kept = stored
                .iter()
                .find(|s| &s.tag == tag)
                .and_then(|s| s.running.clone())
                .filter(|r| r.since < *since && since.signed_duration_since(r.since) <= window / 4);
            let moved = match kept {
                Some(mut running) => {
                    let dropped = record(&mut tx, plant, tag, running.since, *since).await?;
                    let first = first_from(&mut tx, plant, tag, *since).await?;
                    running
                        .drop_front(*since, &dropped, first)
                        .then_some(running)
                }
                None => None,
            };
            let running = match moved {
                Some(running) => running,
                None => {
                    let rows =
                        record(&mut tx, plant, tag, *since, DateTime::<Utc>::MAX_UTC).await?;
                    Running::of(*since, &rows)
                }
            };
            writes.push(write(tag, &running, false));
            states.push(running);
        }
        put(&mut tx, plant, &writes).await?;
        tx.commit().await?;
        Ok(states)
    }

    /// The plant's latest period with a run (the health window is counted back from it).
    pub async fn latest_period(&self, plant: &PlantRow) -> Result<Option<DateTime<Utc>>> {
        const SQL: &str = "SELECT MAX(period_start) FROM runs WHERE plant_id = $1";
        let latest: Option<i64> = on_backend!(self, s => sqlx::query_scalar(SQL)
            .bind(plant.id)
            .fetch_one(&s.pool)
            .await?);
        latest.map(|ms| Millis(ms).to_utc()).transpose()
    }
}

/// The record of `tag` in `[from, to)`, without correlations, oldest first.
async fn record(
    tx: &mut Tx,
    plant: &PlantRow,
    tag: &str,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Result<Vec<MeterPeriod>> {
    in_tx!(tx, t => sqlx::query(RECORD)
        .bind(plant.id)
        .bind(tag)
        .bind(Millis::from(from))
        .bind(Millis::from(to))
        .fetch_all(&mut **t)
        .await?
        .iter()
        .map(rows::meter_period_narrow)
        .collect())
}

/// The first period of `tag` at or after `from`.
async fn first_from(
    tx: &mut Tx,
    plant: &PlantRow,
    tag: &str,
    from: DateTime<Utc>,
) -> Result<Option<DateTime<Utc>>> {
    let first: Option<i64> = in_tx!(tx, t => sqlx::query_scalar(FIRST)
        .bind(plant.id)
        .bind(tag)
        .bind(Millis::from(from))
        .fetch_one(&mut **t)
        .await?);
    first.map(|ms| Millis(ms).to_utc()).transpose()
}
