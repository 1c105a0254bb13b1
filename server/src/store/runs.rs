//! Runs of the engine on a period: every run is kept, one per period is current.

use chrono::{DateTime, Utc};
use sqlx::types::Json;
use sqlx::Row;

use super::claims::{Claim, Settled};
use super::{from_ms, now_ms, to_ms, PlantRow, Result, SqliteStore};

/// A run to record: what it ran on and what it answered.
#[derive(Debug, Clone, PartialEq)]
pub struct NewRun {
    pub period_start: DateTime<Utc>,
    /// The model revision it used.
    pub revision: i64,
    pub engine_version: String,
    /// The report's status ("solved", "no_data", ...).
    pub status: String,
    pub report: serde_json::Value,
    /// The period's meter values as the engine saw them, so a run can be explained and
    /// repeated after later readings replaced them.
    pub inputs: serde_json::Value,
    /// Each meter's figures in this run, for its health record (replacing the period's
    /// earlier rows).
    pub meters: Vec<(String, crate::health::MeterPeriod)>,
}

/// A current run without its report and inputs, for listings.
#[derive(Debug, Clone, PartialEq)]
pub struct RunSummary {
    pub id: i64,
    pub period_start: DateTime<Utc>,
    pub revision: i64,
    pub status: String,
    pub created_at: DateTime<Utc>,
    /// How many runs the period has had, this one included.
    pub runs: i64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct RunRow {
    pub id: i64,
    pub run: NewRun,
    pub created_at: DateTime<Utc>,
    pub current: bool,
}

const COLUMNS: &str = "id, period_start, revision, engine_version, status, report_json, \
                       inputs_json, created_at, current";

impl SqliteStore {
    /// Record `run` as its period's current run; with a claim, only while the claim is held,
    /// settling it in the same transaction.
    pub(super) async fn record_run(
        &self,
        plant: &PlantRow,
        run: &NewRun,
        claim: Option<&Claim>,
    ) -> Result<(i64, Option<Settled>)> {
        let start = to_ms(run.period_start);
        // Demoting the old current run and inserting the new one in one transaction keeps
        // exactly one current run per period (the partial unique index runs_current holds
        // the database to at most one).
        let mut tx = self.write().await?;
        sqlx::query(
            "UPDATE runs SET current = 0
             WHERE plant_id = ? AND period_start = ? AND current = 1",
        )
        .bind(plant.id)
        .bind(start)
        .execute(&mut *tx)
        .await?;
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO runs (plant_id, period_start, revision, engine_version, status,
                               report_json, inputs_json, created_at, current)
             VALUES (?, ?, ?, ?, ?, ?, ?, ?, 1) RETURNING id",
        )
        .bind(plant.id)
        .bind(start)
        .bind(run.revision)
        .bind(&run.engine_version)
        .bind(&run.status)
        .bind(Json(&run.report))
        .bind(Json(&run.inputs))
        .bind(now_ms())
        .fetch_one(&mut *tx)
        .await?;
        super::meters::write_meter_periods(&mut tx, plant, id, &run.meters).await?;
        // A claim lost meanwhile refuses the whole run: the transaction is dropped unapplied.
        let settled = match claim {
            Some(claim) => Some(super::claims::settle(&mut tx, plant, claim).await?),
            None => None,
        };
        tx.commit().await?;
        Ok((id, settled))
    }

    pub(super) async fn current_run(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Option<RunRow>> {
        let row = sqlx::query(&format!(
            "SELECT {COLUMNS} FROM runs
             WHERE plant_id = ? AND period_start = ? AND current = 1"
        ))
        .bind(plant.id)
        .bind(to_ms(period_start))
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| run_row(&r)).transpose()
    }

    /// The current run of every period starting in `[from, to)`, oldest first.
    pub(super) async fn current_runs(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<RunSummary>> {
        let rows = sqlx::query(
            "SELECT r.id, r.period_start, r.revision, r.status, r.created_at,
                    (SELECT COUNT(*) FROM runs h
                     WHERE h.plant_id = r.plant_id AND h.period_start = r.period_start) AS runs
             FROM runs r
             WHERE r.plant_id = ? AND r.current = 1 AND r.period_start >= ? AND r.period_start < ?
             ORDER BY r.period_start",
        )
        .bind(plant.id)
        .bind(to_ms(from))
        .bind(to_ms(to))
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                Ok(RunSummary {
                    id: r.try_get("id")?,
                    period_start: from_ms(r.try_get("period_start")?)?,
                    revision: r.try_get("revision")?,
                    status: r.try_get("status")?,
                    created_at: from_ms(r.try_get("created_at")?)?,
                    runs: r.try_get("runs")?,
                })
            })
            .collect()
    }

    /// Parts of the current report of every period starting in `[from, to)`, oldest first:
    /// each an object holding only the named top-level `fields` of the report (a field the
    /// report lacks is null). SQLite picks the fields out, so a year of hourly reports is
    /// answered without reading every meter of every one of them.
    pub(super) async fn current_reports(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        fields: &[&str],
    ) -> Result<Vec<(DateTime<Utc>, serde_json::Value)>> {
        // One `json_object(?, report_json -> ?)` pair per field; names and paths are bound.
        let pairs = vec!["?, json(report_json -> ?)"; fields.len()].join(", ");
        let sql = format!(
            "SELECT period_start, json_object({pairs}) AS part FROM runs
             WHERE plant_id = ? AND current = 1 AND period_start >= ? AND period_start < ?
             ORDER BY period_start"
        );
        let mut query = sqlx::query(&sql);
        for field in fields {
            query = query.bind(*field).bind(format!("$.\"{field}\""));
        }
        let rows = query
            .bind(plant.id)
            .bind(to_ms(from))
            .bind(to_ms(to))
            .fetch_all(&self.pool)
            .await?;
        rows.iter()
            .map(|r| {
                let Json(part): Json<serde_json::Value> = r.try_get("part")?;
                Ok((from_ms(r.try_get("period_start")?)?, part))
            })
            .collect()
    }

    pub(super) async fn run_history(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Vec<RunRow>> {
        let rows = sqlx::query(&format!(
            "SELECT {COLUMNS} FROM runs
             WHERE plant_id = ? AND period_start = ? ORDER BY id"
        ))
        .bind(plant.id)
        .bind(to_ms(period_start))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(run_row).collect()
    }
}

fn run_row(r: &sqlx::sqlite::SqliteRow) -> Result<RunRow> {
    let Json(report): Json<serde_json::Value> = r.try_get("report_json")?;
    let Json(inputs): Json<serde_json::Value> = r.try_get("inputs_json")?;
    Ok(RunRow {
        id: r.try_get("id")?,
        run: NewRun {
            period_start: from_ms(r.try_get("period_start")?)?,
            revision: r.try_get("revision")?,
            engine_version: r.try_get("engine_version")?,
            status: r.try_get("status")?,
            report,
            inputs,
            meters: Vec::new(),
        },
        created_at: from_ms(r.try_get("created_at")?)?,
        current: r.try_get("current")?,
    })
}
