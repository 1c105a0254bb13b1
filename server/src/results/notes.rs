//! The technicians' notes on meters: a new note's fields checked and the note stored, with
//! the re-runs an out-of-service note calls for.

use chrono::{DateTime, Utc};
use serde::Deserialize;
use utoipa::ToSchema;

use super::meters::NoteBody;
use super::ResultsError;
use crate::service::Service;
use crate::store::{MeterNote, NoteDraft, NoteKind, NoteOutcome, PlantRow};

/// A technician's note.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct NewNote {
    /// checked, recalibrated, replaced, out_of_service or back_in_service; recalibrated and
    /// replaced start a fresh history, out_of_service takes the meter out of the estimate
    /// until back_in_service.
    #[schema(value_type = NoteKindWord)]
    pub kind: String,
    /// What was found or done.
    #[serde(default)]
    #[schema(max_length = 4000)]
    pub text: String,
    /// When it was done (RFC 3339); now when absent.
    #[schema(format = DateTime, nullable = false)]
    pub effective_at: Option<String>,
    /// On a recalibrated note only: the error measured before recalibrating, in the meter's
    /// uom (positive: read high).
    pub as_found: Option<f64>,
}

/// The kinds of note, as the document lists them (the handler reads the word itself, so that
/// an unknown one is refused with the list of kinds).
#[derive(Debug, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum NoteKindWord {
    Checked,
    Recalibrated,
    Replaced,
    OutOfService,
    BackInService,
}

/// Longest note text accepted.
const MAX_NOTE_CHARS: usize = 4000;

/// The kinds in a sentence: `a, b, c, d, e`.
fn kinds() -> String {
    NoteKind::ALL.map(NoteKind::as_str).join(", ")
}

/// The note's own fields checked: its kind, `as_found` (finite, on a recalibrated note only)
/// and text.
fn checked_fields(note: &NewNote) -> Result<NoteKind, ResultsError> {
    let refused = |s: String| Err(ResultsError::Refused(s));
    let Some(kind) = NoteKind::parse(note.kind.trim()) else {
        return refused(format!("kind \"{}\" is not one of {}", note.kind, kinds()));
    };
    if let Some(v) = note.as_found {
        if kind != NoteKind::Recalibrated {
            return refused(format!(
                "as_found is the error found before a recalibration; a {} note may not carry \
                 one",
                kind.as_str()
            ));
        }
        if !v.is_finite() {
            return refused(format!("as_found {v} is not a finite number"));
        }
    }
    if note.text.chars().count() > MAX_NOTE_CHARS {
        return refused(format!("text is longer than {MAX_NOTE_CHARS} characters"));
    }
    // No store keeps it: PostgreSQL's text refuses the character.
    if note.text.contains('\0') {
        return refused("text holds the character U+0000, which a note may not hold".into());
    }
    Ok(kind)
}

/// Record a technician's note on a meter of any of the plant's revisions; `effective_at`
/// defaults to `now`. Refused, naming the field, when the kind is unknown, `as_found` is on
/// another kind than recalibrated or not finite, the time is not RFC 3339, the text is too
/// long or holds U+0000, or an out_of_service / back_in_service note does not pair with the
/// meter's notes (see [`crate::out_of_service::check`]); nothing is then stored. A note that
/// takes the meter out of service or brings it back marks the periods already run from its
/// time on to run again, and wakes the scheduler.
pub async fn add_note(
    service: &Service,
    plant: &PlantRow,
    tag: &str,
    note: &NewNote,
    token_id: Option<i64>,
    now: DateTime<Utc>,
) -> Result<NoteBody, ResultsError> {
    let kind = checked_fields(note)?;
    let effective_at = match note.effective_at.as_deref() {
        Some(t) => super::range::parse_time("effective_at", t)?,
        None => now,
    };
    let revs = service.store.list_revisions(plant).await?;
    if !revs
        .iter()
        .any(|r| r.spec.meters.iter().any(|m| m.tag == tag))
    {
        return Err(ResultsError::NotFound(format!(
            "plant \"{}\" has no meter {}",
            plant.name,
            reconcile::text::quote(tag)
        )));
    }
    let draft = NoteDraft {
        tag,
        kind,
        text: &note.text,
        effective_at,
        as_found: note.as_found,
        token_id,
    };
    let check = |notes: &[MeterNote]| crate::out_of_service::check(notes, tag, kind, effective_at);
    match service.store.add_note(plant, &draft, &check).await? {
        NoteOutcome::Refused(why) => Err(ResultsError::Refused(why)),
        NoteOutcome::Stored { note, marked } => {
            if marked > 0 {
                service.wake.notify_one();
            }
            Ok(NoteBody::from(&note))
        }
    }
}
