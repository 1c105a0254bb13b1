//! Meter health for the instrument technicians, from the stored meter records of every run:
//! every meter ranked by evidence, one meter's history with its CUSUM, and the technicians'
//! notes (a recalibration or replacement starts a fresh history).

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;
use serde::Serialize;
use utoipa::ToSchema;

pub use super::notes::{add_note, NewNote, NoteKindWord};
use super::out_of_service::{self, Loss, Losses};
use super::{rfc3339, ResultsError};
use crate::health::{self, Health, MeterPeriod, Status, CUSUM_K, CUSUM_SUSPECT, CUSUM_WATCH};
use crate::out_of_service::{covering, Interval};
use crate::revisions::{in_effect, RevisionError};
use crate::service::Service;
use crate::store::{MeterNote, NoteKind, PlantRow};

/// A note as answered.
#[derive(Debug, Serialize, ToSchema)]
pub struct NoteBody {
    pub id: i64,
    pub tag: String,
    /// checked, recalibrated, replaced, out_of_service or back_in_service.
    pub kind: String,
    pub text: String,
    pub effective_at: String,
    pub created_at: String,
    /// The error the technician measured before recalibrating, in the meter's uom (positive:
    /// read high); only on a recalibrated note that gave one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub as_found: Option<f64>,
    /// loopbal's pooled bias estimate of the meter just before a recalibrated note (as the
    /// meter list showed it then) and its σ, in the meter's uom, to compare with `as_found`;
    /// only in a meter's own notes, and absent without a testable period before the note.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub estimated_bias: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub estimated_bias_sigma: Option<f64>,
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
            as_found: n.as_found,
            estimated_bias: None,
            estimated_bias_sigma: None,
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
    /// The history this assessment covers starts here: the last recalibration or replacement
    /// when that bounds the record, else the record's first period (the record reaches back
    /// at most the health window from the plant's latest period).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub history_since: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_note: Option<NoteBody>,
    /// When a technician's note took the meter out of service (RFC 3339); null while it is in
    /// service.
    pub out_of_service_since: Option<String>,
    /// That note's text.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub out_of_service_note: Option<String>,
    /// While out of service: the loop figures whose σ grows by more than 1 % without the
    /// meter, or that it leaves undetermined (`sigma_if_lost` null).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub loses: Option<Vec<Loss>>,
    /// The flows, extents and split fractions the meter set cannot determine without it.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unobservable_if_lost: Option<Vec<String>>,
    /// The period whose estimate `loses` is judged on: the last before the interval in which
    /// the meter was in service with a value.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub loses_judged_on: Option<String>,
}

impl MeterHealth {
    /// Mark the meter out of service in `interval`, with what the loop loses meanwhile.
    fn out_of_service(&mut self, interval: &Interval, losses: Losses) {
        self.health.status = Status::OutOfService;
        self.health.reason = format!(
            "{}; its readings are kept and shown but not used; {}",
            interval.reason(),
            out_of_service::sentence(&losses)
        );
        self.out_of_service_since = Some(rfc3339(interval.since));
        self.out_of_service_note = Some(interval.text.clone());
        self.loses = Some(losses.figures);
        self.unobservable_if_lost = Some(losses.unobservable);
        self.loses_judged_on = losses.from_period.map(rfc3339);
    }
}

