//! Plant models: `PUT` stores a new immutable revision after the engine's validator has passed
//! it; `GET` answers the revision in effect now; `/model/revisions` lists them all.

use axum::body::Bytes;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Path, Query, State};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::{DateTime, Utc};
use reconcile::{ModelError, ModelSpec, Plant};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

use super::auth::Caller;
use super::problem::{ItemError, Problem};
use super::{body_bytes, check_plant_name, media_type, plant_row, rfc3339, AppState};
use crate::store::{ModelRevision, Role, StoreError};

#[derive(Debug, Deserialize, IntoParams)]
pub struct PutModelQuery {
    /// When the revision takes effect (RFC 3339); now when absent. Periods starting at or
    /// after it are reconciled with it.
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
    #[schema(value_type = Object)]
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
    params(("plant" = String, Path, description = "Plant name: letters, digits, '.', '_' or '-'"), PutModelQuery),
    request_body(description = "The model file", content((String = "application/toml"), (Object = "application/json"))),
    responses(
        (status = 201, description = "Stored as a new revision", body = RevisionSummary),
        (status = 400, description = "Malformed request (plant name, time, not UTF-8)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not admin, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Neither TOML nor JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The model is invalid; `errors` lists every problem", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn put_model(
    State(state): State<AppState>,
    caller: Caller,
    Path(plant): Path<String>,
    query: Result<Query<PutModelQuery>, QueryRejection>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<Response, Problem> {
    check_plant_name(&plant)?;
    caller.require(Role::Admin, &plant)?;
    let Query(query) = query.map_err(super::query_problem)?;
    let effective_from = match query.effective_from.as_deref() {
        None => Utc::now(),
        Some(text) => DateTime::parse_from_rfc3339(text.trim())
            .map(|t| t.with_timezone(&Utc))
            .map_err(|e| {
                Problem::bad_request(format!(
                    "effective_from \"{text}\" is not an RFC 3339 time such as \
                     2026-03-02T05:00:00Z ({e})"
                ))
            })?,
    };
    let bytes = body_bytes(body, &state)?;
    let text = std::str::from_utf8(&bytes).map_err(|e| {
        let at = e.valid_up_to();
        let line = bytes[..at].iter().filter(|&&b| b == b'\n').count() + 1;
        Problem::bad_request(format!(
            "the model is not UTF-8 text (invalid byte at line {line}, offset {at})"
        ))
    })?;
    let parsed = match media_type(&headers).as_deref() {
        Some("application/json") => ModelSpec::from_json(text),
        Some(m) if m.ends_with("+json") => ModelSpec::from_json(text),
        Some("application/toml" | "text/toml" | "text/x-toml") => ModelSpec::from_toml(text),
        other => {
            return Err(Problem::unsupported_media(format!(
                "a model is sent as application/toml or application/json, not {}",
                other.unwrap_or("a body without Content-Type")
            )))
        }
    };
    let spec = parsed.map_err(invalid_model)?;
    if spec.name != plant {
        return Err(Problem::unprocessable(format!(
            "the model is named \"{}\" but was sent to plant \"{plant}\"; a model is stored \
             under its own name, so send it to /api/v1/plants/{}/model or rename it",
            spec.name, spec.name
        ))
        .with_errors(vec![ItemError {
            item: "name".into(),
            message: format!(
                "\"{}\" differs from the plant \"{plant}\" in the path",
                spec.name
            ),
        }]));
    }
    // The engine's validator decides; a model it refuses is never stored.
    Plant::new(spec.clone()).map_err(invalid_model)?;
    let nul = nul_items(&spec);
    if !nul.is_empty() || text.contains('\0') {
        return Err(Problem::unprocessable(
            "the model holds the character U+0000, which no text of a model may hold",
        )
        .with_errors(if nul.is_empty() {
            vec![ItemError {
                item: "body".into(),
                message: "holds U+0000".into(),
            }]
        } else {
            nul
        }));
    }
    let row = match state.store.plant(&plant).await? {
        Some(row) => row,
        None => match state.store.create_plant(&plant).await {
            Ok(row) => row,
            // Another request created it in between: use that one.
            Err(StoreError::PlantExists(_)) => state
                .store
                .plant(&plant)
                .await?
                .ok_or_else(Problem::internal)?,
            Err(e) => return Err(e.into()),
        },
    };
    let revision = state
        .store
        .put_model_revision(&row, &spec, text, effective_from)
        .await?;
    let stored = state
        .store
        .model_revision(&row, revision)
        .await?
        .ok_or_else(Problem::internal)?;
    tracing::info!(plant = %plant, revision, "model revision stored");
    let mut response = (StatusCode::CREATED, Json(summary(&plant, &stored))).into_response();
    if let Ok(location) = HeaderValue::from_str(&format!("/api/v1/plants/{plant}/model")) {
        response.headers_mut().insert(header::LOCATION, location);
    }
    Ok(response)
}

/// Every text of the model (ids, references, names, keys) that holds U+0000, by its place in
/// the model (`meter[3].tag`). The engine has no quarrel with such ids, but no store keeps
/// them: PostgreSQL's text refuses the character.
fn nul_items(spec: &ModelSpec) -> Vec<ItemError> {
    fn walk(value: &serde_json::Value, at: &str, found: &mut Vec<ItemError>) {
        use serde_json::Value;
        let hit = |item: String| ItemError {
            item,
            message: "holds the character U+0000".into(),
        };
        match value {
            Value::String(s) if s.contains('\0') => found.push(hit(at.to_string())),
            Value::Array(items) => {
                for (i, v) in items.iter().enumerate() {
                    walk(v, &format!("{at}[{i}]"), found);
                }
            }
            Value::Object(fields) => {
                for (k, v) in fields {
                    let place = if at.is_empty() {
                        k.clone()
                    } else {
                        format!("{at}.{k}")
                    };
                    if k.contains('\0') {
                        found.push(hit(place.clone()));
                    }
                    walk(v, &place, found);
                }
            }
            _ => {}
        }
    }
    let mut found = Vec::new();
    if let Ok(value) = serde_json::to_value(spec) {
        walk(&value, "", &mut found);
    }
    found
}

fn invalid_model(e: ModelError) -> Problem {
    match e {
        ModelError::Syntax { format, message } => {
            let first = message.lines().next().unwrap_or("").trim().to_string();
            Problem::unprocessable(format!("the model is not valid {format}: {first}")).with_errors(
                vec![ItemError {
                    item: "body".into(),
                    message: message.trim_end().to_string(),
                }],
            )
        }
        ModelError::Invalid(problems) => Problem::unprocessable(format!(
            "the model has {} problem(s); each is listed in errors",
            problems.len()
        ))
        .with_errors(
            problems
                .into_iter()
                .map(|p| ItemError {
                    item: p.item,
                    message: p.message,
                })
                .collect(),
        ),
    }
}

/// The model revision in effect now.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/model",
    tag = "models",
    params(("plant" = String, Path, description = "Plant name")),
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
    caller: Caller,
    Path(plant): Path<String>,
) -> Result<Json<RevisionBody>, Problem> {
    caller.require(Role::Read, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let rev = state
        .store
        .current_model(&row, Utc::now())
        .await?
        .ok_or_else(|| {
            Problem::not_found(format!(
                "plant \"{plant}\" has no model revision in effect now (see /model/revisions)"
            ))
        })?;
    Ok(Json(RevisionBody {
        summary: summary(&plant, &rev),
        model: rev.spec,
        source: rev.source,
    }))
}

/// Every model revision of a plant, oldest first.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/model/revisions",
    tag = "models",
    params(("plant" = String, Path, description = "Plant name")),
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
    caller: Caller,
    Path(plant): Path<String>,
) -> Result<Json<Vec<RevisionSummary>>, Problem> {
    caller.require(Role::Read, &plant)?;
    let row = plant_row(&state, &plant).await?;
    let mut revisions = state.store.list_revisions(&row).await?;
    revisions.sort_by_key(|r| r.revision);
    Ok(Json(revisions.iter().map(|r| summary(&plant, r)).collect()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_nul_in_any_text_of_a_model_is_named_by_its_place() {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../tests/data/ombrask-loop.toml"
        ))
        .expect("the ombrask model");
        let mut spec = ModelSpec::from_toml(&text).expect("parses");
        assert!(nul_items(&spec).is_empty());
        spec.meters[10].tag = "OB2-FI-501\0".into();
        spec.components[0].id = "\0".into();
        let items: Vec<String> = nul_items(&spec).into_iter().map(|e| e.item).collect();
        assert_eq!(items, ["component[0].id", "meter[10].tag"]);
    }
}
