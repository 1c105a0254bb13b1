//! Stored periods reconciled again, exactly as the period run does: the estimate behind a
//! report is not stored (only the report), so an answer that needs it (a what-if's base case,
//! a meter's value) takes the stored readings of its periods again.

use std::sync::Arc;

use chrono::{DateTime, Utc};
use reconcile::Plant;

use super::{rfc3339, PeriodRange, ResultsError};
use crate::out_of_service;
use crate::period_run::PeriodReading;
use reconcile::LeftOut;

/// A stored period to reconcile again: its start, its readings, the meters out of service.
pub type StoredPeriod = (DateTime<Utc>, Vec<PeriodReading>, Vec<LeftOut>);
use crate::service::Service;
use crate::store::PlantRow;

/// The stored readings of the period containing `start`, or of every period of `start..to`
/// (at most `limit` of them), all of one model revision, with that model, and the meters out
/// of service in each period (left out of its estimate, as the period run leaves them).
/// Periods with no readings are left out; none at all is `NotFound`. `what` names the answer
/// in refusals.
pub async fn stored_periods(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
    to: Option<DateTime<Utc>>,
    limit: usize,
    what: &str,
) -> Result<(Arc<Plant>, Vec<StoredPeriod>), ResultsError> {
    // The plant's revisions once (each validated once per process), not a lookup per period.
    let models = service.models(plant).await?;
    let (model, revision) = models.at(start)?;
    let starts = match to {
        None => vec![reconcile::period::period_start(start, model.period_seconds)],
        Some(to) => {
            let range = PeriodRange::new(start, to, model.period_seconds)?;
            if range.starts.len() > limit {
                return Err(ResultsError::Refused(format!(
                    "the range holds {} periods, more than the {limit} one {what} covers",
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
                "the range spans model revisions {revision} and {rev} (from {}); {what} is \
                 of one model: end the range before the change",
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
            "plant \"{}\" has no readings in the period{} starting {}",
            plant.name,
            if to.is_some() { "s" } else { "" },
            rfc3339(start)
        )));
    }
    Ok((model, periods))
}
