//! Each meter's running health state (`meter_health`, migrations/0007): folded forward in the
//! transaction that records a run ([`advance`]), brought up to date by a reader when a re-run
//! made it stale or its record's start moved ([`Store::health_states`]). The state is derived:
//! whatever is in the table, the answer is that of the record in `meter_periods`.

use std::collections::{BTreeMap, BTreeSet};

use chrono::{DateTime, TimeDelta, Utc};

use super::rows::{self, PlantRow};
use super::values::{Millis, StoreRow};
use super::{pg, sqlite, Result, Store, Tx};
use crate::health::{MeterPeriod, Running};

/// A state as written: the tag, its record's start and last period, whether stale, the state.
pub(super) type StateWrite = (String, Millis, Option<Millis>, bool, Vec<u8>);

/// The states of plant $1.
const STATES: &str = "SELECT tag, state FROM meter_health WHERE plant_id = $1";

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

/// What is kept of a meter: its state; up to [`CHECKPOINTS`] earlier states, oldest first, each
/// as it was at the end of a UTC day (so a re-run of a recent period starts from one of them
/// rather than from the record's start); and, when a run landed at or before the state's last
/// period (a re-run or late data), the earliest such period: the state is stale from there.
#[derive(Debug, Clone)]
struct Kept {
    state: Running,
    checkpoints: Vec<Running>,
    stale_from: Option<DateTime<Utc>>,
}

/// Checkpoints kept: the ends of the last two days.
const CHECKPOINTS: usize = 2;

/// The version of the byte layout of [`Kept::encode`].
const KEPT_FORMAT: u8 = 2;

impl Kept {
    fn new(since: DateTime<Utc>) -> Kept {
        Kept {
            state: Running::fresh(since),
            checkpoints: Vec::new(),
            stale_from: None,
        }
    }

    /// Fold `p`, later than the state's last period; the state at the end of the day before
    /// `p`'s becomes a checkpoint.
    fn fold(&mut self, p: &MeterPeriod) {
        let day = p.period_start.date_naive();
        if self.state.last.is_some_and(|last| last.date_naive() != day) {
            self.checkpoints.push(self.state.clone());
            if self.checkpoints.len() > CHECKPOINTS {
                self.checkpoints.remove(0);
            }
        }
        self.state.fold(p);
    }

    fn encode(&self) -> Vec<u8> {
        let mut out = vec![KEPT_FORMAT];
        match self.stale_from {
            Some(t) => {
                out.push(1);
                out.extend(t.timestamp_millis().to_le_bytes());
            }
            None => out.push(0),
        }
        out.push(self.checkpoints.len() as u8);
        for r in std::iter::once(&self.state).chain(&self.checkpoints) {
            let bytes = r.encode();
            out.extend((bytes.len() as u32).to_le_bytes());
            out.extend(bytes);
        }
        out
    }

    /// What [`Kept::encode`] wrote; none when the bytes are not that (the state is then
    /// rebuilt from the record).
    fn decode(bytes: &[u8]) -> Option<Kept> {
        let (&format, rest) = bytes.split_first()?;
        if format != KEPT_FORMAT {
            return None;
        }
        let (stale_from, rest) = match rest.split_first()? {
            (0, rest) => (None, rest),
            (1, rest) => {
                let (ms, rest) = rest.split_first_chunk::<8>()?;
                let t = Millis(i64::from_le_bytes(*ms)).to_utc().ok()?;
                (Some(t), rest)
            }
            _ => return None,
        };
        let (&n, mut rest) = rest.split_first()?;
        let mut states = Vec::with_capacity(1 + usize::from(n));
        for _ in 0..=n {
            let (len, tail) = rest.split_first_chunk::<4>()?;
            let len = u32::from_le_bytes(*len) as usize;
            let body = tail.get(..len)?;
            states.push(Running::decode(body)?);
            rest = &tail[len..];
        }
        if !rest.is_empty() {
            return None;
        }
        let state = states.remove(0);
        Some(Kept {
            state,
            checkpoints: states,
            stale_from,
        })
    }
}

/// A stored state: none when its bytes are not one.
struct Stored {
    tag: String,
    kept: Option<Kept>,
}

fn stored_row<R: StoreRow>(r: &R) -> Result<Stored> {
    let bytes: Vec<u8> = r.read("state")?;
    Ok(Stored {
        tag: r.read("tag")?,
        kept: Kept::decode(&bytes),
    })
}

fn write(tag: &str, kept: &Kept) -> StateWrite {
    (
        tag.to_string(),
        Millis::from(kept.state.since),
        kept.state.last.map(Millis::from),
        kept.stale_from.is_some(),
        kept.encode(),
    )
}

/// The hook in the transaction that records runs (`runs::write_runs`, after the runs' meter
/// rows are written): each of the runs' meter rows, in their periods' order, is folded into its meter's state when it is
/// later than the state's last period (O(1) a meter), and the state is marked stale from the
/// row's period when it is at or before it (a re-run or late data: a reader brings it up to
/// date from the last checkpoint before that period). A row before the state's record start
/// (a stray old period) changes nothing; a meter without a state is left for a reader to
/// build.
pub(super) async fn advance(
    tx: &mut Tx,
    plant: &PlantRow,
    rows: &[&(String, MeterPeriod)],
) -> Result<()> {
    if rows.is_empty() {
        return Ok(());
    }
    let states = stored_in(tx, plant).await?;
    let mut kept_by_tag: BTreeMap<&str, Kept> = states
        .iter()
        .filter_map(|s| s.kept.clone().map(|k| (s.tag.as_str(), k)))
        .collect();
    let mut changed = BTreeSet::new();
    for (tag, p) in rows.iter().map(|r| (&r.0, &r.1)) {
        let Some(kept) = kept_by_tag.get_mut(tag.as_str()) else {
            continue;
        };
        let t = p.period_start;
        if t < kept.state.since {
            continue;
        }
        match kept.stale_from {
            Some(from) if from <= t => continue,
            Some(_) => kept.stale_from = Some(t),
            None if kept.state.last.is_none_or(|last| t > last) => kept.fold(p),
            None => kept.stale_from = Some(t),
        }
        changed.insert(tag.as_str());
    }
    let writes: Vec<StateWrite> = changed
        .iter()
        .map(|tag| write(tag, &kept_by_tag[tag]))
        .collect();
    put(tx, plant, &writes).await
}

