//! Meter health records and the technicians' notes, in PostgreSQL.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use sqlx::postgres::PgRow;
use sqlx::types::Json;
use sqlx::{PgConnection, Row};

use super::super::{from_ms, now_ms, to_ms, MeterNote, NoteKind, PlantRow, Result, StoreError};
use super::runs::json_text;
use super::PgStore;
use crate::health::MeterPeriod;

/// Insert or replace the meter rows of a run (inside the run's transaction), all in one
/// statement: the rows travel as one array per column.
pub(super) async fn write_meter_periods(
    tx: &mut PgConnection,
    plant: &PlantRow,
    run_id: i64,
    rows: &[(String, MeterPeriod)],
) -> Result<()> {
    if rows.is_empty() {
        return Ok(());
    }
    let column =
        |f: fn(&MeterPeriod) -> Option<f64>| rows.iter().map(|(_, p)| f(p)).collect::<Vec<_>>();
    let correlations = rows
        .iter()
        .map(|(_, p)| json_text(&p.correlations))
        .collect::<Result<Vec<_>>>()?;
    sqlx::query(
        "INSERT INTO meter_periods
             (plant_id, run_id, tag, period_start, measured, reconciled, sigma, adjustment,
              adjustment_sigma, normalized_adjustment, redundant, flagged, readings,
              bad_readings, out_of_range_readings, correlations)
         SELECT $1, $2, m.tag, m.period_start, m.measured, m.reconciled, m.sigma, m.adjustment,
                m.adjustment_sigma, m.normalized, m.redundant, m.flagged, m.readings,
                m.bad_readings, m.out_of_range_readings, m.correlations::json
         FROM UNNEST($3::text[], $4::int8[], $5::float8[], $6::float8[], $7::float8[],
                     $8::float8[], $9::float8[], $10::float8[], $11::bool[], $12::bool[],
                     $13::int8[], $14::int8[], $15::int8[], $16::text[])
             AS m (tag, period_start, measured, reconciled, sigma, adjustment,
                   adjustment_sigma, normalized, redundant, flagged, readings, bad_readings,
                   out_of_range_readings, correlations)
         ON CONFLICT (plant_id, tag, period_start) DO UPDATE SET
             run_id = excluded.run_id, measured = excluded.measured,
             reconciled = excluded.reconciled, sigma = excluded.sigma,
             adjustment = excluded.adjustment, adjustment_sigma = excluded.adjustment_sigma,
             normalized_adjustment = excluded.normalized_adjustment,
             redundant = excluded.redundant, flagged = excluded.flagged,
             readings = excluded.readings, bad_readings = excluded.bad_readings,
             out_of_range_readings = excluded.out_of_range_readings,
             correlations = excluded.correlations",
    )
    .bind(plant.id)
    .bind(run_id)
    .bind(rows.iter().map(|(tag, _)| tag.as_str()).collect::<Vec<_>>())
    .bind(
        rows.iter()
            .map(|(_, p)| to_ms(p.period_start))
            .collect::<Vec<_>>(),
    )
    .bind(column(|p| p.measured))
    .bind(column(|p| p.reconciled))
    .bind(column(|p| p.sigma))
    .bind(column(|p| p.adjustment))
    .bind(column(|p| p.adjustment_sigma))
    .bind(column(|p| p.normalized))
    .bind(rows.iter().map(|(_, p)| p.redundant).collect::<Vec<_>>())
    .bind(rows.iter().map(|(_, p)| p.flagged).collect::<Vec<_>>())
    .bind(rows.iter().map(|(_, p)| p.readings).collect::<Vec<_>>())
    .bind(rows.iter().map(|(_, p)| p.bad_readings).collect::<Vec<_>>())
    .bind(
        rows.iter()
            .map(|(_, p)| p.out_of_range_readings)
            .collect::<Vec<_>>(),
    )
    .bind(correlations)
    .execute(&mut *tx)
    .await?;
    Ok(())
}

fn meter_period(r: &PgRow) -> Result<(String, MeterPeriod)> {
    Ok((
        r.try_get("tag")?,
        MeterPeriod {
            period_start: from_ms(r.try_get("period_start")?)?,
            measured: r.try_get("measured")?,
            reconciled: r.try_get("reconciled")?,
            sigma: r.try_get("sigma")?,
            adjustment: r.try_get("adjustment")?,
            adjustment_sigma: r.try_get("adjustment_sigma")?,
            normalized: r.try_get("normalized_adjustment")?,
            redundant: r.try_get("redundant")?,
            flagged: r.try_get("flagged")?,
            readings: r.try_get("readings")?,
            bad_readings: r.try_get("bad_readings")?,
            out_of_range_readings: r.try_get("out_of_range_readings")?,
            correlations: {
                let Json(c): Json<BTreeMap<String, f64>> = r.try_get("correlations")?;
                c
            },
        },
    ))
}

impl PgStore {
    pub(in crate::store) async fn meter_periods(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<(String, MeterPeriod)>> {
        let rows = sqlx::query(
            "SELECT * FROM meter_periods
             WHERE plant_id = $1 AND ($2::text IS NULL OR tag = $2) AND period_start >= $3
               AND period_start < $4
             ORDER BY tag, period_start",
        )
        .bind(plant.id)
        .bind(tag)
        .bind(to_ms(from))
        .bind(to_ms(to))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(meter_period).collect()
    }

    pub(in crate::store) async fn add_note(
        &self,
        plant: &PlantRow,
        tag: &str,
        kind: NoteKind,
        text: &str,
        effective_at: DateTime<Utc>,
        token_id: Option<i64>,
    ) -> Result<MeterNote> {
        let created_at = now_ms();
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO meter_notes (plant_id, tag, kind, text, effective_at, created_at, token_id)
             VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id",
        )
        .bind(plant.id)
        .bind(tag)
        .bind(kind.as_str())
        .bind(text)
        .bind(to_ms(effective_at))
        .bind(created_at)
        .bind(token_id)
        .fetch_one(&self.pool)
        .await?;
        Ok(MeterNote {
            id,
            tag: tag.to_string(),
            kind,
            text: text.to_string(),
            effective_at,
            created_at: from_ms(created_at)?,
        })
    }

    pub(in crate::store) async fn notes(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
    ) -> Result<Vec<MeterNote>> {
        let rows = sqlx::query(
            "SELECT id, tag, kind, text, effective_at, created_at FROM meter_notes
             WHERE plant_id = $1 AND ($2::text IS NULL OR tag = $2) ORDER BY effective_at, id",
        )
        .bind(plant.id)
        .bind(tag)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let kind: String = r.try_get("kind")?;
                Ok(MeterNote {
                    id: r.try_get("id")?,
                    tag: r.try_get("tag")?,
                    kind: NoteKind::parse(&kind)
                        .ok_or_else(|| StoreError::Corrupt(format!("note kind \"{kind}\"")))?,
                    text: r.try_get("text")?,
                    effective_at: from_ms(r.try_get("effective_at")?)?,
                    created_at: from_ms(r.try_get("created_at")?)?,
                })
            })
            .collect()
    }
}
