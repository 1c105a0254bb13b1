//! Runs of the engine on a period: every run is kept, one per period is current.

use std::collections::HashMap;

use chrono::{DateTime, Utc};

use super::rows::{self, Claim, NewRun, PlantRow, PreparedRun, RunRow, RunSummary, Settled};
use super::values::{param_list, Millis};
use super::{claims, failures, figures, meter_health, pg, sqlite, Result, Store, Tx};
use crate::health::MeterPeriod;

/// The columns `rows::run` reads.
const COLUMNS: &str = "id, period_start, revision, engine_version, status, report_json, \
                       inputs_json, created_at, current";

impl Store {
    /// How this backend's SQL says a run (`runs` as `r`) is its period's current one. The
    /// column is 0/1 in SQLite, whose planner uses the partial index runs_current only for its
    /// own term `current = 1`, and a boolean in PostgreSQL, which would refuse `= 1`.
    pub(super) fn is_current(&self) -> &'static str {
        match self {
            Store::Sqlite(_) => "r.current = 1",
            Store::Postgres(_) => "r.current",
        }
    }

    /// Record a run made without a claim (an administrator's re-run) as its period's current
    /// run; the earlier ones stay as history. Returns the run's id.
    pub async fn record_run(&self, plant: &PlantRow, run: &NewRun) -> Result<i64> {
        self.record(plant, &run.prepare()?, None)
            .await
            .map(|(id, _)| id)
    }

    /// Record the run of a claimed period as its current run and settle the claim, in one
    /// transaction; [`super::StoreError::ClaimLost`] (and nothing recorded) if the claim
    /// lapsed and another instance took the period.
    pub async fn record_claimed_run(
        &self,
        plant: &PlantRow,
        run: &NewRun,
        claim: &Claim,
    ) -> Result<(i64, Settled)> {
        let (id, settled) = self.record(plant, &run.prepare()?, Some(claim)).await?;
        Ok((id, settled.unwrap_or(Settled::Cleared)))
    }

    /// Record the runs of a batch of claimed periods, each as its period's current run with
    /// its claim settled, in one transaction: a handful of statements for the batch (one
    /// insert of the runs, one of their meters' records, one of their figures), not a handful
    /// per period. A run whose claim lapsed and was taken by another instance is not recorded
    /// (its entry is [`super::StoreError::ClaimLost`]); the others are. A store error records
    /// none.
    pub async fn record_claimed_runs(
        &self,
        plant: &PlantRow,
        runs: &[(&PreparedRun, &Claim)],
    ) -> Result<Vec<Result<(i64, Settled)>>> {
        let mut tx = self.write_for(plant).await?;
        let mut held = Vec::with_capacity(runs.len());
        let mut settled = Vec::with_capacity(runs.len());
        for (run, claim) in runs {
            match claims::settle(&mut tx, plant, claim).await {
                Ok(s) => {
                    held.push(*run);
                    settled.push(Ok(s));
                }
                Err(lost @ super::StoreError::ClaimLost(_)) => settled.push(Err(lost)),
                Err(e) => return Err(e),
            }
        }
        let mut ids = self.write_runs(&mut tx, plant, &held).await?.into_iter();
        tx.commit().await?;
        Ok(settled
            .into_iter()
            .map(|s| s.map(|s| (ids.next().expect("an id per recorded run"), s)))
            .collect())
    }

    /// Record `run` as its period's current run, and forget the period's failures
    /// (`failures`); with a claim, only while the claim is held, settling it in the same
    /// transaction ([`super::StoreError::ClaimLost`] and nothing recorded if it is not).
    pub async fn record(
        &self,
        plant: &PlantRow,
        run: &PreparedRun,
        claim: Option<&Claim>,
    ) -> Result<(i64, Option<Settled>)> {
        let mut tx = self.write_for(plant).await?;
        // A claim lost meanwhile refuses the whole run: the transaction is dropped unapplied.
        let settled = match claim {
            Some(claim) => Some(claims::settle(&mut tx, plant, claim).await?),
            None => None,
        };
        let id = self.write_runs(&mut tx, plant, &[run]).await?[0];
        tx.commit().await?;
        Ok((id, settled))
    }

    /// Write `runs` (of distinct periods) in `tx` as their periods' current runs: the runs,
    /// their meters' records, their figures, and their periods' failures forgotten. Returns
    /// the runs' ids in their order.
    async fn write_runs(
        &self,
        tx: &mut Tx,
        plant: &PlantRow,
        runs: &[&PreparedRun],
    ) -> Result<Vec<i64>> {
        // Rows of one insert of runs: 8 parameters each besides the plant.
        const RUNS_PER_INSERT: usize = 100;
        if runs.is_empty() {
            return Ok(Vec::new());
        }
        let starts: Vec<Millis> = runs.iter().map(|r| Millis::from(r.period_start)).collect();
        // Demoting the old current runs and inserting the new ones in one transaction keeps
        // exactly one current run per period (the partial unique index runs_current holds the
        // database to at most one). Concurrent records of one plant take turns, so a second
        // record of the same period waits and then demotes this one, rather than meet the
        // unique index when neither found a current run to demote.
        for chunk in starts.chunks(RUNS_PER_INSERT) {
            let demote = format!(
                "UPDATE runs AS r SET current = FALSE
                 WHERE r.plant_id = $1 AND r.period_start IN ({}) AND {}",
                param_list(2, chunk.len()),
                self.is_current()
            );
            in_tx!(tx, t => {
                let mut query = sqlx::query(&demote).bind(plant.id);
                for start in chunk {
                    query = query.bind(*start);
                }
                query.execute(&mut **t).await.map(drop)?
            });
        }
        let now = Millis::now();
        let mut ids: HashMap<Millis, i64> = HashMap::with_capacity(runs.len());
        for chunk in runs.chunks(RUNS_PER_INSERT) {
            let rows = (0..chunk.len())
                .map(|i| format!("($1, {}, TRUE)", param_list(2 + 8 * i, 8)))
                .collect::<Vec<_>>()
                .join(", ");
            let insert = format!(
                "INSERT INTO runs (plant_id, period_start, revision, engine_version, status,
                                   report_json, inputs_json, created_at, global_test_passed,
                                   current)
                 VALUES {rows} RETURNING id, period_start"
            );
            // The order of RETURNING's rows is not promised: each id is matched to its period.
            let returned: Vec<(i64, Millis)> = in_tx!(tx, t => {
                let mut query = sqlx::query_as(&insert).bind(plant.id);
                for run in chunk {
                    query = query
                        .bind(Millis::from(run.period_start))
                        .bind(run.revision)
                        .bind(&run.engine_version)
                        .bind(run.status.as_str())
                        .bind(&run.report)
                        .bind(&run.inputs)
                        .bind(now)
                        .bind(run.global_test_passed);
                }
                query.fetch_all(&mut **t).await?
            });
            ids.extend(returned.into_iter().map(|(id, start)| (start, id)));
        }
        let ids: Vec<i64> = starts
            .iter()
            .map(|start| {
                ids.get(start).copied().ok_or_else(|| {
                    super::StoreError::Corrupt("a recorded run's id did not come back".into())
                })
            })
            .collect::<Result<_>>()?;
        let meters: Vec<(i64, &[(String, MeterPeriod)])> = runs
            .iter()
            .zip(&ids)
            .map(|(run, id)| (*id, run.meters.as_slice()))
            .collect();
        match tx {
            Tx::Sqlite(t) => sqlite::write_meter_periods(t, plant, &meters).await?,
            Tx::Postgres(t) => pg::write_meter_periods(t, plant, &meters).await?,
        }
        // Each meter's running health state follows its rows (O(1) a meter for a new period),
        // the runs' rows in their periods' order.
        let mut rows: Vec<&(String, MeterPeriod)> = runs.iter().flat_map(|r| &r.meters).collect();
        rows.sort_by_key(|(_, p)| p.period_start);
        meter_health::advance(tx, plant, &rows).await?;
        let figures: Vec<(Millis, i64, &[reconcile::report::Figure])> = runs
            .iter()
            .zip(starts.iter().zip(&ids))
            .map(|(run, (start, id))| (*start, *id, run.figures.as_slice()))
            .collect();
        figures::write(tx, plant, &figures).await?;
        // The engine finished the periods: earlier abandoned runs of them no longer count.
        failures::clear(tx, plant, &starts).await?;
        Ok(ids)
    }

    pub async fn current_run(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Option<RunRow>> {
        let sql = format!(
            "SELECT {COLUMNS} FROM runs AS r
             WHERE r.plant_id = $1 AND r.period_start = $2 AND {}",
            self.is_current()
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(Millis::from(period_start))
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::run)
            .transpose())
    }

    /// How many runs the plant has had and its largest run id. Runs are never deleted, so any
    /// new run of the plant, by any instance, changes the pair (the count as well when ids
    /// commit out of order), and so does nothing else: the per-meter records change only with
    /// a run.
    pub async fn run_tally(&self, plant: &PlantRow) -> Result<(i64, i64)> {
        const SQL: &str = "SELECT COUNT(*), COALESCE(MAX(id), 0) FROM runs WHERE plant_id = $1";
        Ok(on_backend!(self, s => sqlx::query_as::<_, (i64, i64)>(SQL)
            .bind(plant.id)
            .fetch_one(&s.pool)
            .await?))
    }

    /// The current run of the latest period whose run gave usable values (`solved` or
    /// `unobservable`), if any.
    pub async fn latest_usable_run(&self, plant: &PlantRow) -> Result<Option<RunRow>> {
        let sql = format!(
            "SELECT {COLUMNS} FROM runs AS r
             WHERE r.plant_id = $1 AND {} AND r.status IN ('solved', 'unobservable')
             ORDER BY r.period_start DESC LIMIT 1",
            self.is_current()
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::run)
            .transpose())
    }

    /// The current run of every period starting in `[from, to)`, oldest first.
    pub async fn current_runs(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<RunSummary>> {
        let sql = format!(
            "SELECT r.id, r.period_start, r.revision, r.status, r.created_at,
                    (SELECT COUNT(*) FROM runs h
                     WHERE h.plant_id = r.plant_id AND h.period_start = r.period_start) AS runs
             FROM runs r
             WHERE r.plant_id = $1 AND {} AND r.period_start >= $2 AND r.period_start < $3
             ORDER BY r.period_start",
            self.is_current()
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::run_summary)
            .collect())
    }

    /// The named top-level fields of the current report of every period starting in
    /// `[from, to)`, oldest first, each as an object of those fields (a field the report lacks
    /// is null). Each database picks the fields out with its own JSON functions.
    pub async fn current_reports(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        fields: &[&str],
    ) -> Result<Vec<(DateTime<Utc>, serde_json::Value)>> {
        on_backend!(self, s => s.current_reports(plant, from, to, fields).await)
    }

    /// Every run of a period, oldest first.
    pub async fn run_history(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Vec<RunRow>> {
        let sql = format!(
            "SELECT {COLUMNS} FROM runs
             WHERE plant_id = $1 AND period_start = $2 ORDER BY id"
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(Millis::from(period_start))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::run)
            .collect())
    }
}
