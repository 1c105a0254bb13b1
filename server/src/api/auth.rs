//! Bearer tokens: every `/api/v1` route but the OpenAPI document names the role it needs.
//! No token, or one the store does not know, is 401; a known token of the wrong role or for
//! another plant is 403. The token itself is never logged.

use axum::extract::FromRequestParts;
use axum::http::header::AUTHORIZATION;
use axum::http::request::Parts;

use super::problem::Problem;
use super::AppState;
use crate::store::{Grant, Role};

/// The verified caller of a request.
#[derive(Debug, Clone)]
pub struct Caller(pub Grant);

impl Caller {
    /// Refuse unless the token's role (or admin) may act on `plant`.
    pub fn require(&self, needed: Role, plant: &str) -> Result<(), Problem> {
        if self.0.permits(needed, plant) {
            return Ok(());
        }
        let scope = match &self.0.plant {
            Some(p) if p != plant => format!(" and is limited to plant \"{p}\""),
            _ => String::new(),
        };
        let roles = if needed == Role::Admin {
            "admin".to_string()
        } else {
            format!("{needed} or admin")
        };
        Err(Problem::forbidden(format!(
            "this needs a token of role {roles} for plant \"{plant}\"; the token presented \
             has role {}{scope}",
            self.0.role
        )))
    }
}

impl FromRequestParts<AppState> for Caller {
    type Rejection = Problem;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, Problem> {
        let mut presented = parts.headers.get_all(AUTHORIZATION).iter();
        let (value, another) = (presented.next(), presented.next());
        if another.is_some() {
            return Err(Problem::bad_request(
                "the request has more than one Authorization header; send exactly one",
            ));
        }
        let Some(value) = value else {
            return Err(Problem::unauthorized(
                "this needs an API token: send the header \"Authorization: Bearer TOKEN\" \
                 (make one with `loopbal token create --role ROLE`)",
            ));
        };
        let token = value
            .to_str()
            .ok()
            .and_then(|v| {
                let (scheme, rest) = v.split_once(' ')?;
                scheme.eq_ignore_ascii_case("bearer").then(|| rest.trim())
            })
            .filter(|t| !t.is_empty())
            .ok_or_else(|| {
                Problem::unauthorized(
                    "the Authorization header is not of the form \"Bearer TOKEN\"",
                )
            })?;
        match state.store.verify_token(token).await? {
            Some(grant) => Ok(Caller(grant)),
            None => Err(Problem::unauthorized(
                "the API token is not known or has been revoked",
            )),
        }
    }
}
