//! The HTTP API (docs/api.md): axum handlers that turn requests into store and engine calls
//! and back. Every route is registered through `utoipa_axum::routes!`, so the OpenAPI document
//! served at `/api/v1/openapi.json` is generated from the same list the router serves.

use std::sync::{Arc, OnceLock};
use std::time::{Duration, Instant};

use axum::body::Body;
use axum::extract::{MatchedPath, Request, State};
use axum::http::{header, HeaderValue, StatusCode};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Response};
use axum::Router;
use tower_http::timeout::TimeoutLayer;
use tower_http::trace::TraceLayer;
use utoipa::openapi::security::{HttpAuthScheme, HttpBuilder, SecurityScheme};
use utoipa::{Modify, OpenApi};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use crate::claimant::Claimant;
use crate::service::Service;
use crate::store::Store;

pub mod access;
pub mod auth;
mod balances;
mod figures;
mod meter_value;
mod meters;
mod models;
pub mod pace;
mod periods;
pub mod problem;
mod range;
pub(crate) mod readings;
mod web;
mod what_if;
mod workspace;

use problem::Problem;

/// Limits of the HTTP layer.
#[derive(Debug, Clone, Copy)]
pub struct Limits {
    /// Largest request body accepted (readings batches, models).
    pub max_body_bytes: usize,
    /// A request not answered in this time gets 408.
    pub request_timeout: Duration,
    /// A connection that has not sent a whole request head in this time is closed (so is a
    /// kept-alive connection idle for this long).
    pub header_timeout: Duration,
    /// A request body with no byte for this long gets 408.
    pub body_idle_timeout: Duration,
    /// A request body averaging fewer bytes a second than this, once `body_rate_grace` has
    /// passed, gets 408; 0 turns the rule off.
    pub min_body_rate: u64,
    pub body_rate_grace: Duration,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits {
            max_body_bytes: 64 * 1024 * 1024,
            request_timeout: Duration::from_secs(60),
            header_timeout: Duration::from_secs(10),
            body_idle_timeout: Duration::from_secs(10),
            min_body_rate: 1024,
            body_rate_grace: Duration::from_secs(5),
        }
    }
}

/// What every handler shares: the service (store, metrics, the scheduler's wake-up, claimant,
/// validated models; reached through `Deref`, so `state.store` reads as before) and what only
/// HTTP needs, the limits and the OpenAPI document.
#[derive(Clone)]
pub struct AppState {
    service: Service,
    pub limits: Limits,
    openapi: Arc<OnceLock<String>>,
}

impl AppState {
    pub fn new(store: Store, limits: Limits) -> AppState {
        AppState::with_service(Service::new(store), limits)
    }

    /// The HTTP face of an existing service (the scheduler runs on the same one).
    pub fn with_service(service: Service, limits: Limits) -> AppState {
        AppState {
            service,
            limits,
            openapi: Arc::new(OnceLock::new()),
        }
    }

    /// The same state claiming periods as `claimant`.
    pub fn with_claimant(mut self, claimant: Claimant) -> AppState {
        self.service = self.service.with_claimant(claimant);
        self
    }

    pub fn service(&self) -> &Service {
        &self.service
    }
}

impl std::ops::Deref for AppState {
    type Target = Service;

    fn deref(&self) -> &Service {
        &self.service
    }
}

#[derive(OpenApi)]
#[openapi(
    info(
        title = "loopbal",
        description = "Data reconciliation of plant recycle loops: plant models, historian \
                       readings, reconciled balances and meter health. Errors are RFC 9457 \
                       problem details (application/problem+json). Results inform decisions \
                       on hazardous plant: site procedures, local codes and licensed \
                       engineering judgement take precedence."
    ),
    modifiers(&BearerScheme),
    tags(
        (name = "models", description = "Plant models and their revisions"),
        (name = "readings", description = "Historian readings"),
        (name = "periods", description = "Period runs and their reports"),
        (name = "meters", description = "Meter health and technicians' notes"),
        (name = "results", description = "Loop figures as time series and balances over a range"),
        (name = "service", description = "Liveness, metrics, this description and the web workspace"),
        (name = "workspace", description = "What the web workspace shows besides the results: the token's role, the plants, the loop's drawing"),
    )
)]
struct ApiDoc;

