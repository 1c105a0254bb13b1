//! `POST /api/v1/plants/{plant}/readings`: a historian's batch, CSV or JSON.

use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{Path, State};
use axum::http::HeaderMap;
use axum::Json;

use super::auth::Caller;
use super::problem::Problem;
use super::{body_bytes, media_type, AppState};
use crate::ingest::{self, BatchError, Catalogue, IngestAnswer};
use crate::readings::Format;
use crate::store::Role;

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
    params(("plant" = String, Path, description = "Plant name")),
    request_body(description = "The batch", content((String = "text/csv"), (Object = "application/json"))),
    responses(
        (status = 200, description = "The batch was read; counts and a reason per refused line", body = IngestAnswer),
        (status = 400, description = "The body has no readable structure (no CSV header, not JSON); nothing stored", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token's role is not ingest, or it is for another plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model yet, so no tag is known", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit (64 MiB by default)", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Neither CSV nor JSON", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn post_readings(
    State(state): State<AppState>,
    caller: Caller,
    Path(plant): Path<String>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<Json<IngestAnswer>, Problem> {
    caller.require(Role::Ingest, &plant)?;
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
    let row = state
        .store
        .plant(&plant)
        .await?
        .ok_or_else(|| Problem::not_found(format!("no plant named \"{plant}\"")))?;
    let catalogue = Catalogue::load(&state.store, &row).await?.ok_or_else(|| {
        Problem::new(
            axum::http::StatusCode::CONFLICT,
            "no-model",
            format!("plant \"{plant}\" has no model yet, so no tag is known: PUT its model first"),
        )
    })?;
    let bytes = body_bytes(body, &state)?;
    // Checking a big batch is CPU work: keep it off the threads that serve requests.
    let cat = catalogue.clone();
    let checked = tokio::task::spawn_blocking(move || ingest::check_batch(&bytes, format, &cat))
        .await
        .map_err(|e| {
            tracing::error!(error = %e, "checking a batch failed");
            Problem::internal()
        })?
        .map_err(batch_problem)?;
    let answer = ingest::store_batch(&state.store, &row, &catalogue, checked)
        .await
        .map_err(batch_problem)?;
    state.metrics.readings(
        answer.accepted,
        answer.replaced,
        answer.unchanged,
        answer.rejected,
    );
    tracing::info!(
        accepted = answer.accepted,
        replaced = answer.replaced,
        unchanged = answer.unchanged,
        rejected = answer.rejected,
        "batch stored"
    );
    Ok(Json(answer))
}

fn batch_problem(e: BatchError) -> Problem {
    match e {
        BatchError::Unreadable(msg) => {
            Problem::bad_request(format!("the batch cannot be read: {msg}; nothing was stored"))
        }
        BatchError::Store(e) => e.into(),
    }
}
