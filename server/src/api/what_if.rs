//! `POST /what-if`: the loop's new steady state after a change, from the reconciled base case
//! of a stored period or range (computed in [`crate::results::what_if`]).

use std::collections::BTreeMap;

use axum::extract::rejection::JsonRejection;
use axum::extract::State;
use axum::Json;
use reconcile::whatif::{Economics, InletLimit, ReactionHold, Request, Sweep, WhatIf};
use serde::Deserialize;
use utoipa::ToSchema;

use super::access::{OnPlant, Read};
use super::problem::Problem;
use super::AppState;
use crate::results::range::parse_time;
use crate::results::what_if;

/// What to change, and from which base case.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct WhatIfBody {
    /// Start of the base period (RFC 3339); its reconciled state is the base case.
    #[schema(format = DateTime)]
    pub period: String,
    /// With it, the base is the periods from `period` to this time (exclusive), combined by
    /// their covariance.
    #[schema(format = DateTime, nullable = false)]
    pub period_to: Option<String>,
    /// Settings by name: `split:STREAM`, `feed:STREAM` (kmol/h),
    /// `conversion:REACTION`, `inlet_fraction:UNIT:COMPONENT`.
    #[serde(default)]
    pub set: BTreeMap<String, f64>,
    pub sweep: Option<SweepBody>,
    /// `split:STREAM`: the splitter outlet that moves to reach a target or the optimum
    /// (default: the one splitter outlet that leaves the plant).
    pub free: Option<String>,
    /// What each reaction is held at: `conversion` (of its key reactant, the default) or
    /// `extent`.
    #[schema(nullable = false)]
    pub hold: Option<HoldWord>,
    /// Values for the purge's economic optimum.
    pub economics: Option<EconomicsBody>,
}

/// What each reaction is held at while the settings move.
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum HoldWord {
    /// The single-pass conversion of the reaction's key reactant.
    Conversion,
    /// The extent, kmol/h.
    Extent,
}

/// One setting over evenly spaced values, ends included.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SweepBody {
    pub name: String,
    pub from: f64,
    pub to: f64,
    pub points: usize,
}

/// The values of the purge trade-off, per kmol, in one currency.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct EconomicsBody {
    /// Price per kmol of each product component made.
    #[serde(default)]
    pub product_price: BTreeMap<String, f64>,
    /// Value per kmol of each reactant lost in the purge.
    #[serde(default)]
    pub loss_value: BTreeMap<String, f64>,
    /// Cost per kmol of recycle (a compression proxy).
    #[serde(default)]
    pub recycle_cost: f64,
    /// An upper limit on a mole fraction at a reactor inlet: `{"unit", "component", "max"}`.
    pub max_inlet_fraction: Option<InletLimitBody>,
    /// The purge split searched, `[lo, hi]` (default `[0.001, 0.5]`).
    pub purge_range: Option<[f64; 2]>,
}

#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct InletLimitBody {
    pub unit: String,
    pub component: String,
    pub max: f64,
}

impl WhatIfBody {
    fn request(self) -> Result<Request, Problem> {
        let hold = match self.hold {
            None | Some(HoldWord::Conversion) => ReactionHold::Conversion,
            Some(HoldWord::Extent) => ReactionHold::Extent,
        };
        let sweep = self
            .sweep
            .map(|s| Sweep::new(&s.name, s.from, s.to, s.points))
            .transpose()
            .map_err(|e| Problem::bad_request(e.to_string()))?;
        let economics = self.economics.map(|e| Economics {
            product_price: e.product_price,
            loss_value: e.loss_value,
            recycle_cost: e.recycle_cost,
            inlet_limit: e.max_inlet_fraction.map(|l| InletLimit {
                unit: l.unit,
                component: l.component,
                max: l.max,
            }),
            range: e.purge_range.unwrap_or([0.001, 0.5]),
        });
        Ok(Request {
            set: self.set.into_iter().collect(),
            sweep,
            free: self.free,
            hold,
            economics,
        })
    }
}

/// The loop's new steady state after a change (or along a sweep, or at the purge's economic
/// optimum), from the reconciled base case of a stored period or range, every value with σ
/// carried from the base case.
#[utoipa::path(
    post,
    path = "/api/v1/plants/{plant}/what-if",
    tag = "results",
    params(("plant" = String, Path, description = "Plant name: 1 to 64 letters, digits, '.', '_' or '-', not starting with '.'", pattern = r"^[A-Za-z0-9_-][A-Za-z0-9._-]{0,63}$")),
    request_body(content = WhatIfBody, description = "The base period and the change", content_type = "application/json"),
    responses(
        (status = 200, description = "The base case, what was held, one point per setting (or sweep value), the optimum when values were given; see docs/what-if.md", body = WhatIf),
        (status = 400, description = "Not JSON of the expected shape, a time not RFC 3339, or a setting, sweep or value at fault (named)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid token", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The token may not read this plant", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such plant, or no readings in the base period", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The plant has no model", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly: no byte for the body idle timeout, or below the minimum body rate", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not sent as application/json", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The base case was not reconciled, leaves unobservable what the what-if needs, or cannot reach a target", body = Problem, content_type = "application/problem+json"),
    ),
    security(("token" = []))
)]
pub async fn post_what_if(
    State(state): State<AppState>,
    access: OnPlant<Read>,
    body: Result<Json<WhatIfBody>, JsonRejection>,
) -> Result<Json<WhatIf>, Problem> {
    let body = super::json_body(
        body,
        &state.limits,
        "a what-if is JSON {\"period\": \"RFC 3339\", \"set\": {NAME: VALUE}, \
         \"sweep\": {\"name\", \"from\", \"to\", \"points\"}}",
    )?;
    let start = parse_time("period", &body.period)?;
    let to = body
        .period_to
        .as_deref()
        .map(|t| parse_time("period_to", t))
        .transpose()?;
    let request = body.request()?;
    let plant = &access.plant;
    Ok(Json(
        what_if::what_if(&state, plant, start, to, request).await?,
    ))
}
