//! Meter health for the instrument technicians: every meter ranked by evidence, one meter's
//! history, and the technicians' notes (built in [`crate::results::meters`]).

use axum::extract::rejection::JsonRejection;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::Json;
use chrono::Utc;

use super::access::{Maintain, OnPlant, Read};
use super::problem::Problem;
use super::AppState;
use crate::results::meters::{self, MeterDetail, MeterList, NewNote, NoteBody};

/// Every meter's health, worst first.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/meters",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
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
    access: OnPlant<Read>,
) -> Result<Json<MeterList>, Problem> {
    Ok(Json(
        meters::ranking(&state, &access.plant, Utc::now()).await?,
    ))
}

/// One meter's health and its history of measured, reconciled and normalised adjustment.
#[utoipa::path(
    get,
    path = "/api/v1/plants/{plant}/meters/{tag}",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), ("tag" = String, Path, description = "Meter tag")),
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
    access: OnPlant<Read>,
    Path((_, tag)): Path<(String, String)>,
) -> Result<Json<MeterDetail>, Problem> {
    Ok(Json(
        meters::detail(&state, &access.plant, &tag, Utc::now()).await?,
    ))
}

/// Record a technician's note on a meter; out_of_service and back_in_service notes make the
/// periods already run from their time on run again.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/meters/{tag}/notes",
    tag = "meters",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$"), ("tag" = String, Path, description = "Meter tag")),
    request_body(content = NewNote, description = "The note", content_type = "application/json"),
    responses(
        (status = 201, description = "Recorded", body = NoteBody),
        (status = 400, description = "Not JSON of the expected shape, unknown kind, as_found on a kind other than recalibrated or not finite, bad time, text over 4000 characters or holding U+0000, back_in_service for a meter not out of service then, out_of_service overlapping an earlier interval; nothing is stored", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not maintain, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant or meter", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly: no byte for the body idle timeout, or below the minimum body rate", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not sent as application/json", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn post_note(
    State(state): State<AppState>,
    access: OnPlant<Maintain>,
    Path((_, tag)): Path<(String, String)>,
    body: Result<Json<NewNote>, JsonRejection>,
) -> Result<(StatusCode, Json<NoteBody>), Problem> {
    let note = super::json_body(
        body,
        &state.limits,
        "a note is JSON {\"kind\": \"checked|recalibrated|replaced|out_of_service|\
         back_in_service\", \"text\": \"...\", \"effective_at\": \"RFC 3339\", \
         \"as_found\": number (recalibrated only)}",
    )?;
    let token = Some(access.caller.0.token_id);
    let stored = meters::add_note(&state, &access.plant, &tag, &note, token, Utc::now()).await?;
    Ok((StatusCode::CREATED, Json(stored)))
}