/// The plant's stored states, read inside `tx`.
async fn stored_in(tx: &mut Tx, plant: &PlantRow) -> Result<Vec<Stored>> {
    in_tx!(tx, t => sqlx::query(STATES)
        .bind(plant.id)
        .fetch_all(&mut **t)
        .await?
        .iter()
        .map(stored_row)
        .collect())
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

/// `base` (a state or a checkpoint, its periods as stored) over the record from `since`
/// instead: as it is when it starts there; with its periods before `since` dropped when
/// `since` is later by at most a quarter of `window` and no CUSUM excursion began before it;
/// else none (read the record again).
async fn moved(
    tx: &mut Tx,
    plant: &PlantRow,
    tag: &str,
    mut base: Running,
    since: DateTime<Utc>,
    window: TimeDelta,
) -> Result<Option<Running>> {
    if base.since == since {
        return Ok(Some(base));
    }
    if base.since > since || since.signed_duration_since(base.since) > window / 4 {
        return Ok(None);
    }
    // Only the periods `base` folded: none after its last.
    let to = base
        .last
        .map_or(since, |last| since.min(last + TimeDelta::milliseconds(1)));
    let dropped = record(tx, plant, tag, base.since, to).await?;
    let first = first_from(tx, plant, tag, since).await?;
    Ok(base.drop_front(since, &dropped, first).then_some(base))
}

/// The meter's state over its record from `since`, from what was kept: the kept state when it
/// is not stale, else the latest checkpoint before the stale period, moved to `since` and
/// brought forward over the periods after it; or, when neither serves, the whole record from
/// `since` (which the window bounds).
async fn brought_up(
    tx: &mut Tx,
    plant: &PlantRow,
    tag: &str,
    since: DateTime<Utc>,
    window: TimeDelta,
    kept: Option<Kept>,
) -> Result<Kept> {
    let base = kept.and_then(|kept| match kept.stale_from {
        None => Some((kept.state, kept.checkpoints)),
        Some(from) => {
            let i = kept
                .checkpoints
                .iter()
                .rposition(|c| c.last.is_none_or(|last| last < from))?;
            let mut checkpoints = kept.checkpoints;
            let base = checkpoints.remove(i);
            checkpoints.truncate(i);
            Some((base, checkpoints))
        }
    });
    if let Some((base, checkpoints)) = base {
        if let Some(state) = moved(tx, plant, tag, base, since, window).await? {
            let after = state
                .last
                .map_or(since, |last| since.max(last + TimeDelta::milliseconds(1)));
            let rows = record(tx, plant, tag, after, DateTime::<Utc>::MAX_UTC).await?;
            let mut kept = Kept {
                state,
                checkpoints,
                stale_from: None,
            };
            for p in &rows {
                kept.fold(p);
            }
            return Ok(kept);
        }
    }
    let rows = record(tx, plant, tag, since, DateTime::<Utc>::MAX_UTC).await?;
    let mut kept = Kept::new(since);
    for p in &rows {
        kept.fold(p);
    }
    Ok(kept)
}

impl Store {
    /// The running health state of each of `wanted` (a tag and where its record starts: its
    /// last reset or the health window's start), in that order, each over the meter's record
    /// from that start to its last period. States that are current are read as they are; the
    /// others are brought up to date in one write transaction (taking turns with the runs
    /// being recorded): a state whose start moved forward by less than a quarter of `window`
    /// drops the periods before the new start, unless a CUSUM excursion began before it; a
    /// stale one goes on from its latest checkpoint before the stale period; any other
    /// (absent, stale before its checkpoints, or moved further) is rebuilt from the record,
    /// which the window bounds.
    pub async fn health_states(
        &self,
        plant: &PlantRow,
        wanted: &[(String, DateTime<Utc>)],
        window: TimeDelta,
    ) -> Result<Vec<Running>> {
        let current = |stored: &[Stored]| -> Vec<Option<Running>> {
            wanted
                .iter()
                .map(|(tag, since)| {
                    stored
                        .iter()
                        .find(|s| &s.tag == tag)
                        .and_then(|s| s.kept.as_ref())
                        .filter(|k| k.stale_from.is_none() && k.state.since == *since)
                        .map(|k| k.state.clone())
                })
                .collect()
        };
        let stored: Vec<Stored> = on_backend!(self, s => sqlx::query(STATES)
            .bind(plant.id)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(stored_row)
            .collect::<Result<_>>()?);
        let found = current(&stored);
        if found.iter().all(Option::is_some) {
            return Ok(found.into_iter().flatten().collect());
        }
        let mut tx = self.write_for(plant).await?;
        // Read again inside the transaction: a run may have landed meanwhile.
        let stored = stored_in(&mut tx, plant).await?;
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
                .and_then(|s| s.kept.clone());
            let kept = brought_up(&mut tx, plant, tag, *since, window, kept).await?;
            writes.push(write(tag, &kept));
            states.push(kept.state);
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
