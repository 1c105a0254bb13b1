//! Errors as RFC 9457 problem details: `application/problem+json` with a machine-readable
//! `type`, a short `title`, the HTTP `status` and a human sentence in `detail`. Where one
//! request has several things wrong (a model, a batch of readings), `errors` lists each with
//! the item it names.

use axum::http::{header, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use utoipa::ToSchema;

use axum::extract::rejection::QueryRejection;
use reconcile::{ModelError, ModelProblem};

use crate::ingest::BatchError;
use crate::results::ResultsError;
use crate::revisions::admit::Refusal;
use crate::revisions::RevisionError;
use crate::schedule::RunError;
use crate::store::StoreError;

pub const CONTENT_TYPE: &str = "application/problem+json";

/// An RFC 9457 problem details object.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct Problem {
    /// A URI naming the kind of problem (`urn:loopbal:problem:...`); stable for scripts.
    #[serde(rename = "type")]
    pub kind: String,
    /// A short summary of the kind of problem.
    pub title: String,
    /// The HTTP status code.
    pub status: u16,
    /// What went wrong on this request, as a sentence.
    pub detail: String,
    /// Each problem of the item sent, when there are several (model problems, for example).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub errors: Vec<ItemError>,
    /// Sent with 401: how to authenticate.
    #[serde(skip)]
    pub challenge: bool,
}

/// One problem of an item in the request body.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ItemError {
    /// The item at fault: a model id, a field, a line.
    pub item: String,
    pub message: String,
}

impl Problem {
    pub fn new(status: StatusCode, kind: &str, detail: impl Into<String>) -> Problem {
        Problem {
            kind: format!("urn:loopbal:problem:{kind}"),
            title: status.canonical_reason().unwrap_or("Error").to_string(),
            status: status.as_u16(),
            detail: detail.into(),
            errors: Vec::new(),
            challenge: false,
        }
    }

    pub fn with_errors(mut self, errors: Vec<ItemError>) -> Problem {
        self.errors = errors;
        self
    }

    pub fn bad_request(detail: impl Into<String>) -> Problem {
        Problem::new(StatusCode::BAD_REQUEST, "bad-request", detail)
    }

    pub fn not_found(detail: impl Into<String>) -> Problem {
        Problem::new(StatusCode::NOT_FOUND, "not-found", detail)
    }

    pub fn unauthorized(detail: impl Into<String>) -> Problem {
        let mut p = Problem::new(StatusCode::UNAUTHORIZED, "unauthorized", detail);
        p.challenge = true;
        p
    }

    pub fn forbidden(detail: impl Into<String>) -> Problem {
        Problem::new(StatusCode::FORBIDDEN, "forbidden", detail)
    }

    pub fn unsupported_media(detail: impl Into<String>) -> Problem {
        Problem::new(
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
            "unsupported-media-type",
            detail,
        )
    }

    pub fn unprocessable(detail: impl Into<String>) -> Problem {
        Problem::new(StatusCode::UNPROCESSABLE_ENTITY, "invalid-content", detail)
    }

    /// A failure of ours, not the client's: the detail stays generic (the log has the cause).
    pub fn internal() -> Problem {
        Problem::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "internal",
            "the service could not complete the request; it has been logged",
        )
    }

    /// The store is busy or unreachable: the client may retry.
    pub fn unavailable(detail: impl Into<String>) -> Problem {
        Problem::new(StatusCode::SERVICE_UNAVAILABLE, "unavailable", detail)
    }
}

impl IntoResponse for Problem {
    fn into_response(self) -> Response {
        let status = StatusCode::from_u16(self.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
        let body = serde_json::to_vec(&self).unwrap_or_default();
        let mut response = (status, body).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(CONTENT_TYPE));
        if self.challenge {
            headers.insert(
                header::WWW_AUTHENTICATE,
                HeaderValue::from_static("Bearer realm=\"loopbal\""),
            );
        }
        response
    }
}

impl From<ModelProblem> for ItemError {
    fn from(p: ModelProblem) -> ItemError {
        ItemError {
            item: p.item,
            message: p.message,
        }
    }
}

impl From<StoreError> for Problem {
    fn from(e: StoreError) -> Problem {
        match e {
            StoreError::NoPlant(name) => Problem::not_found(format!("no plant named \"{name}\"")),
            StoreError::Database(sqlx::Error::PoolTimedOut) => {
                tracing::warn!(error = %e, "store busy");
                Problem::unavailable("the database is busy; retry shortly")
            }
            other => {
                tracing::error!(error = %other, "store failure");
                Problem::internal()
            }
        }
    }
}

impl From<QueryRejection> for Problem {
    /// A query string that does not fit its parameters (checked after the token, so a caller
    /// without the right role learns nothing about them).
    fn from(e: QueryRejection) -> Problem {
        Problem::bad_request(format!(
            "the query string is not as expected: {}",
            e.body_text()
        ))
    }
}

