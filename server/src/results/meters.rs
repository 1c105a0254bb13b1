//! Meter health for the instrument technicians, from the stored meter records of every run:
//! every meter ranked by evidence, one meter's history with its CUSUM, and the technicians'
//! notes (a recalibration or replacement starts a fresh history).

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use super::{rfc3339, ResultsError};
use crate::health::{self, Health, MeterPeriod, CUSUM_K, CUSUM_SUSPECT, CUSUM_WATCH};
use crate::revisions::{in_effect, RevisionError};
use crate::service::Service;
use crate::store::{MeterNote, NoteKind, PlantRow};

/// A note as answered.
#[derive(Debug, Serialize, ToSchema)]
pub struct NoteBody {
    pub id: i64,
    pub tag: String,
    /// checked, recalibrated or replaced.
    pub kind: String,
    pub text: String,
    pub effective_at: String,
    pub created_at: String,
}

impl From<&MeterNote> for NoteBody {
    fn from(n: &MeterNote) -> NoteBody {
        NoteBody {
            id: n.id,
            tag: n.tag.clone(),
            kind: n.kind.as_str().to_string(),
            text: n.text.clone(),
            effective_at: rfc3339(n.effective_at),
            created_at: rfc3339(n.created_at),
        }
    }
}

/// One meter's health.
#[derive(Debug, Serialize, ToSchema)]
pub struct MeterHealth {
    pub tag: String,
    pub stream: String,
    pub quantity: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub component: Option<String>,
    pub uom: String,
    #[serde(flatten)]
    pub health: Health,
    /// The history this assessment covers starts here: the last recalibration or replacement,
    /// or the first record.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub history_since: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_note: Option<NoteBody>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct MeterList {
    pub plant: String,
    /// The statistic and its thresholds, for the reader.
    pub method: String,
    /// Worst first: suspect, frozen, out of range, watch, missing, untestable, ok; by
    /// statistic within a status.
    pub meters: Vec<MeterHealth>,
}

/// The model of the revision in effect at `now` (the meter list is of that model's meters).
async fn spec_at(
    service: &Service,
    plant: &PlantRow,
    now: DateTime<Utc>,
) -> Result<ModelSpec, ResultsError> {
    let revs = service.store.list_revisions(plant).await?;
    let keys: Vec<_> = revs
        .iter()
        .map(|r| (r.effective_from, r.revision))
        .collect();
    let i = in_effect(&keys, now).ok_or_else(|| RevisionError::NoModel {
        plant: plant.name.clone(),
        at: now,
    })?;
    Ok(revs[i].spec.clone())
}

const METHOD: &str = "two-sided CUSUM of the normalised adjustment, k = 0.5; watch at 5, \
                      suspect at 10 (average run length of an unbiased meter about 470 and \
                      70,000 periods); bias pooled over the periods of the evidence";

/// Each tag's history start: its last recalibration or replacement.
fn resets(notes: &[MeterNote], tag: &str) -> Option<DateTime<Utc>> {
    notes
        .iter()
        .filter(|n| n.tag == tag && n.kind.resets())
        .map(|n| n.effective_at)
        .max()
}

/// The correlation of two meters' adjustments in the latest period that knows it.
fn correlation(records: &[(String, MeterPeriod)], a: &str, b: &str) -> Option<f64> {
    records
        .iter()
        .rev()
        .filter(|(t, _)| t == a)
        .find_map(|(_, p)| p.correlations.get(b).copied())
}

/// Σ d / √n of a meter's normalised adjustments from `since` on: its evidence over a window
/// shared with another meter.
fn common_evidence(
    records: &[(String, MeterPeriod)],
    tag: &str,
    since: Option<DateTime<Utc>>,
) -> f64 {
    let (sum, n) = records
        .iter()
        .filter(|(t, p)| t == tag && since.is_none_or(|s| p.period_start >= s) && p.redundant)
        .filter_map(|(_, p)| p.normalized)
        .fold((0.0, 0usize), |(s, n), d| (s + d, n + 1));
    if n == 0 {
        0.0
    } else {
        sum / (n as f64).sqrt()
    }
}