#[derive(Debug, Serialize, ToSchema)]
pub struct MeterList {
    pub plant: String,
    /// The statistic and its thresholds, for the reader.
    pub method: String,
    /// Worst first: suspect, frozen, out of range, watch, out of service, missing, untestable,
    /// ok; by statistic within a status.
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
pub(crate) fn resets(notes: &[MeterNote], tag: &str) -> Option<DateTime<Utc>> {
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

/// The current model's meters counted by health state at `now`, as the meter list ranks them
/// (`suspect`, `watch`, `out_of_service`, ...), without what the list adds to an
/// out-of-service meter (what the loop loses without it, which reconciles a period again).
pub async fn state_counts(
    service: &Service,
    plant: &PlantRow,
    now: DateTime<Utc>,
) -> Result<std::collections::BTreeMap<String, usize>, ResultsError> {
    let spec = spec_at(service, plant, now).await?;
    let notes = service.store.notes(plant, None).await?;
    let tags: Vec<String> = spec.meters.iter().map(|m| m.tag.clone()).collect();
    let assessed = assessed(service, plant, tags, &notes).await?;
    let intervals = crate::out_of_service::intervals(&notes);
    let mut counts = std::collections::BTreeMap::new();
    for (meter, health) in spec.meters.iter().zip(&assessed.healths) {
        let status = match covering(&intervals, &meter.tag, now) {
            Some(_) => Status::OutOfService,
            None => health.status,
        };
        let word = serde_json::to_value(status)
            .ok()
            .and_then(|w| w.as_str().map(str::to_string))
            .unwrap_or_default();
        *counts.entry(word).or_insert(0) += 1;
    }
    Ok(counts)
}

/// Bring the memo of every plant without a period waiting to run up to date with its
/// stored runs and notes (nothing is assessed for a plant whose memo is current). Failures
/// are logged: the next request assesses again.
pub async fn refresh_all(service: &Service) {
    let plants = match service.store.plants().await {
        Ok(plants) => plants,
        Err(e) => return tracing::warn!(error = %e, "meter health refresh: listing plants"),
    };
    for plant in plants {
        match service.store.has_dirty_periods(&plant).await {
            Ok(false) => {}
            Ok(true) => continue,
            Err(e) => return tracing::warn!(error = %e, "meter health refresh"),
        }
        let refreshed = async {
            let spec = spec_at(service, &plant, Utc::now()).await?;
            let notes = service.store.notes(&plant, None).await?;
            let tags = spec.meters.iter().map(|m| m.tag.clone()).collect();
            assessed(service, &plant, tags, &notes).await
        };
        match refreshed.await {
            Ok(_) | Err(ResultsError::Revision(RevisionError::NoModel { .. })) => {}
            Err(e) => tracing::warn!(plant = %plant.name, error = %e, "meter health refresh"),
        }
    }
}

/// Where a meter's record starts: its last recalibration or replacement (`reset`), or the
/// health window's start counted back from the plant's `latest` period, whichever is later; so
/// stray periods long before the plant's other data never reach into the evidence.
pub fn record_start(
    reset: Option<DateTime<Utc>>,
    latest: Option<DateTime<Utc>>,
    window: chrono::TimeDelta,
) -> DateTime<Utc> {
    let window_start = latest
        .and_then(|l| l.checked_sub_signed(window))
        .unwrap_or(DateTime::<Utc>::MIN_UTC);
    reset.map_or(window_start, |r| r.max(window_start))
}

/// Every meter's health over its record (see [`record_start`]), after attribution among
/// correlated suspects, where each record starts and its first period: as kept in the
/// service's memo when nothing it depends on has changed since (see [`health::Memo`]), else
/// from each meter's running state in the store (see [`crate::store::Store::health_states`])
/// and kept. The key is read before the states, so a run that lands meanwhile only makes the
/// kept assessment look stale, never hides itself.
pub(crate) async fn assessed(
    service: &Service,
    plant: &PlantRow,
    tags: Vec<String>,
    notes: &[MeterNote],
) -> Result<std::sync::Arc<health::Assessed>, ResultsError> {
    let key = health::MemoKey {
        tags,
        runs: service.store.run_tally(plant).await?,
        notes: (notes.len(), notes.iter().map(|n| n.id).max().unwrap_or(0)),
    };
    if let Some(kept) = service.health.get(plant.id, &key) {
        return Ok(kept);
    }
    let latest = service.store.latest_period(plant).await?;
    let window = service.health_window;
    let wanted: Vec<(String, DateTime<Utc>)> = key
        .tags
        .iter()
        .map(|tag| {
            (
                tag.clone(),
                record_start(resets(notes, tag), latest, window),
            )
        })
        .collect();
    let states = service.store.health_states(plant, &wanted, window).await?;
    let healths: Vec<Health> = states.iter().map(health::Running::health).collect();
    let records = suspects_records(service, plant, &key.tags, &healths).await?;
    let value = std::sync::Arc::new(health::Assessed {
        healths: attributed(&key.tags, healths, &records),
        since: wanted.into_iter().map(|(_, since)| since).collect(),
        first: states.iter().map(|s| s.first).collect(),
    });
    service
        .health
        .put(plant.id, key, std::sync::Arc::clone(&value));
    Ok(value)
}

/// What attribution among suspects reads: with two suspects or more, their records from the
/// earliest start of their evidence on (within the health window: the evidence is within each
/// record); with fewer, nothing.
async fn suspects_records(
    service: &Service,
    plant: &PlantRow,
    tags: &[String],
    healths: &[Health],
) -> Result<Vec<(String, MeterPeriod)>, ResultsError> {
    let suspects: Vec<usize> = (0..healths.len())
        .filter(|&i| healths[i].status == Status::Suspect)
        .collect();
    let mut records = Vec::new();
    if suspects.len() < 2 {
        return Ok(records);
    }
    let from = suspects
        .iter()
        .filter_map(|&i| healths[i].evidence_since)
        .min()
        .unwrap_or(DateTime::<Utc>::MIN_UTC);
    for &i in &suspects {
        records.extend(
            service
                .store
                .meter_periods(plant, Some(&tags[i]), from, DateTime::<Utc>::MAX_UTC)
                .await?,
        );
    }
    Ok(records)
}

/// `healths` after attribution among correlated suspects ([`health::attribute`]), from
/// `records` (the suspects' records over their evidence).
pub(crate) fn attributed(
    tags: &[String],
    healths: Vec<Health>,
    records: &[(String, MeterPeriod)],
) -> Vec<Health> {
    let evidence = |i: usize, j: usize| {
        let since = [&healths[i], &healths[j]]
            .iter()
            .filter_map(|h| h.evidence_since)
            .min();
        let z = |tag: &str| common_evidence(records, tag, since);
        (z(&tags[i]), z(&tags[j]))
    };
    let mut attributed = healths.clone();
    health::attribute(
        tags,
        &mut attributed,
        &|i, j| correlation(records, &tags[i], &tags[j]),
        &evidence,
    );
    attributed
}

/// Every meter of the model in effect at `now`, worst first: suspect, frozen, out of range,
/// watch, out of service, missing, untestable, ok; by statistic within a status. A meter
/// suspect together with another it cannot be told apart from is named with it (see
/// [`health::attribute`]); a meter a note took out of service at `now` is `out_of_service`,
/// with what the loop loses meanwhile (see [`out_of_service::losses`]).
pub async fn ranking(
    service: &Service,
    plant: &PlantRow,
    now: DateTime<Utc>,
) -> Result<MeterList, ResultsError> {
    Ok(rank(service, plant, now).await?.0)
}

/// [`ranking`], and where each meter's record starts, by tag.
async fn rank(
    service: &Service,
    plant: &PlantRow,
    now: DateTime<Utc>,
) -> Result<(MeterList, Vec<(String, DateTime<Utc>)>), ResultsError> {
    let spec = spec_at(service, plant, now).await?;
    let notes = service.store.notes(plant, None).await?;
    let tags: Vec<String> = spec.meters.iter().map(|m| m.tag.clone()).collect();
    let assessed = assessed(service, plant, tags, &notes).await?;
    let mut meters: Vec<MeterHealth> = spec
        .meters
        .iter()
        .zip(assessed.healths.iter().zip(&assessed.first))
        .zip(&assessed.since)
        .map(|((m, (health, first)), start)| {
            // The reset, when it is what bounds the record; else its first period.
            let since = resets(&notes, &m.tag).filter(|r| r == start);
            let health = health.clone();
            MeterHealth {
                tag: m.tag.clone(),
                stream: m.stream.clone(),
                quantity: m.quantity.as_str().to_string(),
                component: m.component.clone(),
                uom: m.uom.clone(),
                health,
                history_since: since.or(*first).map(rfc3339),
                last_note: notes
                    .iter()
                    .rev()
                    .find(|n| n.tag == m.tag)
                    .map(NoteBody::from),
                out_of_service_since: None,
                out_of_service_note: None,
                loses: None,
                unobservable_if_lost: None,
                loses_judged_on: None,
            }
        })
        .collect();
    let intervals = crate::out_of_service::intervals(&notes);
    for meter in meters.iter_mut() {
        if let Some(interval) = covering(&intervals, &meter.tag, now) {
            let losses = out_of_service::losses(service, plant, &intervals, interval).await?;
            meter.out_of_service(interval, losses);
        }
    }
    meters.sort_by(|a, b| {
        a.health
            .status
            .rank()
            .cmp(&b.health.status.rank())
            .then(b.health.statistic.total_cmp(&a.health.statistic))
    });
    let starts = spec
        .meters
        .iter()
        .map(|m| m.tag.clone())
        .zip(assessed.since.iter().copied())
        .collect();
    let list = MeterList {
        plant: plant.name.clone(),
        method: METHOD.to_string(),
        meters,
    };
    Ok((list, starts))
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
    /// The record's periods (since the last recalibration or replacement, at most the health
    /// window), oldest first.
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
    let (list, starts) = rank(service, plant, now).await?;
    let count = list.meters.len();
    let Some(meter) = list.meters.into_iter().find(|m| m.tag == tag) else {
        return Err(ResultsError::NotFound(format!(
            "plant \"{}\" has no meter {} in its current model ({count} meters)",
            plant.name,
            reconcile::text::quote(tag)
        )));
    };
    let notes = service.store.notes(plant, Some(tag)).await?;
    let since = starts
        .iter()
        .find(|(t, _)| t == tag)
        .map_or(DateTime::<Utc>::MIN_UTC, |(_, since)| *since);
    // The record the health is of: from its last reset or the window's start, an index range
    // of the meter's rows.
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
        notes: note_bodies(service, plant, tag, &notes).await?,
    })
}

