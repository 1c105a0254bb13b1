//! Who may act on which plant, checked before anything else of a request is looked at: the
//! token's role first (so a caller without the right role learns nothing of the plant, its
//! name's syntax or the request's parameters), then the plant itself.
//!
//! A handler names what it needs by its argument's type: `OnPlant<Read>` is a caller allowed
//! to read the stored plant of the path, `PlantName<Admin>` an administrator naming a plant
//! that may not exist yet (the first model creates it).

use std::marker::PhantomData;

use axum::extract::{FromRequestParts, MatchedPath};
use axum::http::request::Parts;

use super::auth::Caller;
use super::problem::Problem;
use super::AppState;
use crate::store::{PlantRow, Role};

/// A role a route needs, as a type.
pub trait Needs: Send + Sync {
    const ROLE: Role;
}

/// Read results: models, periods, reports, figures, balances, meters.
pub struct Read;
/// Post readings.
pub struct Ingest;
/// Record technicians' notes.
pub struct Maintain;
/// Store models, run periods again.
pub struct Admin;

impl Needs for Read {
    const ROLE: Role = Role::Read;
}
impl Needs for Ingest {
    const ROLE: Role = Role::Ingest;
}
impl Needs for Maintain {
    const ROLE: Role = Role::Maintain;
}
impl Needs for Admin {
    const ROLE: Role = Role::Admin;
}

/// A caller whose token permits `N` on the plant of the path, and that plant's stored row.
pub struct OnPlant<N> {
    pub caller: Caller,
    pub plant: PlantRow,
    needs: PhantomData<N>,
}

/// A caller whose token permits `N` on the plant the path names, and the name, checked for
/// syntax but not looked up.
pub struct PlantName<N> {
    pub caller: Caller,
    pub name: String,
    needs: PhantomData<N>,
}

/// The `{plant}` segment of the path as sent, percent-decoded: `Ok` when it is UTF-8 text,
/// else `Err` with the text made readable (U+FFFD for what is not). Taken from the raw path by
/// the route's template rather than from axum's path parameters, which refuse the whole path
/// when any segment is not UTF-8: that refusal would come before the role check.
fn path_plant(parts: &Parts) -> Result<Result<String, String>, Problem> {
    let template = parts
        .extensions
        .get::<MatchedPath>()
        .map(|p| p.as_str())
        .unwrap_or_default();
    let at = template.split('/').position(|segment| segment == "{plant}");
    let raw = at
        .and_then(|i| parts.uri.path().split('/').nth(i))
        .ok_or_else(|| Problem::not_found("this path names no plant"))?;
    // As axum decodes path parameters: `%HH` is its byte, any other `%` stays as it is.
    let bytes: Vec<u8> = percent_encoding::percent_decode_str(raw).collect();
    Ok(String::from_utf8(bytes).map_err(|e| String::from_utf8_lossy(e.as_bytes()).into_owned()))
}

impl<N: Needs> FromRequestParts<AppState> for PlantName<N> {
    type Rejection = Problem;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, Problem> {
        let caller = Caller::from_request_parts(parts, state).await?;
        let name = path_plant(parts)?;
        // The text shown for a name that is not UTF-8 is no plant's name, so a token limited
        // to one plant is refused on it like on any other plant.
        caller.require(N::ROLE, name.as_ref().unwrap_or_else(|shown| shown))?;
        let name = name.map_err(|shown| {
            Problem::bad_request(format!(
                "plant name \"{shown}\" is not UTF-8 text once percent-decoded"
            ))
        })?;
        super::check_plant_name(&name)?;
        Ok(PlantName {
            caller,
            name,
            needs: PhantomData,
        })
    }
}

impl<N: Needs> FromRequestParts<AppState> for OnPlant<N> {
    type Rejection = Problem;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, Problem> {
        let caller = Caller::from_request_parts(parts, state).await?;
        let name = path_plant(parts)?;
        caller.require(N::ROLE, name.as_ref().unwrap_or_else(|shown| shown))?;
        let exact = name.is_ok();
        let name = name.unwrap_or_else(|shown| shown);
        // A name no plant can have is not looked up: it may hold what a store cannot even
        // compare, such as U+0000, which PostgreSQL's text refuses with an error.
        let not_found = || Problem::not_found(format!("no plant named \"{name}\""));
        if !exact || super::check_plant_name(&name).is_err() {
            return Err(not_found());
        }
        let plant = state.store.plant(&name).await?.ok_or_else(not_found)?;
        Ok(OnPlant {
            caller,
            plant,
            needs: PhantomData,
        })
    }
}
