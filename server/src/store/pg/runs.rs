//! Runs of the engine on a period, in PostgreSQL: every run is kept, one per period is
//! current.

use chrono::{DateTime, Utc};
use sqlx::postgres::PgRow;
use sqlx::types::Json;
use sqlx::Row;

use super::super::{
    from_ms, now_ms, to_ms, NewRun, PlantRow, Result, RunRow, RunSummary, StoreError,
};
use super::PgStore;
use crate::store::claims::{Claim, Settled};

const COLUMNS: &str = "id, period_start, revision, engine_version, status, report_json, \
                       inputs_json, created_at, current";

/// JSON as text for a `json` column (`$n::json`): bound as text, PostgreSQL keeps it exactly
/// as serde_json wrote it, as SQLite does.
pub(super) fn json_text<T: serde::Serialize>(value: &T) -> Result<String> {
    serde_json::to_string(value)
        .map_err(|e| StoreError::Corrupt(format!("a value does not serialise as JSON: {e}")))
}

impl PgStore {
    pub(in crate::store) async fn record_run(
        &self,
        plant: &PlantRow,
        run: &NewRun,
        claim: Option<&Claim>,
    ) -> Result<(i64, Option<Settled>)> {
        let start = to_ms(run.period_start);
        // Demoting the old current run and inserting the new one in one transaction keeps
        // exactly one current run per period (the partial unique index runs_current holds
        // the database to at most one). The plant's lock makes a concurrent record of the
        // same period wait and then demote this one, as in SQLite, rather than meet the
        // unique index when neither found a current run to demote.
        let mut tx = self.pool.begin().await?;
        super::lock_plant(&mut tx, plant).await?;
        sqlx::query(
            "UPDATE runs SET current = FALSE
             WHERE plant_id = $1 AND period_start = $2 AND current",
        )
        .bind(plant.id)
        .bind(start)
        .execute(&mut *tx)
        .await?;
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO runs (plant_id, period_start, revision, engine_version, status,
                               report_json, inputs_json, created_at, current)
             VALUES ($1, $2, $3, $4, $5, $6::json, $7::json, $8, TRUE) RETURNING id",
        )
        .bind(plant.id)
        .bind(start)
        .bind(run.revision)
        .bind(&run.engine_version)
        .bind(&run.status)
        .bind(json_text(&run.report)?)
        .bind(json_text(&run.inputs)?)
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

    pub(in crate::store) async fn current_run(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Option<RunRow>> {
        let row = sqlx::query(&format!(
            "SELECT {COLUMNS} FROM runs
             WHERE plant_id = $1 AND period_start = $2 AND current"
        ))
        .bind(plant.id)
        .bind(to_ms(period_start))
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| run_row(&r)).transpose()
    }

    pub(in crate::store) async fn current_runs(
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
             WHERE r.plant_id = $1 AND r.current AND r.period_start >= $2 AND r.period_start < $3
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
    /// report lacks is null). PostgreSQL picks the fields out (`->` with the names bound as
    /// one array), so the reports' other parts never leave the server.
    pub(in crate::store) async fn current_reports(
        &self,
        plant: &PlantRow,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
        fields: &[&str],
    ) -> Result<Vec<(DateTime<Utc>, serde_json::Value)>> {
        let rows = sqlx::query(
            "SELECT period_start,
                    COALESCE(
                        (SELECT json_object_agg(f.name, report_json -> f.name ORDER BY f.n)
                         FROM UNNEST($4::text[]) WITH ORDINALITY AS f (name, n)),
                        '{}'::json) AS part
             FROM runs
             WHERE plant_id = $1 AND current AND period_start >= $2 AND period_start < $3
             ORDER BY period_start",
        )
        .bind(plant.id)
        .bind(to_ms(from))
        .bind(to_ms(to))
        .bind(fields)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let Json(part): Json<serde_json::Value> = r.try_get("part")?;
                Ok((from_ms(r.try_get("period_start")?)?, part))
            })
            .collect()
    }

    pub(in crate::store) async fn run_history(
        &self,
        plant: &PlantRow,
        period_start: DateTime<Utc>,
    ) -> Result<Vec<RunRow>> {
        let rows = sqlx::query(&format!(
            "SELECT {COLUMNS} FROM runs
             WHERE plant_id = $1 AND period_start = $2 ORDER BY id"
        ))
        .bind(plant.id)
        .bind(to_ms(period_start))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(run_row).collect()
    }
}

fn run_row(r: &PgRow) -> Result<RunRow> {
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