/// A meter's notes as answered, each recalibrated one with loopbal's own bias estimate just
/// before it beside the technician's `as_found`.
async fn note_bodies(
    service: &Service,
    plant: &PlantRow,
    tag: &str,
    notes: &[MeterNote],
) -> Result<Vec<NoteBody>, ResultsError> {
    let mut bodies = Vec::with_capacity(notes.len());
    for n in notes {
        let mut body = NoteBody::from(n);
        if n.kind == NoteKind::Recalibrated {
            let bias = bias_before(service, plant, tag, notes, n.effective_at).await?;
            body.estimated_bias = bias.map(|b| b.0);
            body.estimated_bias_sigma = bias.map(|b| b.1);
        }
        bodies.push(body);
    }
    Ok(bodies)
}

/// The pooled bias ± σ the meter list showed for the meter just before `at`: its health over
/// the record it had then, from the reset before `at` or the health window's start counted
/// back from `at`, whichever is later, to `at`.
async fn bias_before(
    service: &Service,
    plant: &PlantRow,
    tag: &str,
    notes: &[MeterNote],
    at: DateTime<Utc>,
) -> Result<Option<(f64, f64)>, ResultsError> {
    let reset = notes
        .iter()
        .filter(|n| n.kind.resets() && n.effective_at < at)
        .map(|n| n.effective_at)
        .max();
    let from = record_start(reset, Some(at), service.health_window);
    let before: Vec<MeterPeriod> = service
        .store
        .meter_periods(plant, Some(tag), from, at)
        .await?
        .into_iter()
        .map(|(_, p)| p)
        .collect();
    let health = health::assess(&before);
    Ok(health.bias.zip(health.bias_sigma))
}