/// Every meter of the model in effect at `now`, worst first: suspect, frozen, out of range,
/// watch, missing, untestable, ok; by statistic within a status. A meter suspect together
/// with another it cannot be told apart from is named with it (see [`health::attribute`]).
pub async fn ranking(
    service: &Service,
    plant: &PlantRow,
    now: DateTime<Utc>,
) -> Result<MeterList, ResultsError> {
    let spec = spec_at(service, plant, now).await?;
    let notes = service.store.notes(plant, None).await?;
    let records = service
        .store
        .meter_periods(
            plant,
            None,
            DateTime::<Utc>::MIN_UTC,
            DateTime::<Utc>::MAX_UTC,
        )
        .await?;
    let tags: Vec<String> = spec.meters.iter().map(|m| m.tag.clone()).collect();
    let healths: Vec<Health> = tags
        .iter()
        .map(|tag| {
            let since = resets(&notes, tag);
            let record: Vec<MeterPeriod> = records
                .iter()
                .filter(|(t, p)| t == tag && since.is_none_or(|s| p.period_start >= s))
                .map(|(_, p)| p.clone())
                .collect();
            health::assess(&record)
        })
        .collect();
    let evidence = |i: usize, j: usize| {
        let since = [&healths[i], &healths[j]]
            .iter()
            .filter_map(|h| h.evidence_since)
            .min();
        let z = |tag: &str| common_evidence(&records, tag, since);
        (z(&tags[i]), z(&tags[j]))
    };
    let mut attributed = healths.clone();
    health::attribute(
        &tags,
        &mut attributed,
        &|i, j| correlation(&records, &tags[i], &tags[j]),
        &evidence,
    );
    let healths = attributed;
    let mut meters: Vec<MeterHealth> = spec
        .meters
        .iter()
        .zip(healths)
        .map(|(m, health)| {
            let since = resets(&notes, &m.tag);
            let first = records
                .iter()
                .find(|(t, p)| *t == m.tag && since.is_none_or(|s| p.period_start >= s))
                .map(|(_, p)| p.period_start);
            MeterHealth {
                tag: m.tag.clone(),
                stream: m.stream.clone(),
                quantity: m.quantity.as_str().to_string(),
                component: m.component.clone(),
                uom: m.uom.clone(),
                health,
                history_since: since.or(first).map(rfc3339),
                last_note: notes
                    .iter()
                    .rev()
                    .find(|n| n.tag == m.tag)
                    .map(NoteBody::from),
            }
        })
        .collect();
    meters.sort_by(|a, b| {
        a.health
            .status
            .rank()
            .cmp(&b.health.status.rank())
            .then(b.health.statistic.total_cmp(&a.health.statistic))
    });
    Ok(MeterList {
        plant: plant.name.clone(),
        method: METHOD.to_string(),
        meters,
    })
}

