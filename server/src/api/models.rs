//! Plant models: `PUT` stores a new immutable revision after the engine's validator has passed
//! it; `GET` answers the revision in effect now; `/model/revisions` lists them all.

use axum::body::Bytes;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Query, State};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::Utc;
use reconcile::ModelSpec;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

use super::access::{Admin, OnPlant, PlantName, Read};
use super::problem::Problem;
use super::{body_bytes, media_type, AppState};
use crate::results::range::parse_time;
use crate::results::rfc3339;
use crate::revisions::admit::{self, ModelFormat};
use crate::store::ModelRevision;

#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct PutModelQuery {
    /// When the revision takes effect (RFC 3339); now when absent. Periods starting at or
    /// after it are reconciled with it.
    #[param(format = DateTime)]
    effective_from: Option<String>,
}

/// A stored revision, without its model.
#[derive(Debug, Serialize, ToSchema)]
pub struct RevisionSummary {
    pub plant: String,
    pub revision: i64,
    /// RFC 3339, UTC.
    pub effective_from: String,
    /// RFC 3339, UTC.
    pub created_at: String,
    pub streams: usize,
    pub meters: usize,
    pub units: usize,
}

/// A revision with its model.
#[derive(Debug, Serialize, ToSchema)]
pub struct RevisionBody {
    #[serde(flatten)]
    pub summary: RevisionSummary,
    /// The model as JSON (the structure of the model file).
    pub model: ModelSpec,
    /// The model exactly as it was sent (TOML or JSON, with its comments).
    pub source: String,
}

fn summary(plant: &str, rev: &ModelRevision) -> RevisionSummary {
    RevisionSummary {
        plant: plant.to_string(),
        revision: rev.revision,
        effective_from: rfc3339(rev.effective_from),
        created_at: rfc3339(rev.created_at),
        streams: rev.spec.streams.len(),
        meters: rev.spec.meters.len(),
        units: rev.spec.units.len(),
    }
}

/// Store a new model revision.
///
/// The body is the model file (docs/model.md) as TOML (`application/toml`) or JSON
/// (`application/json`). It is validated in full: an invalid model gets 422 with every problem
/// listed by the item it names, and nothing is stored. The plant is created by its first model.
#[utoipa::path(
    put,
    path = "/api/v1/plants/{plant}/model",
    tag = "models",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), PutModelQuery),
    request_body(description = "The model file: TOML, or the same as JSON", content((String = "application/toml"), (reconcile::ModelSpec = "application/json"))),
    responses(
        (status = 201, description = "Stored as a new revision", body = RevisionSummary),
        (status = 400, description = "Malformed request (plant name, time, not UTF-8)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not admin, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly: no byte for the body idle timeout, or below the minimum body rate", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Neither TOML nor JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The model is invalid; `errors` lists every problem", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn put_model(
    State(state): State<AppState>,
    access: PlantName<Admin>,
    query: Result<Query<PutModelQuery>, QueryRejection>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<Response, Problem> {
    // What the body is comes before what the query or the body hold: a body of the wrong
    // kind is refused without being read.
    let format = match media_type(&headers).as_deref() {
        Some("application/json") => ModelFormat::Json,
        Some(m) if m.ends_with("+json") => ModelFormat::Json,
        Some("application/toml" | "text/toml" | "text/x-toml") => ModelFormat::Toml,
        other => {
            return Err(Problem::unsupported_media(format!(
                "a model is sent as application/toml or application/json, not {}",
                other.unwrap_or("a body without Content-Type")
            )))
        }
    };
    let Query(query) = query?;
    let effective_from = match query.effective_from.as_deref() {
        None => Utc::now(),
        Some(text) => parse_time("effective_from", text)?,
    };
    let bytes = body_bytes(body, &state)?;
    let text = std::str::from_utf8(&bytes).map_err(|e| {
        let at = e.valid_up_to();
        let line = bytes[..at].iter().filter(|&&b| b == b'\n').count() + 1;
        Problem::bad_request(format!(
            "the model is not UTF-8 text (invalid byte at line {line}, offset {at})"
        ))
    })?;
    let plant = &access.name;
    let stored = admit::admit(&state.store, plant, text, format, effective_from).await?;
    let mut response = (StatusCode::CREATED, Json(summary(plant, &stored))).into_response();
    if let Ok(location) = HeaderValue::from_str(&format!("/api/v1/plants/{plant}/model")) {
        response.headers_mut().insert(header::LOCATION, location);
    }
    Ok(response)
}

/// The model revision in effect now.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/model",
    tag = "models",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
    responses(
        (status = 200, description = "The revision in effect now, with its model", body = RevisionBody),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant, or no revision in effect yet", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_model(
    State(state): State<AppState>,
    access: OnPlant<Read>,
) -> Result<Json<RevisionBody>, Problem> {
    let plant = &access.plant;
    let rev = state
        .store
        .current_model(plant, Utc::now())
        .await?
        .ok_or_else(|| {
            Problem::not_found(format!(
                "plant \"{}\" has no model revision in effect now (see /model/revisions)",
                plant.name
            ))
        })?;
    Ok(Json(RevisionBody {
        summary: summary(&plant.name, &rev),
        model: rev.spec,
        source: rev.source,
    }))
}

/// Every model revision of a plant, oldest first.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/model/revisions",
    tag = "models",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
    responses(
        (status = 200, description = "The revisions, oldest first", body = [RevisionSummary]),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn list_revisions(
    State(state): State<AppState>,
    access: OnPlant<Read>,
) -> Result<Json<Vec<RevisionSummary>>, Problem> {
    let plant = &access.plant;
    let mut revisions = state.store.list_revisions(plant).await?;
    revisions.sort_by_key(|r| r.revision);
    Ok(Json(
        revisions.iter().map(|r| summary(&plant.name, r)).collect(),
    ))
}