struct BearerScheme;

impl Modify for BearerScheme {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        let components = openapi.components.get_or_insert_with(Default::default);
        components.add_security_scheme(
            "token",
            SecurityScheme::Http(HttpBuilder::new().scheme(HttpAuthScheme::Bearer).build()),
        );
    }
}

/// Links from an answer to the requests it leads to, so a client (or a stateful tester) can
/// follow one answer to the next request: a stored model to its revisions, a meter list to
/// one meter and its notes, a period listing to one period and its re-run.
struct NextRequests;

/// (path, method, status, link name, operation id, parameters as runtime expressions).
type LinkSpec = (
    &'static str,
    &'static str,
    &'static str,
    &'static str,
    &'static str,
    &'static [(&'static str, &'static str)],
);

impl NextRequests {
    /// (path, method, status, link name, operation id, parameters as runtime expressions).
    const LINKS: &'static [LinkSpec] = &[
        (
            "/api/v1/plants/{plant}/model",
            "put",
            "201",
            "the_model",
            "get_model",
            &[("plant", "$request.path.plant")],
        ),
        (
            "/api/v1/plants/{plant}/model",
            "put",
            "201",
            "its_revisions",
            "list_revisions",
            &[("plant", "$request.path.plant")],
        ),
        (
            "/api/v1/plants/{plant}/model",
            "get",
            "200",
            "its_revisions",
            "list_revisions",
            &[("plant", "$request.path.plant")],
        ),
        (
            "/api/v1/plants/{plant}/meters",
            "get",
            "200",
            "first_meter",
            "get_meter",
            &[
                ("plant", "$request.path.plant"),
                ("tag", "$response.body#/meters/0/tag"),
            ],
        ),
        (
            "/api/v1/plants/{plant}/meters",
            "get",
            "200",
            "note_on_first_meter",
            "post_note",
            &[
                ("plant", "$request.path.plant"),
                ("tag", "$response.body#/meters/0/tag"),
            ],
        ),
        (
            "/api/v1/plants/{plant}/periods",
            "get",
            "200",
            "first_period",
            "get_period",
            &[
                ("plant", "$request.path.plant"),
                ("start", "$response.body#/periods/0/start"),
            ],
        ),
        (
            "/api/v1/plants/{plant}/periods",
            "get",
            "200",
            "rerun_first_period",
            "rerun_period",
            &[
                ("plant", "$request.path.plant"),
                ("start", "$response.body#/periods/0/start"),
            ],
        ),
        (
            "/api/v1/plants/{plant}/meters/{tag}",
            "get",
            "200",
            "note_on_it",
            "post_note",
            &[
                ("plant", "$request.path.plant"),
                ("tag", "$request.path.tag"),
            ],
        ),
    ];
}

impl NextRequests {
    /// Add the links to the served document. (Written into the JSON: utoipa 5.5 serialises a
    /// link's `operationId` as `operation_id`, which OpenAPI does not know.)
    fn add_to(doc: &mut serde_json::Value) {
        for (path, method, status, name, operation, parameters) in Self::LINKS {
            let Some(response) = doc
                .pointer_mut(&format!(
                    "/paths/{}/{method}/responses/{status}",
                    path.replace('~', "~0").replace('/', "~1")
                ))
                .and_then(|r| r.as_object_mut())
            else {
                continue;
            };
            let parameters: serde_json::Map<String, serde_json::Value> = parameters
                .iter()
                .map(|(k, v)| ((*k).to_string(), serde_json::Value::from(*v)))
                .collect();
            let links = response
                .entry("links")
                .or_insert_with(|| serde_json::json!({}));
            links[*name] = serde_json::json!({"operationId": operation, "parameters": parameters});
        }
    }
}

