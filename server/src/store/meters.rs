//! Meter health records (one row per meter and period, written with each run: `sqlite/` and
//! `pg/` write them, as a batch) and the technicians' notes, with the re-runs a note that
//! takes a meter out of service (or brings it back) calls for.

use chrono::{DateTime, Utc};

use super::rows::{self, MeterNote, NoteDraft, NoteOutcome, PlantRow};
use super::values::Millis;
use super::{Result, Store};
use crate::health::MeterPeriod;

/// A note's check against the tag's notes, oldest effective first: the instant from which the
/// tag's periods already run must run again (none when the note changes no estimate), or why
/// the note is refused.
pub type NoteCheck<'a> =
    &'a (dyn Fn(&[MeterNote]) -> std::result::Result<Option<DateTime<Utc>>, String> + Sync);

/// The notes of tag $2 of plant $1, oldest effective first.
const NOTES_OF_TAG: &str = "
    SELECT id, tag, kind, text, effective_at, created_at, as_found FROM meter_notes
    WHERE plant_id = $1 AND tag = $2
    ORDER BY effective_at, id";

const INSERT_NOTE: &str = "
    INSERT INTO meter_notes
        (plant_id, tag, kind, text, effective_at, created_at, token_id, as_found)
    VALUES ($1, $2, $3, $4, $5, $6, $7, $8) RETURNING id";

/// Dirty marks, at $3, of the periods of plant $1 already run with tag $2 in their model that
/// start at or after $4: the meter's record rows name exactly those. As a reading's mark, a
/// re-mark always moves marked_at forward (see `claims::settle`); CASE, not MAX or GREATEST,
/// so that one text serves both dialects.
const MARK_RUN_PERIODS: &str = "
    INSERT INTO dirty_periods (plant_id, period_start, marked_at)
    SELECT plant_id, period_start, $3 FROM meter_periods
    WHERE plant_id = $1 AND tag = $2 AND period_start >= $4
    ON CONFLICT (plant_id, period_start) DO UPDATE SET
        marked_at = CASE WHEN excluded.marked_at > dirty_periods.marked_at
                         THEN excluded.marked_at ELSE dirty_periods.marked_at + 1 END";

impl Store {
    /// Meter records of `[from, to)` (one tag, or all), by tag then period.
    pub async fn meter_periods(
        &self,
        plant: &PlantRow,
        tag: Option<&str>,
        from: DateTime<Utc>,
        to: DateTime<Utc>,
    ) -> Result<Vec<(String, MeterPeriod)>> {
        // One tag: a range of the primary key (plant_id, tag, period_start). A test of the
        // parameter in the WHERE clause (`$2 IS NULL OR tag = $2`) would hide the tag from
        // SQLite's planner, which then reads every row of the plant (a year of 28 meters for
        // one meter's page).
        const ONE: &str = "
            SELECT * FROM meter_periods
            WHERE plant_id = $1 AND tag = $2 AND period_start >= $3 AND period_start < $4
            ORDER BY tag, period_start";
        const ALL: &str = "
            SELECT * FROM meter_periods
            WHERE plant_id = $1 AND period_start >= $2 AND period_start < $3
            ORDER BY tag, period_start";
        on_backend!(self, s => {
            let query = match tag {
                Some(tag) => sqlx::query(ONE).bind(plant.id).bind(tag),
                None => sqlx::query(ALL).bind(plant.id),
            };
            query
                .bind(Millis::from(from))
                .bind(Millis::from(to))
                .fetch_all(&s.pool)
                .await?
                .iter()
                .map(rows::meter_period)
                .collect()
        })
    }

    /// Record a technician's note, if `check` admits it against the tag's notes (oldest
    /// effective first): in one transaction, in which the plant's writers take turns, the
    /// tag's notes are read, the note is stored and, when `check` answers an instant, every
    /// period of the tag already run that starts at or after it is marked dirty, so the
    /// scheduler runs it again exactly as it does after a late reading. A refusal stores
    /// nothing.
    pub async fn add_note(
        &self,
        plant: &PlantRow,
        note: &NoteDraft<'_>,
        check: NoteCheck<'_>,
    ) -> Result<NoteOutcome> {
        let mut tx = self.write_for(plant).await?;
        let existing: Vec<MeterNote> = in_tx!(&mut tx, t => sqlx::query(NOTES_OF_TAG)
            .bind(plant.id)
            .bind(note.tag)
            .fetch_all(&mut **t)
            .await?
            .iter()
            .map(rows::note)
            .collect::<Result<_>>()?);
        let rerun_from = match check(&existing) {
            Ok(from) => from,
            Err(why) => return Ok(NoteOutcome::Refused(why)),
        };
        let created_at = Millis::now();
        let id: i64 = in_tx!(&mut tx, t => sqlx::query_scalar(INSERT_NOTE)
            .bind(plant.id)
            .bind(note.tag)
            .bind(note.kind.as_str())
            .bind(note.text)
            .bind(Millis::from(note.effective_at))
            .bind(created_at)
            .bind(note.token_id)
            .bind(note.as_found)
            .fetch_one(&mut **t)
            .await?);
        let marked = match rerun_from {
            Some(from) => in_tx!(&mut tx, t => sqlx::query(MARK_RUN_PERIODS)
                .bind(plant.id)
                .bind(note.tag)
                .bind(created_at)
                .bind(Millis::from(from))
                .execute(&mut **t)
                .await?
                .rows_affected()),
            None => 0,
        };
        tx.commit().await?;
        Ok(NoteOutcome::Stored {
            note: MeterNote {
                id,
                tag: note.tag.to_string(),
                kind: note.kind,
                text: note.text.to_string(),
                effective_at: note.effective_at,
                created_at: created_at.to_utc()?,
                as_found: note.as_found,
            },
            marked,
        })
    }

    /// Notes of a plant (of one tag when given), oldest effective first.
    pub async fn notes(&self, plant: &PlantRow, tag: Option<&str>) -> Result<Vec<MeterNote>> {
        const SQL: &str = "
            SELECT id, tag, kind, text, effective_at, created_at, as_found FROM meter_notes
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
