//! Runs of the engine on a period: every run is kept, one per period is current.

use chrono::{DateTime, Utc};

use super::rows::{self, Claim, NewRun, PlantRow, RunRow, RunSummary, Settled};
use super::values::{JsonText, Millis};
use super::{claims, failures, figures, meter_health, pg, sqlite, Result, Store, Tx};

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
        self.record(plant, run, None).await.map(|(id, _)| id)
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
        let (id, settled) = self.record(plant, run, Some(claim)).await?;
        Ok((id, settled.unwrap_or(Settled::Cleared)))
    }

    /// Record `run` as its period's current run, and forget the period's failures
    /// (`failures`); with a claim, only while the claim is held, settling it in the same
    /// transaction.
    async fn record(
        &self,
        plant: &PlantRow,
        run: &NewRun,
        claim: Option<&Claim>,
    ) -> Result<(i64, Option<Settled>)> {
        let demote = format!(
            "UPDATE runs AS r SET current = FALSE
             WHERE r.plant_id = $1 AND r.period_start = $2 AND {}",
            self.is_current()
        );
        const INSERT: &str = "
            INSERT INTO runs (plant_id, period_start, revision, engine_version, status,
                              report_json, inputs_json, created_at, current,
                              global_test_passed)
            VALUES ($1, $2, $3, $4, $5, $6, $7, $8, TRUE, $9) RETURNING id";
        let start = Millis::from(run.period_start);
        let (report, inputs) = (JsonText::of(&run.report)?, JsonText::of(&run.inputs)?);
        let (figures, global_test_passed) = run.figures_and_test()?;
        // Demoting the old current run and inserting the new one in one transaction keeps
        // exactly one current run per period (the partial unique index runs_current holds the
        // database to at most one). Concurrent records of one plant take turns, so a second
        // record of the same period waits and then demotes this one, rather than meet the
        // unique index when neither found a current run to demote.
        let mut tx = self.write_for(plant).await?;
        let id: i64 = in_tx!(&mut tx, t => {
            sqlx::query(&demote)
                .bind(plant.id)
                .bind(start)
                .execute(&mut **t)
                .await?;
            sqlx::query_scalar(INSERT)
                .bind(plant.id)
                .bind(start)
                .bind(run.revision)
                .bind(&run.engine_version)
                .bind(run.status.as_str())
                .bind(&report)
                .bind(&inputs)
                .bind(Millis::now())
                .bind(global_test_passed)
                .fetch_one(&mut **t)
                .await?
        });
        match &mut tx {
            Tx::Sqlite(t) => sqlite::write_meter_periods(t, plant, id, &run.meters).await?,
            Tx::Postgres(t) => pg::write_meter_periods(t, plant, id, &run.meters).await?,
        }
        // Each meter's running health state follows its rows (O(1) a meter for a new period).
        meter_health::advance(&mut tx, plant, &run.meters).await?;
        figures::write(&mut tx, plant, run.period_start, id, &figures).await?;
        // The engine finished the period: an earlier abandoned run of it no longer counts.
        failures::clear(&mut tx, plant, run.period_start).await?;
        // A claim lost meanwhile refuses the whole run: the transaction is dropped unapplied.
        let settled = match claim {
            Some(claim) => Some(claims::settle(&mut tx, plant, claim).await?),
            None => None,
        };
        tx.commit().await?;
        Ok((id, settled))
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