/// The router and the OpenAPI document of every route it serves.
pub fn router(state: AppState) -> (Router, utoipa::openapi::OpenApi) {
    let (routes, openapi) = OpenApiRouter::with_openapi(ApiDoc::openapi())
        .routes(routes!(healthz))
        .routes(routes!(metrics))
        .routes(routes!(openapi_json))
        .routes(routes!(models::put_model, models::get_model))
        .routes(routes!(models::list_revisions))
        .routes(routes!(readings::post_readings, readings::get_readings))
        .routes(routes!(periods::list_periods))
        .routes(routes!(periods::get_period))
        .routes(routes!(periods::rerun_period))
        .routes(routes!(meters::list_meters))
        .routes(routes!(meters::get_meter))
        .routes(routes!(meters::post_note))
        .routes(routes!(figures::get_figures))
        .routes(routes!(balances::get_balances))
        .routes(routes!(what_if::post_what_if))
        .routes(routes!(meter_value::get_meter_value))
        .routes(routes!(workspace::get_token))
        .routes(routes!(workspace::list_plants))
        .routes(routes!(workspace::get_flowsheet))
        .routes(routes!(web::index))
        .split_for_parts();
    let mut doc = serde_json::to_value(&openapi).unwrap_or_default();
    NextRequests::add_to(&mut doc);
    let text = serde_json::to_string_pretty(&doc).unwrap_or_default();
    let _ = state.openapi.set(text);
    let limits = state.limits;
    let router = routes
        .route("/app/{*path}", axum::routing::get(web::asset))
        .fallback(not_found)
        // A panic in a handler is a bug of ours: answer 500 as a problem and keep serving.
        .layer(tower_http::catch_panic::CatchPanicLayer::custom(
            |_: Box<dyn std::any::Any + Send + 'static>| {
                tracing::error!("a handler panicked");
                Problem::internal().into_response()
            },
        ))
        .layer(axum::extract::DefaultBodyLimit::max(limits.max_body_bytes))
        .layer(middleware::from_fn_with_state(
            pace::Pace::of(&limits),
            pace::keep_pace,
        ))
        // Innermost first: the timeout's 408 and axum's own plain-text rejections are turned
        // into problem details, then counted and traced with their final status.
        .layer(TimeoutLayer::with_status_code(
            StatusCode::REQUEST_TIMEOUT,
            limits.request_timeout,
        ))
        // Before anything else looks at the request: a body declared too large is refused
        // without reading a byte of it (nor waking a client that waits for 100 Continue).
        .layer(middleware::from_fn_with_state(
            limits,
            refuse_declared_excess,
        ))
        .layer(middleware::from_fn(problem_details))
        .layer(middleware::from_fn(web::security_headers))
        .layer(middleware::from_fn_with_state(state.clone(), observe))
        .layer(
            TraceLayer::new_for_http()
                .make_span_with(|req: &Request<Body>| {
                    let route = req
                        .extensions()
                        .get::<MatchedPath>()
                        .map(|p| p.as_str().to_string())
                        .unwrap_or_else(|| "unmatched".into());
                    // Only the method, the route template and the plant: never headers (the
                    // token) or bodies (reading values).
                    tracing::info_span!(
                        "request",
                        method = %req.method(),
                        route = %route,
                        plant = %plant_of(req.uri().path()),
                        status = tracing::field::Empty,
                        latency_ms = tracing::field::Empty,
                    )
                })
                .on_request(())
                .on_response(|res: &Response, latency: Duration, span: &tracing::Span| {
                    span.record("status", res.status().as_u16());
                    span.record("latency_ms", latency.as_secs_f64() * 1e3);
                    tracing::info!("answered");
                }),
        )
        .with_state(state);
    (router, openapi)
}

