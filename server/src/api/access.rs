//! Who may act on which plant, checked before anything else of a request is looked at: the
//! token's role first (so a caller without the right role learns nothing of the plant, its
//! name's syntax or the request's parameters), then the plant itself.
//!
//! A handler names what it needs by its argument's type: `OnPlant<Read>` is a caller allowed
//! to read the stored plant of the path, `PlantName<Admin>` an administrator naming a plant
//! that may not exist yet (the first model creates it).

use std::marker::PhantomData;

use axum::extract::{FromRequestParts, RawPathParams};
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

/// The `{plant}` segment of the path, percent-decoded.
async fn path_plant(parts: &mut Parts, state: &AppState) -> Result<String, Problem> {
    let params = RawPathParams::from_request_parts(parts, state)
        .await
        .map_err(|e| Problem::bad_request(format!("the path cannot be read: {e}")))?;
    params
        .iter()
        .find(|(key, _)| *key == "plant")
        .map(|(_, value)| value.to_string())
        .ok_or_else(|| Problem::not_found("this path names no plant"))
}

impl<N: Needs> FromRequestParts<AppState> for PlantName<N> {
    type Rejection = Problem;

    async fn from_request_parts(parts: &mut Parts, state: &AppState) -> Result<Self, Problem> {
        let caller = Caller::from_request_parts(parts, state).await?;
        let name = path_plant(parts, state).await?;
        caller.require(N::ROLE, &name)?;
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
        let name = path_plant(parts, state).await?;
        caller.require(N::ROLE, &name)?;
        // A name no plant can have is not looked up: it may hold what a store cannot even
        // compare, such as U+0000, which PostgreSQL's text refuses with an error.
        let not_found = || Problem::not_found(format!("no plant named \"{name}\""));
        if super::check_plant_name(&name).is_err() {
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
