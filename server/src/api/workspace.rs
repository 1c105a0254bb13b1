//! What the web workspace needs besides the results: who the token is, the plants it may
//! read with their latest state, and the loop's drawing (computed in [`crate::flowsheet`]).

use std::collections::BTreeMap;

use axum::extract::State;
use axum::Json;
use chrono::Utc;
use serde::Serialize;
use utoipa::ToSchema;

use super::access::{OnPlant, Read};
use super::auth::Caller;
use super::problem::Problem;
use super::AppState;
use crate::flowsheet::{self, Flowsheet};
use crate::results::meters;
use crate::results::rfc3339;
use crate::store::{PlantRow, Role};

/// The token presented: its role, its plant and what it may do.
#[derive(Debug, Serialize, ToSchema)]
pub struct TokenInfo {
    /// `ingest`, `read`, `maintain` or `admin`.
    pub role: String,
    /// The one plant it may touch; null for every plant.
    pub plant: Option<String>,
    pub may: May,
}

/// What each role's routes would let this token do (on its plant, when it has one).
#[derive(Debug, Serialize, ToSchema)]
pub struct May {
    pub read: bool,
    pub ingest: bool,
    pub maintain: bool,
    pub admin: bool,
}

/// Who the token is: the workspace shows the role and hides what it may not do.
#[utoipa::path(
    get,
    path = "/api/v1/token",
    tag = "workspace",
    responses(
        (status = 200, description = "The token's role, plant and what it may do", body = TokenInfo),
        (status = 400, description = "More than one Authorization header", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_token(caller: Caller) -> Json<TokenInfo> {
    let grant = &caller.0;
    let may = |role: Role| grant.role == Role::Admin || grant.role == role;
    Json(TokenInfo {
        role: grant.role.to_string(),
        plant: grant.plant.clone(),
        may: May {
            read: may(Role::Read),
            ingest: may(Role::Ingest),
            maintain: may(Role::Maintain),
            admin: may(Role::Admin),
        },
    })
}

/// The plants a token may read.
#[derive(Debug, Serialize, ToSchema)]
pub struct PlantList {
    pub plants: Vec<PlantSummary>,
}

/// One plant at a glance.
#[derive(Debug, Serialize, ToSchema)]
pub struct PlantSummary {
    pub name: String,
    /// The model revision in effect now; null without a model.
    pub revision: Option<i64>,
    pub model_name: Option<String>,
    pub period_seconds: Option<i64>,
    /// The latest period whose run gave values (`solved` or `unobservable`).
    pub last_period: Option<LastPeriod>,
    /// The current model's meters by health state (`suspect`, `watch`, `ok`, ...).
    pub meters: BTreeMap<String, usize>,
}

/// A plant's latest reconciled period.
#[derive(Debug, Serialize, ToSchema)]
pub struct LastPeriod {
    pub start: String,
    pub status: String,
    #[schema(value_type = Option<Object>)]
    pub global_test: Option<serde_json::Value>,
}

/// Every plant the token may read, with its latest reconciled period, that period's global
/// test and its meters counted by health state.
#[utoipa::path(
    get,
    path = "/api/v1/plants",
    tag = "workspace",
    responses(
        (status = 200, description = "The plants the token may read, by name", body = PlantList),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn list_plants(
    State(state): State<AppState>,
    caller: Caller,
) -> Result<Json<PlantList>, Problem> {
    let grant = &caller.0;
    if grant.role != Role::Admin && grant.role != Role::Read {
        return Err(Problem::forbidden(format!(
            "listing plants needs a token of role read or admin; the token presented has role {}",
            grant.role
        )));
    }
    let mut plants = Vec::new();
    for plant in state.store.plants().await? {
        if grant.permits(Role::Read, &plant.name) {
            plants.push(summary(&state, &plant).await?);
        }
    }
    Ok(Json(PlantList { plants }))
}

async fn summary(state: &AppState, plant: &PlantRow) -> Result<PlantSummary, Problem> {
    let now = Utc::now();
    let Ok((model, revision)) = state.model_at(plant, now).await else {
        return Ok(PlantSummary {
            name: plant.name.clone(),
            revision: None,
            model_name: None,
            period_seconds: None,
            last_period: None,
            meters: BTreeMap::new(),
        });
    };
    let last_period = state
        .store
        .latest_usable_run(plant)
        .await?
        .map(|run| LastPeriod {
            start: rfc3339(run.run.period_start),
            status: run.run.status.as_str().to_string(),
            global_test: run
                .run
                .report
                .get("global_test")
                .filter(|t| !t.is_null())
                .cloned(),
        });
    let counts = meters::state_counts(state, plant, now).await?;
    Ok(PlantSummary {
        name: plant.name.clone(),
        revision: Some(revision),
        model_name: Some(model.spec.name.clone()),
        period_seconds: Some(model.period_seconds),
        last_period,
        meters: counts,
    })
}

/// The loop drawn from the model in effect now: units, feeds and products placed in layers
/// along the flow, each stream's path (recycles as loops back below), each meter on its
/// stream. The same model always gives the same drawing.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/flowsheet",
    tag = "workspace",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
    responses(
        (status = 200, description = "The drawing's coordinates, in SVG user units (y down)", body = Flowsheet),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn get_flowsheet(
    State(state): State<AppState>,
    access: OnPlant<Read>,
) -> Result<Json<Flowsheet>, Problem> {
    let (model, revision) = state.model_at(&access.plant, Utc::now()).await?;
    Ok(Json(flowsheet::layout(&model, revision)))
}