/// The plant named in an `/api/v1/plants/{plant}/...` path, or "-".
fn plant_of(path: &str) -> &str {
    path.strip_prefix("/api/v1/plants/")
        .and_then(|rest| rest.split('/').next())
        .filter(|p| !p.is_empty())
        .unwrap_or("-")
}

/// 413 at once for a `Content-Length` over the body limit. The rest of the body is never
/// read, so the connection is closed after the answer.
async fn refuse_declared_excess(
    State(limits): State<Limits>,
    req: Request,
    next: Next,
) -> Response {
    let declared = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.trim().parse::<u64>().ok());
    match declared {
        Some(length) if length > limits.max_body_bytes as u64 => {
            let mut answer = Problem::new(
                StatusCode::PAYLOAD_TOO_LARGE,
                "too-large",
                format!(
                    "the body is declared as {length} bytes (Content-Length), over the limit of \
                     {} bytes; send smaller batches",
                    limits.max_body_bytes
                ),
            )
            .into_response();
            answer
                .headers_mut()
                .insert(header::CONNECTION, HeaderValue::from_static("close"));
            answer
        }
        _ => next.run(req).await,
    }
}

/// Count every answer by route template and status.
async fn observe(State(state): State<AppState>, req: Request, next: Next) -> Response {
    let start = Instant::now();
    let method = req.method().to_string();
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map(|p| p.as_str().to_string())
        .unwrap_or_else(|| "unmatched".into());
    let response = next.run(req).await;
    state
        .metrics
        .request(&method, &route, response.status().as_u16(), start.elapsed());
    response
}

/// Error answers that did not come from our handlers (axum's rejections, 405, 408, 413) are
/// rewritten as problem details, keeping their message as the detail.
async fn problem_details(req: Request, next: Next) -> Response {
    let method = req.method().clone();
    let response = next.run(req).await;
    let status = response.status();
    if !(status.is_client_error() || status.is_server_error()) {
        return response;
    }
    let is_problem = response
        .headers()
        .get(header::CONTENT_TYPE)
        .is_some_and(|v| v.as_bytes() == problem::CONTENT_TYPE.as_bytes());
    if is_problem {
        return response;
    }
    let (parts, body) = response.into_parts();
    let text = axum::body::to_bytes(body, 4096).await.unwrap_or_default();
    let text = String::from_utf8_lossy(&text).trim().to_string();
    let detail = match status {
        StatusCode::METHOD_NOT_ALLOWED => {
            let allowed = parts
                .headers
                .get(header::ALLOW)
                .and_then(|v| v.to_str().ok())
                .filter(|v| !v.is_empty())
                .map(|v| format!("; it takes {v}"))
                .unwrap_or_default();
            format!("this path does not take {method}{allowed}")
        }
        StatusCode::REQUEST_TIMEOUT => "the request took too long and was abandoned".into(),
        StatusCode::PAYLOAD_TOO_LARGE => {
            "the request body is larger than the service accepts".into()
        }
        _ if text.is_empty() => status.canonical_reason().unwrap_or("error").to_string(),
        _ => text,
    };
    let mut answer = Problem::new(status, "http", detail).into_response();
    if let Some(allow) = parts.headers.get(header::ALLOW) {
        answer.headers_mut().insert(header::ALLOW, allow.clone());
    }
    answer
}

async fn not_found() -> Problem {
    Problem::not_found("no such path; the API is described at /api/v1/openapi.json")
}

/// Liveness: the process answers and its database does.
#[utoipa::path(
    get,
    path = "/healthz",
    tag = "service",
    responses(
        (status = 200, description = "The service and its database answer", body = String, content_type = "text/plain"),
        (status = 503, description = "The database does not answer", body = Problem, content_type = "application/problem+json"),
    )
)]
async fn healthz(State(state): State<AppState>) -> Result<&'static str, Problem> {
    state
        .store
        .ping()
        .await
        .map_err(|_| Problem::unavailable("the database does not answer"))?;
    Ok("ok\n")
}

