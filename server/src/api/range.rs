//! The `from`/`to` query of the range routes (periods, figures, balances) and its grid.

use serde::Deserialize;
use utoipa::IntoParams;

use super::problem::Problem;
use super::AppState;
use crate::results::range::parse_time;
use crate::results::PeriodRange;
use crate::store::PlantRow;

#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct RangeQuery {
    /// Start of the range, RFC 3339 (the period containing it is the first).
    #[param(format = DateTime)]
    pub from: String,
    /// End of the range, RFC 3339, exclusive.
    #[param(format = DateTime)]
    pub to: String,
}

/// The periods of the plant's grid over `from..to`, both RFC 3339.
pub async fn periods(
    state: &AppState,
    plant: &PlantRow,
    from: &str,
    to: &str,
) -> Result<PeriodRange, Problem> {
    let from = parse_time("from", from)?;
    let to = parse_time("to", to)?;
    Ok(PeriodRange::of_plant(state, plant, from, to).await?)
}
