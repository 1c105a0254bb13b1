//! `POST /api/v1/plants/{plant}/readings`: a historian's batch, CSV or JSON.

use axum::body::Bytes;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Query, State};
use axum::http::HeaderMap;
use axum::Json;
use chrono::{DateTime, SecondsFormat, Utc};
use reconcile::Quality;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

use super::access::{Ingest, OnPlant, Read};
use super::problem::Problem;
use super::{body_bytes, media_type, AppState};
use crate::ingest::IngestAnswer;
use crate::readings::Format;
use crate::results::range::parse_time;

/// A batch of readings as JSON: the shape the document describes. The service reads the body
/// line by line rather than through this type, so that a bad reading is refused on its own
/// and named, and the good ones are stored.
#[derive(Debug, Deserialize, ToSchema)]
#[allow(dead_code)]
pub struct ReadingsUpload {
    pub readings: Vec<ReadingUpload>,
}

/// One reading of a JSON batch.
#[derive(Debug, Deserialize, ToSchema)]
#[allow(dead_code)]
pub struct ReadingUpload {
    /// The tag of a meter of the plant's model (of any revision).
    pub tag: String,
    /// RFC 3339 with an offset, years 0000 to 9998 in UTC.
    #[schema(format = DateTime)]
    pub time: String,
    /// In the meter's own unit; finite.
    pub value: f64,
    /// Absent means good.
    #[schema(nullable = false)]
    pub quality: Option<QualityWord>,
}

/// How far the historian trusts a reading: bad readings are stored, never used.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
#[allow(dead_code)]
pub enum QualityWord {
    Good,
    Uncertain,
    Bad,
}

/// Post a batch of readings.
///
/// CSV (`text/csv`, header `tag,time,value[,quality]`) or JSON (`application/json`,
/// `{"readings": [{"tag", "time", "value", "quality"}]}`). Every line is checked: known tag,
/// RFC 3339 time, finite value, quality one of good, uncertain, bad. Good lines are stored in
/// one transaction, idempotently by (tag, instant): a resend changes nothing, a changed value
/// replaces the stored one and marks its period for a new run. A second line for the same tag
/// and instant within one batch is refused (the first is kept). Readings outside the meter's
/// range or of bad quality are stored and flagged. The answer accounts for every line.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/readings",
    tag = "readings",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
    request_body(description = "The batch: CSV with a header naming tag, time, value and optionally quality, or JSON", content((String = "text/csv"), (ReadingsUpload = "application/json"))),
    responses(
        (status = 200, description = "The batch was read; counts and a reason per refused line", body = IngestAnswer),
        (status = 400, description = "The body has no readable structure (no CSV header, not JSON); nothing stored", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not ingest, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model yet, so no tag is known", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly: no byte for the body idle timeout, or below the minimum body rate", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit (64 MiB by default)", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Neither CSV nor JSON", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn post_readings(
    State(state): State<AppState>,
    access: OnPlant<Ingest>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<Json<IngestAnswer>, Problem> {
    let format = match media_type(&headers).as_deref() {
        Some("text/csv") => Format::Csv,
        Some("application/json") => Format::Json,
        other => {
            return Err(Problem::unsupported_media(format!(
                "readings are sent as text/csv or application/json, not {}",
                other.unwrap_or("a body without Content-Type")
            )))
        }
    };
    let plant = &access.plant;
    let catalogue = state.catalogue(plant).await?.ok_or_else(|| {
        Problem::new(
            axum::http::StatusCode::CONFLICT,
            "no-model",
            format!(
                "plant \"{}\" has no model yet, so no tag is known: PUT its model first",
                plant.name
            ),
        )
    })?;
    let bytes = body_bytes(body, &state)?;
    let answer = state.ingest(plant, &catalogue, bytes, format).await?;
    Ok(Json(answer))
}

/// Most readings one query answers; a longer range is refused with advice to narrow it.
const MAX_READINGS_PER_QUERY: usize = 200_000;

#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ReadingsQuery {
    /// Start of the range, RFC 3339, inclusive.
    #[param(format = DateTime)]
    from: String,
    /// End of the range, RFC 3339, exclusive.
    #[param(format = DateTime)]
    to: String,
    /// Only this tag.
    tag: Option<String>,
}

/// A reading as stored.
#[derive(Debug, Serialize, ToSchema)]
pub struct StoredReadingBody {
    pub tag: String,
    /// RFC 3339, UTC.
    pub time: String,
    pub value: f64,
    /// good, uncertain or bad.
    pub quality: String,
    /// Outside the meter's instrument range when it was stored, or a value no meter of its
    /// kind could give (docs/readings.md, the plausibility screen).
    pub out_of_range: bool,
    /// When the service stored this value (RFC 3339, UTC).
    pub received_at: String,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct ReadingsBody {
    pub plant: String,
    pub from: String,
    pub to: String,
    pub readings: Vec<StoredReadingBody>,
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::AutoSi, true)
}

/// The stored readings of a time range, by time then tag: what the historian sent, with the
/// flags the service set (out of range) and when each arrived.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/readings",
    tag = "readings",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), ReadingsQuery),
    responses(
        (status = 200, description = "The readings of the range", body = ReadingsBody),
        (status = 400, description = "A time is not RFC 3339, or from is not before to", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "More than 200,000 readings in the range", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_readings(
    State(state): State<AppState>,
    access: OnPlant<Read>,
    query: Result<Query<ReadingsQuery>, QueryRejection>,
) -> Result<Json<ReadingsBody>, Problem> {
    let Query(query) = query?;
    let from = parse_time("from", &query.from)?;
    let to = parse_time("to", &query.to)?;
    if from >= to {
        return Err(Problem::bad_request(format!(
            "from ({}) must be before to ({})",
            query.from, query.to
        )));
    }
    let stored = state.store.readings_in(&access.plant, from, to).await?;
    let readings: Vec<StoredReadingBody> = stored
        .into_iter()
        .filter(|s| query.tag.as_deref().is_none_or(|t| t == s.reading.tag))
        .map(|s| StoredReadingBody {
            quality: match s.reading.quality {
                Quality::Good => "good",
                Quality::Uncertain => "uncertain",
                Quality::Bad => "bad",
            }
            .to_string(),
            tag: s.reading.tag,
            time: rfc3339(s.reading.time),
            value: s.reading.value,
            out_of_range: s.out_of_range,
            received_at: rfc3339(s.received_at),
        })
        .collect();
    if readings.len() > MAX_READINGS_PER_QUERY {
        return Err(Problem::unprocessable(format!(
            "the range holds {} readings, more than the {MAX_READINGS_PER_QUERY} one answer \
             carries; ask for a shorter range or one tag",
            readings.len()
        )));
    }
    Ok(Json(ReadingsBody {
        plant: access.plant.name.clone(),
        from: rfc3339(from),
        to: rfc3339(to),
        readings,
    }))
}