impl From<RevisionError> for Problem {
    fn from(e: RevisionError) -> Problem {
        match e {
            RevisionError::NoModel { plant, .. } => Problem::new(
                StatusCode::CONFLICT,
                "no-model",
                format!("plant \"{plant}\" has no model yet: PUT its model first"),
            ),
            RevisionError::Store(e) => e.into(),
            e @ RevisionError::Invalid { .. } => {
                tracing::error!(error = %e, "stored revision no longer validates");
                Problem::internal()
            }
        }
    }
}

impl From<RunError> for Problem {
    fn from(e: RunError) -> Problem {
        match e {
            RunError::Revision(e) => e.into(),
            RunError::Store(e) => e.into(),
            e @ (RunError::Engine { .. } | RunError::Task(_)) => {
                tracing::error!(error = %e, "period run failure");
                Problem::internal()
            }
        }
    }
}

impl From<ResultsError> for Problem {
    fn from(e: ResultsError) -> Problem {
        match e {
            ResultsError::Refused(detail) => Problem::bad_request(detail),
            e @ ResultsError::TooManyPeriods { .. } => Problem::unprocessable(e.to_string()),
            ResultsError::NotFound(detail) => Problem::not_found(detail),
            ResultsError::NoSuchFigure(detail) => {
                Problem::new(StatusCode::NOT_FOUND, "no-such-figure", detail)
            }
            ResultsError::Revision(e) => e.into(),
            ResultsError::Store(e) => e.into(),
            ResultsError::WhatIf(e) => {
                use reconcile::whatif::WhatIfError as W;
                match e {
                    // Good input the base case cannot carry.
                    W::BaseNotSolved(_)
                    | W::Unobservable(_)
                    | W::Unreachable { .. }
                    | W::Model(_) => Problem::new(
                        StatusCode::UNPROCESSABLE_ENTITY,
                        "base-case-cannot-carry",
                        e.to_string(),
                    ),
                    e => Problem::bad_request(e.to_string()),
                }
            }
            ResultsError::MeterValue(e) => match e {
                reconcile::meter_value::RequestError::TooMany { .. } => {
                    Problem::unprocessable(e.to_string())
                }
                e => Problem::bad_request(e.to_string()),
            },
            ResultsError::NotReconciled(detail) => Problem::new(
                StatusCode::UNPROCESSABLE_ENTITY,
                "period-not-reconciled",
                detail,
            ),
            e @ (ResultsError::Corrupt { .. } | ResultsError::Task(_)) => {
                tracing::error!(error = %e, "result failure");
                Problem::internal()
            }
        }
    }
}

impl From<BatchError> for Problem {
    fn from(e: BatchError) -> Problem {
        match e {
            BatchError::Unreadable(msg) => Problem::bad_request(format!(
                "the batch cannot be read: {msg}; nothing was stored"
            )),
            BatchError::Store(e) => e.into(),
            BatchError::Interrupted(e) => {
                tracing::error!(error = %e, "checking a batch failed");
                Problem::internal()
            }
        }
    }
}

impl From<ModelError> for Problem {
    /// A model the engine refuses: every problem listed by the item it names.
    fn from(e: ModelError) -> Problem {
        match e {
            ModelError::Syntax { format, message } => {
                let first = message.lines().next().unwrap_or("").trim().to_string();
                Problem::unprocessable(format!("the model is not valid {format}: {first}"))
                    .with_errors(vec![ItemError {
                        item: "body".into(),
                        message: message.trim_end().to_string(),
                    }])
            }
            ModelError::Invalid(problems) => Problem::unprocessable(format!(
                "the model has {} problem(s); each is listed in errors",
                problems.len()
            ))
            .with_errors(problems.into_iter().map(ItemError::from).collect()),
        }
    }
}

impl From<Refusal> for Problem {
    fn from(e: Refusal) -> Problem {
        match e {
            Refusal::Model(e) => e.into(),
            Refusal::Misnamed { model, plant } => Problem::unprocessable(format!(
                "the model is named \"{model}\" but was sent to plant \"{plant}\"; a model is \
                 stored under its own name, so send it to /api/v1/plants/{model}/model or \
                 rename it"
            ))
            .with_errors(vec![ItemError {
                item: "name".into(),
                message: format!("\"{model}\" differs from the plant \"{plant}\" in the path"),
            }]),
            Refusal::HoldsNul(places) => Problem::unprocessable(
                "the model holds the character U+0000, which no text of a model may hold",
            )
            .with_errors(if places.is_empty() {
                vec![ItemError {
                    item: "body".into(),
                    message: "holds U+0000".into(),
                }]
            } else {
                places.into_iter().map(ItemError::from).collect()
            }),
            Refusal::Store(e) => e.into(),
        }
    }
}
