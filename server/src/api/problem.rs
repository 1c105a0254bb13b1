//! Errors as RFC 9457 problem details: `application/problem+json` with a machine-readable
//! `type`, a short `title`, the HTTP `status` and a human sentence in `detail`. Where one
//! request has several things wrong (a model, a batch of readings), `errors` lists each with
//! the item it names.
//!
//! Whatever the input, an answer is small: every problem answer passes [`Problem::bounded`],
//! which cuts the detail and each listed error to a few hundred characters (escaped, with the
//! original length said) and lists only the first errors, counting the rest.

use axum::http::{header, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use utoipa::ToSchema;

use axum::extract::rejection::QueryRejection;
use reconcile::text::{clip, clip_lines, quote};
use reconcile::{ModelError, ModelProblem};

use crate::ingest::BatchError;
use crate::results::ResultsError;
use crate::revisions::admit::Refusal;
use crate::revisions::RevisionError;
use crate::schedule::RunError;
use crate::store::StoreError;

pub const CONTENT_TYPE: &str = "application/problem+json";

/// Most characters of `detail`.
const DETAIL_CHARS: usize = 2_000;
/// Most characters of an error's `item`.
const ITEM_CHARS: usize = 300;
/// Most characters of each line of an error's `message`, and most lines.
const MESSAGE_LINE_CHARS: usize = 300;
const MESSAGE_LINES: usize = 12;
/// Most errors listed one by one.
pub const MAX_LISTED_ERRORS: usize = 100;
/// Bytes of JSON the listed errors may take. With the detail's at most 8 KB (2,000 characters
/// of up to 4 bytes) and the rest, every problem answer stays under 64 KiB.
const ERRORS_BYTES: usize = 40 * 1024;

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
    /// Each problem of the item sent, when there are several (model problems, for example):
    /// the first 100 at most, as many as fit in 40 KiB.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub errors: Vec<ItemError>,
    /// How many problems `errors` leaves out (absent when it lists them all).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub errors_omitted: Option<usize>,
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
            errors_omitted: None,
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

    /// The answer as sent, whatever the size of what it quotes: the detail and each error
    /// escaped and cut (reconcile::text::clip), the first errors listed while they fit in
    /// [`ERRORS_BYTES`] (the first always), the others counted in `errors_omitted` and said
    /// in the detail.
    pub fn bounded(mut self) -> Problem {
        self.detail = clip(&self.detail, DETAIL_CHARS);
        let total = self.errors.len() + self.errors_omitted.unwrap_or(0);
        let mut listed = Vec::new();
        let mut bytes = 0;
        for e in std::mem::take(&mut self.errors)
            .into_iter()
            .take(MAX_LISTED_ERRORS)
        {
            let e = ItemError {
                item: clip(&e.item, ITEM_CHARS),
                message: clip_lines(&e.message, MESSAGE_LINE_CHARS, MESSAGE_LINES),
            };
            // The separating comma included.
            let size = serde_json::to_vec(&e).map_or(usize::MAX, |v| v.len() + 1);
            if !listed.is_empty() && bytes + size > ERRORS_BYTES {
                break;
            }
            bytes += size;
            listed.push(e);
        }
        if listed.len() < total {
            self.detail += &format!(
                " (errors lists the first {} of {total}; errors_omitted counts the others)",
                listed.len()
            );
            self.errors_omitted = Some(total - listed.len());
        }
        self.errors = listed;
        self
    }
}

impl IntoResponse for Problem {
    fn into_response(self) -> Response {
        let this = self.bounded();
        let status = StatusCode::from_u16(this.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
        let body = serde_json::to_vec(&this).unwrap_or_default();
        let mut response = (status, body).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(CONTENT_TYPE));
        if this.challenge {
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
            // Not the caller's fault, nor a failure of ours: the run needs more time than the
            // service gives one (`--run-timeout`). Nothing was stored.
            e @ RunError::TimedOut { .. } => Problem::new(
                StatusCode::SERVICE_UNAVAILABLE,
                "run-timed-out",
                format!("{e}; nothing was stored"),
            ),
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
                "the model has {} problem(s), listed in errors",
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
                "the model is named {} but was sent to plant {}; a model is stored under its \
                 own name, so send it to the plant of its name or rename it",
                quote(&model),
                quote(&plant)
            ))
            .with_errors(vec![ItemError {
                item: "name".into(),
                message: format!(
                    "{} differs from the plant {} in the path",
                    quote(&model),
                    quote(&plant)
                ),
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_problem_quoting_megabytes_is_answered_in_kilobytes() {
        let huge = "\u{202e}=1+2\n".repeat(1_000_000);
        let mut errors = vec![ItemError {
            item: format!("meter 0 {huge}"),
            message: huge.clone(),
        }];
        errors.extend((1..10_000).map(|i| ItemError {
            item: format!("meter {i}"),
            message: "\u{200b}".repeat(1_000),
        }));
        let problem = Problem::unprocessable(format!("bad {huge}")).with_errors(errors);
        let response = problem.bounded();
        let body = serde_json::to_vec(&response).unwrap();
        assert!(body.len() < 64 * 1024, "{} bytes", body.len());
        let listed = response.errors.len();
        assert!((1..=MAX_LISTED_ERRORS).contains(&listed), "{listed}");
        assert_eq!(response.errors_omitted, Some(10_000 - listed));
        assert!(response.errors[0].item.starts_with("meter 0 "));
        assert!(
            response.detail.ends_with(&format!(
                "(errors lists the first {listed} of 10000; errors_omitted counts the others)"
            )),
            "{}",
            response.detail
        );
        let text = String::from_utf8(body).unwrap();
        assert!(!text.contains('\u{202e}'), "the override is escaped");
        assert!(text.contains("characters)"), "the cut is said");
    }

    #[test]
    fn a_small_problem_is_left_as_it_is() {
        let problem = Problem::unprocessable("the model has 1 problem(s), listed in errors")
            .with_errors(vec![ItemError {
                item: "meter \"T-1\"".into(),
                message: "is on unknown stream \"nowhere\"".into(),
            }]);
        let bounded = problem.clone().bounded();
        assert_eq!(bounded.detail, problem.detail);
        assert_eq!(bounded.errors[0].item, problem.errors[0].item);
        assert_eq!(bounded.errors[0].message, problem.errors[0].message);
        assert_eq!(bounded.errors_omitted, None);
    }
}