/// Counters and latency histograms in the Prometheus text format.
#[utoipa::path(
    get,
    path = "/metrics",
    tag = "service",
    responses((status = 200, description = "Prometheus text exposition format 0.0.4", body = String, content_type = "text/plain; version=0.0.4"))
)]
async fn metrics(State(state): State<AppState>) -> Response {
    let mut response = state.metrics.render().into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"),
    );
    response
}

/// This document: the OpenAPI 3 description of every route.
#[utoipa::path(
    get,
    path = "/api/v1/openapi.json",
    tag = "service",
    responses((status = 200, description = "OpenAPI 3.1 document", body = Object, content_type = "application/json"))
)]
async fn openapi_json(State(state): State<AppState>) -> Response {
    let text = state.openapi.get().cloned().unwrap_or_default();
    let mut response = text.into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/json"),
    );
    response
}

/// The media type of the body, lower case, without parameters (`text/csv; charset=utf-8` is
/// `text/csv`).
pub(crate) fn media_type(headers: &axum::http::HeaderMap) -> Option<String> {
    let value = headers.get(header::CONTENT_TYPE)?.to_str().ok()?;
    let media = value.split(';').next()?.trim().to_ascii_lowercase();
    (!media.is_empty()).then_some(media)
}

/// The body, or the problem of reading it (over the size limit, cut off).
pub(crate) fn body_bytes(
    body: Result<axum::body::Bytes, axum::extract::rejection::BytesRejection>,
    state: &AppState,
) -> Result<axum::body::Bytes, Problem> {
    body.map_err(|e| {
        if e.status() == StatusCode::PAYLOAD_TOO_LARGE {
            too_large(state.limits.max_body_bytes)
        } else {
            Problem::new(
                e.status(),
                "unreadable-body",
                format!("the body could not be read: {e}"),
            )
        }
    })
}

/// A body over the size limit.
pub(crate) fn too_large(limit: usize) -> Problem {
    Problem::new(
        StatusCode::PAYLOAD_TOO_LARGE,
        "too-large",
        format!("the body is over the limit of {limit} bytes; send smaller batches"),
    )
}

/// A JSON body, or the problem of a body that is not one: 413 over the size limit, 415 without
/// a JSON content type, else 400 with `shape` (what the body should be) and what was wrong.
pub(crate) fn json_body<T>(
    body: Result<axum::Json<T>, axum::extract::rejection::JsonRejection>,
    limits: &Limits,
    shape: &str,
) -> Result<T, Problem> {
    body.map(|axum::Json(t)| t).map_err(|e| match e.status() {
        StatusCode::PAYLOAD_TOO_LARGE => too_large(limits.max_body_bytes),
        StatusCode::UNSUPPORTED_MEDIA_TYPE => Problem::unsupported_media(format!(
            "{shape}; send it with \"Content-Type: application/json\""
        )),
        _ => Problem::bad_request(format!("{shape}: {}", e.body_text())),
    })
}

/// Plant names are path segments and file-system-safe: 1 to 64 of letters, digits, `.`, `_`
/// and `-`, not starting with a dot.
pub fn check_plant_name(name: &str) -> Result<(), Problem> {
    let ok = (1..=64).contains(&name.len())
        && !name.starts_with('.')
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-'));
    if ok {
        Ok(())
    } else {
        Err(Problem::bad_request(format!(
            "plant name \"{name}\" must be 1 to 64 letters, digits, '.', '_' or '-', not \
             starting with '.'"
        )))
    }
}

#[cfg(test)]
mod tests {
    use super::plant_of;

    #[test]
    fn plant_is_read_from_the_path() {
        assert_eq!(plant_of("/api/v1/plants/ombrask/readings"), "ombrask");
        assert_eq!(plant_of("/api/v1/plants/"), "-");
        assert_eq!(plant_of("/healthz"), "-");
    }
}
