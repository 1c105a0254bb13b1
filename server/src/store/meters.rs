//! Meter health records (one row per meter and period, written with each run) and the
//! technicians' notes.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use sqlx::types::Json;
use sqlx::Row;

use super::{from_ms, now_ms, to_ms, PlantRow, Result, SqliteStore, StoreError};
use crate::health::MeterPeriod;

/// A technician's note on a meter.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterNote {
    pub id: i64,
    pub tag: String,
    pub kind: NoteKind,
    pub text: String,
    pub effective_at: DateTime<Utc>,
    pub created_at: DateTime<Utc>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NoteKind {
    Checked,
    Recalibrated,
    Replaced,
}

impl NoteKind {
    pub fn as_str(self) -> &'static str {
        match self {
            NoteKind::Checked => "checked",
            NoteKind::Recalibrated => "recalibrated",
            NoteKind::Replaced => "replaced",
        }
    }

    pub fn parse(text: &str) -> Option<NoteKind> {
        match text {
            "checked" => Some(NoteKind::Checked),
            "recalibrated" => Some(NoteKind::Recalibrated),
            "replaced" => Some(NoteKind::Replaced),
            _ => None,
        }
    }

    /// Does this note start a fresh history?
    pub fn resets(self) -> bool {
        matches!(self, NoteKind::Recalibrated | NoteKind::Replaced)
    }
}

/// Insert or replace the meter rows of a run (inside the run's transaction).
pub(super) async fn write_meter_periods(
    tx: &mut sqlx::SqliteConnection,
    plant: &PlantRow,
    run_id: i64,
    rows: &[(String, MeterPeriod)],
) -> Result<()> {
    for (tag, p) in rows {
        sqlx::query(
            "INSERT INTO meter_periods
                 (plant_id, tag, period_start, run_id, measured, reconciled, sigma, adjustment,
                  adjustment_sigma, normalized_adjustment, redundant, flagged, readings,
                  bad_readings, out_of_range_readings, correlations)
             VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
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
        .bind(tag)
        .bind(to_ms(p.period_start))
        .bind(run_id)
        .bind(p.measured)
        .bind(p.reconciled)
        .bind(p.sigma)
        .bind(p.adjustment)
        .bind(p.adjustment_sigma)
        .bind(p.normalized)
        .bind(p.redundant)
        .bind(p.flagged)
        .bind(p.readings)
        .bind(p.bad_readings)
        .bind(p.out_of_range_readings)
        .bind(Json(&p.correlations))
        .execute(&mut *tx)
        .await?;
    }
    Ok(())
}

fn meter_period(r: &sqlx::sqlite::SqliteRow) -> Result<(String, MeterPeriod)> {
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

impl SqliteStore {
    /// Every meter's record from `from` (inclusive) to `to` (exclusive), by tag then period.
    pub(super) async fn meter_periods(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<(String, MeterPeriod)>> {
        let rows = sqlx::query(
            "SELECT * FROM meter_periods
             WHERE plant_id = ? AND (? IS NULL OR tag = ?) AND period_start >= ?
               AND period_start < ?
             ORDER BY tag, period_start",
        )
        .bind(plant.id)
        .bind(tag)
        .bind(tag)
        .bind(to_ms(from))
        .bind(to_ms(to))
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(meter_period).collect()
    }

    pub(super) async fn add_note(
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
             VALUES (?, ?, ?, ?, ?, ?, ?) RETURNING id",
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

    /// Notes of a plant (of one tag when given), oldest effective first.
    pub(super) async fn notes(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
    ) -> Result<Vec<MeterNote>> {
        let rows = sqlx::query(
            "SELECT id, tag, kind, text, effective_at, created_at FROM meter_notes
             WHERE plant_id = ? AND (? IS NULL OR tag = ?) ORDER BY effective_at, id",
        )
        .bind(plant.id)
        .bind(tag)
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
