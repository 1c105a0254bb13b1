//! The what-if of a stored period, or of a range of them: the stored readings reconciled again
//! exactly as the period run does, without the meters out of service then (the estimate behind
//! a report is not stored, only the report), then the engine's what-if from that base case
//! (docs/what-if.md).

use chrono::{DateTime, Utc};
use reconcile::whatif::{self, Request, WhatIf};
use reconcile::Analysis;

use super::{rfc3339, PeriodRange, ResultsError};
use crate::out_of_service;
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
    // The plant's revisions once (each validated once per process), not a lookup per period.
    let models = service.models(plant).await?;
    let (model, revision) = models.at(start)?;
    let starts = match to {
        None => vec![start],
        Some(to) => {
            let range = PeriodRange::new(start, to, model.period_seconds)?;
            if range.starts.len() > MAX_BASE_PERIODS {
                return Err(ResultsError::Refused(format!(
                    "the base range holds {} periods, more than the {MAX_BASE_PERIODS} one \
                     what-if combines",
                    range.starts.len()
                )));
            }
            range.starts
        }
    };
    let intervals = service.out_of_service(plant).await?;
    let mut periods = Vec::with_capacity(starts.len());
    for &s in &starts {
        let (_, rev) = models.at(s)?;
        if rev != revision {
            return Err(ResultsError::Refused(format!(
                "the base range spans model revisions {revision} and {rev} (from {}); a \
                 what-if's base case is of one model: end the range before the change",
                rfc3339(s)
            )));
        }
        let readings = service
            .period_readings(plant, s, model.period_seconds)
            .await?;
        if !readings.is_empty() {
            let left_out = out_of_service::left_out(&model, &intervals, s);
            periods.push((s, readings, left_out));
        }
    }
    if periods.is_empty() {
        return Err(ResultsError::NotFound(format!(
            "plant \"{}\" has no readings in the base period{} starting {}",
            plant.name,
            if to.is_some() { "s" } else { "" },
            rfc3339(start)
        )));
    }
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
