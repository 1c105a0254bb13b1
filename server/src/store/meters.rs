//! Meter health records (one row per meter and period, written with each run: `sqlite/` and
//! `pg/` write them, as a batch) and the technicians' notes.

use chrono::{DateTime, Utc};

use super::rows::{self, MeterNote, NoteKind, PlantRow};
use super::values::Millis;
use super::{Result, Store};
use crate::health::MeterPeriod;

impl Store {
    /// Meter records of `[from, to)` (one tag, or all), by tag then period.
    pub async fn meter_periods(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<(String, MeterPeriod)>> {
        // The CAST gives PostgreSQL the type of a parameter that may be NULL.
        const SQL: &str = "
            SELECT * FROM meter_periods
            WHERE plant_id = $1 AND (CAST($2 AS TEXT) IS NULL OR tag = $2)
              AND period_start >= $3 AND period_start < $4
            ORDER BY tag, period_start";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(tag)
            .bind(Millis::from(from))
            .bind(Millis::from(to))
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::meter_period)
            .collect())
    }

    /// Record a technician's note.
    pub async fn add_note(
        &self,
        plant: &PlantRow,
        tag: &str,
        kind: NoteKind,
        text: &str,
        effective_at: DateTime<Utc>,
        token_id: Option<i64>,
    ) -> Result<MeterNote> {
        const SQL: &str = "
            INSERT INTO meter_notes
                (plant_id, tag, kind, text, effective_at, created_at, token_id)
            VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id";
        let created_at = Millis::now();
        let id: i64 = on_backend!(self, s => sqlx::query_scalar(SQL)
            .bind(plant.id)
            .bind(tag)
            .bind(kind.as_str())
            .bind(text)
            .bind(Millis::from(effective_at))
            .bind(created_at)
            .bind(token_id)
            .fetch_one(&s.pool)
            .await?);
        Ok(MeterNote {
            id,
            tag: tag.to_string(),
            kind,
            text: text.to_string(),
            effective_at,
            created_at: created_at.to_utc()?,
        })
    }

    /// Notes of a plant (of one tag when given), oldest effective first.
    pub async fn notes(&self, plant: &PlantRow, tag: Option<&str>) -> Result<Vec<MeterNote>> {
        const SQL: &str = "
            SELECT id, tag, kind, text, effective_at, created_at FROM meter_notes
            WHERE plant_id = $1 AND (CAST($2 AS TEXT) IS NULL OR tag = $2)
            ORDER BY effective_at, id";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(tag)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::note)
            .collect())
    }
}
