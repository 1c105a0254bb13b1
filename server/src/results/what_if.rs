//! The what-if of a stored period, or of a range of them: the stored readings reconciled again
//! (rerun.rs: as the period run does, without the meters out of service then), then the
//! engine's what-if from that base case (docs/what-if.md).

use chrono::{DateTime, Utc};
use reconcile::whatif::{self, Request, WhatIf};
use reconcile::Analysis;

use super::rerun::stored_periods;
use super::ResultsError;
use crate::period_run;
use crate::service::Service;
use crate::store::PlantRow;

/// Most periods one what-if combines (a month of hourly periods): each is reconciled again.
pub const MAX_BASE_PERIODS: usize = 744;

/// The what-if of `request` from the period starting at `start`, or from the periods of
/// `start..to` combined by their covariance when `to` is given. Every period of the base
/// must be of one model revision.
pub async fn what_if(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
    to: Option<DateTime<Utc>>,
    request: Request,
) -> Result<WhatIf, ResultsError> {
    let (model, periods) = stored_periods(
        service,
        plant,
        start,
        to,
        MAX_BASE_PERIODS,
        "a what-if's base case",
    )
    .await?;
    let single = to.is_none();
    // The engine's work, off the async threads.
    tokio::task::spawn_blocking(move || {
        let analyses: Vec<Analysis> = periods
            .into_iter()
            .map(|(s, readings, left_out)| period_run::analyse(&model, s, readings, left_out))
            .collect();
        if single {
            whatif::what_if(&model, &analyses[0], &request)
        } else {
            whatif::what_if_range(&model, &analyses, &request)
        }
    })
    .await
    .map_err(|e| ResultsError::Task(e.to_string()))?
    .map_err(ResultsError::WhatIf)
}
