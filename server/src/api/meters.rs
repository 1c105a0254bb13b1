//! Meter health for the instrument technicians: every meter ranked by evidence, one meter's
//! history, and the technicians' notes (a recalibration or replacement starts a fresh history).

use axum::extract::rejection::JsonRejection;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::{DateTime, Utc};
use reconcile::ModelSpec;
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use super::auth::Caller;
use super::problem::Problem;
use super::readings::parse_time;
use super::{plant_row, rfc3339, AppState};
use crate::health::{self, Health, MeterPeriod, CUSUM_K, CUSUM_SUSPECT, CUSUM_WATCH};
use crate::store::{MeterNote, NoteKind, PlantRow, Role};

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

async fn current_spec(state: &AppState, row: &PlantRow) -> Result<ModelSpec, Problem> {
    let revs = state.store.list_revisions(row).await?;
    let keys: Vec<_> = revs
        .iter()
        .map(|r| (r.effective_from, r.revision))
        .collect();
    let i = crate::revisions::in_effect(&keys, Utc::now()).ok_or_else(|| {
        Problem::new(
            StatusCode::CONFLICT,
            "no-model",
            format!("plant \"{}\" has no model yet", row.name),
        )
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

/// Every meter's health, worst first.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/meters",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name")),
    responses(
        (status = 200, description = "Every meter of the current model, ranked by evidence", body = MeterList),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn list_meters(
    State(state): State<AppState>,
    caller: Caller,
    Path(plant): Path<String>,
) -> Result<Json<MeterList>, Problem> {
    caller.require(Role::Read, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let spec = current_spec(&state, &row).await?;
    let notes = state.store.notes(&row, None).await?;
    let records = state
        .store
        .meter_periods(
            &row,
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
    Ok(Json(MeterList {
        plant,
        method: METHOD.to_string(),
        meters,
    }))
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

/// One meter's health and its history of measured, reconciled and normalised adjustment.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/meters/{tag}",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name"), ("tag" = String, Path, description = "Meter tag")),
    responses(
        (status = 200, description = "The meter's health, history and notes", body = MeterDetail),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant or meter", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_meter(
    State(state): State<AppState>,
    caller: Caller,
    Path((plant, tag)): Path<(String, String)>,
) -> Result<Json<MeterDetail>, Problem> {
    caller.require(Role::Read, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let spec = current_spec(&state, &row).await?;
    // The whole list: the neighbourhood rule needs every meter's evidence.
    let Json(list) = list_meters(State(state.clone()), caller, Path(plant.clone())).await?;
    let Some(meter) = list.meters.into_iter().find(|m| m.tag == tag) else {
        return Err(Problem::not_found(format!(
            "plant \"{plant}\" has no meter \"{tag}\" in its current model ({} meters)",
            spec.meters.len()
        )));
    };
    let notes = state.store.notes(&row, Some(&tag)).await?;
    let since = resets(&notes, &tag).unwrap_or(DateTime::<Utc>::MIN_UTC);
    let record = state
        .store
        .meter_periods(&row, Some(&tag), since, DateTime::<Utc>::MAX_UTC)
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
    Ok(Json(MeterDetail {
        plant,
        meter,
        method: METHOD.to_string(),
        history,
        notes: notes.iter().map(NoteBody::from).collect(),
    }))
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

/// Record a technician's note on a meter.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/meters/{tag}/notes",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name"), ("tag" = String, Path, description = "Meter tag")),
    request_body(content = NewNote, description = "The note", content_type = "application/json"),
    responses(
        (status = 201, description = "Recorded", body = NoteBody),
        (status = 400, description = "Not JSON of the expected shape, unknown kind, bad time, text over 4000 characters or holding U+0000", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not maintain, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant or meter", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn post_note(
    State(state): State<AppState>,
    caller: Caller,
    Path((plant, tag)): Path<(String, String)>,
    body: Result<Json<NewNote>, JsonRejection>,
) -> Result<Response, Problem> {
    caller.require(Role::Maintain, &plant)?;
    let Json(note) = body.map_err(|e| {
        if e.status() == StatusCode::PAYLOAD_TOO_LARGE {
            return super::too_large(state.limits.max_body_bytes);
        }
        Problem::bad_request(format!(
            "a note is JSON {{\"kind\": \"checked|recalibrated|replaced\", \"text\": \"...\", \
             \"effective_at\": \"RFC 3339\"}}: {}",
            e.body_text()
        ))
    })?;
    let kind = NoteKind::parse(note.kind.trim()).ok_or_else(|| {
        Problem::bad_request(format!(
            "kind \"{}\" is not one of checked, recalibrated, replaced",
            note.kind
        ))
    })?;
    if note.text.chars().count() > MAX_NOTE_CHARS {
        return Err(Problem::bad_request(format!(
            "text is longer than {MAX_NOTE_CHARS} characters"
        )));
    }
    // No store keeps it: PostgreSQL's text refuses the character.
    if note.text.contains('\0') {
        return Err(Problem::bad_request(
            "text holds the character U+0000, which a note may not hold",
        ));
    }
    let effective_at = match note.effective_at.as_deref() {
        Some(t) => parse_time("effective_at", t)?,
        None => Utc::now(),
    };
    let row = plant_row(&state, &plant).await?;
    let revs = state.store.list_revisions(&row).await?;
    if !revs
        .iter()
        .any(|r| r.spec.meters.iter().any(|m| m.tag == tag))
    {
        return Err(Problem::not_found(format!(
            "plant \"{plant}\" has no meter \"{tag}\""
        )));
    }
    let stored = state
        .store
        .add_note(
            &row,
            &tag,
            kind,
            &note.text,
            effective_at,
            Some(caller.0.token_id),
        )
        .await?;
    Ok((StatusCode::CREATED, Json(NoteBody::from(&stored))).into_response())
}