/// One period of a meter's history.
#[derive(Debug, Serialize, ToSchema)]
pub struct HistoryPoint {
    pub period_start: String,
    pub measured: Option<f64>,
    pub reconciled: Option<f64>,
    pub adjustment: Option<f64>,
    pub normalized_adjustment: Option<f64>,
    pub redundant: bool,
    /// The period's own tests named the meter.
    pub flagged: bool,
    /// CUSUM after this period (the larger side), and what it reached: ok, watch, suspect.
    pub cusum: f64,
    pub level: String,
    pub readings: i64,
    pub bad_readings: i64,
    pub out_of_range_readings: i64,
    /// Correlation of this meter's adjustment with other meters' this period (|ρ| ≥ 0.2): a
    /// bias here moves their normalised adjustments by ρ times as much, so they are the meters
    /// it can be confused with (|ρ| near 1: the meter set cannot tell them apart).
    pub correlations: std::collections::BTreeMap<String, f64>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct MeterDetail {
    pub plant: String,
    #[serde(flatten)]
    pub meter: MeterHealth,
    pub method: String,
    /// Since the last recalibration or replacement, oldest first.
    pub history: Vec<HistoryPoint>,
    pub notes: Vec<NoteBody>,
}

/// One meter's health (ranked among all: the neighbourhood rule needs every meter's
/// evidence), its history since its last recalibration or replacement with the CUSUM after
/// each period, and its notes.
pub async fn detail(
    service: &Service,
    plant: &PlantRow,
    tag: &str,
    now: DateTime<Utc>,
) -> Result<MeterDetail, ResultsError> {
    let list = ranking(service, plant, now).await?;
    let count = list.meters.len();
    let Some(meter) = list.meters.into_iter().find(|m| m.tag == tag) else {
        return Err(ResultsError::NotFound(format!(
            "plant \"{}\" has no meter \"{tag}\" in its current model ({count} meters)",
            plant.name
        )));
    };
    let notes = service.store.notes(plant, Some(tag)).await?;
    let since = resets(&notes, tag).unwrap_or(DateTime::<Utc>::MIN_UTC);
    let record = service
        .store
        .meter_periods(plant, Some(tag), since, DateTime::<Utc>::MAX_UTC)
        .await?;
    let (mut hi, mut lo) = (0.0f64, 0.0f64);
    let history = record
        .iter()
        .map(|(_, p)| {
            if let Some(d) = p.normalized.filter(|d| d.is_finite() && p.redundant) {
                hi = (hi - d - CUSUM_K).max(0.0);
                lo = (lo + d - CUSUM_K).max(0.0);
            }
            let cusum = hi.max(lo);
            let level = if cusum >= CUSUM_SUSPECT {
                "suspect"
            } else if cusum >= CUSUM_WATCH {
                "watch"
            } else {
                "ok"
            };
            HistoryPoint {
                period_start: rfc3339(p.period_start),
                measured: p.measured,
                reconciled: p.reconciled,
                adjustment: p.adjustment,
                normalized_adjustment: p.normalized,
                redundant: p.redundant,
                flagged: p.flagged,
                cusum,
                level: level.to_string(),
                readings: p.readings,
                bad_readings: p.bad_readings,
                out_of_range_readings: p.out_of_range_readings,
                correlations: p.correlations.clone(),
            }
        })
        .collect();
    Ok(MeterDetail {
        plant: plant.name.clone(),
        meter,
        method: METHOD.to_string(),
        history,
        notes: notes.iter().map(NoteBody::from).collect(),
    })
}

/// A technician's note.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct NewNote {
    /// checked, recalibrated or replaced; the last two start a fresh history.
    pub kind: String,
    /// What was found or done.
    #[serde(default)]
    pub text: String,
    /// When it was done (RFC 3339); now when absent.
    pub effective_at: Option<String>,
}

/// Longest note text accepted.
const MAX_NOTE_CHARS: usize = 4000;

/// Record a technician's note on a meter of any of the plant's revisions; `effective_at`
/// defaults to `now`. Refused, naming the field, when the kind is unknown, the time is not
/// RFC 3339, or the text is too long or holds U+0000 (which no store keeps).
pub async fn add_note(
    service: &Service,
    plant: &PlantRow,
    tag: &str,
    note: &NewNote,
    token_id: Option<i64>,
    now: DateTime<Utc>,
) -> Result<NoteBody, ResultsError> {
    let refused = |s: String| Err(ResultsError::Refused(s));
    let Some(kind) = NoteKind::parse(note.kind.trim()) else {
        return refused(format!(
            "kind \"{}\" is not one of checked, recalibrated, replaced",
            note.kind
        ));
    };
    if note.text.chars().count() > MAX_NOTE_CHARS {
        return refused(format!("text is longer than {MAX_NOTE_CHARS} characters"));
    }
    // No store keeps it: PostgreSQL's text refuses the character.
    if note.text.contains('\0') {
        return refused("text holds the character U+0000, which a note may not hold".into());
    }
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
            "plant \"{}\" has no meter \"{tag}\"",
            plant.name
        )));
    }
    let stored = service
        .store
        .add_note(plant, tag, kind, &note.text, effective_at, token_id)
        .await?;
    Ok(NoteBody::from(&stored))
}
