//! What each meter is worth to a figure, and which new meter would help it most, for a stored
//! period or each period of a range: the stored readings reconciled again (rerun.rs), then
//! the engine's meter value (reconcile::meter_value; docs/meter-value.md).

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::meter_value::{self, MeterValueReport, Request};
use reconcile::{Analysis, Plant};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use super::rerun::stored_periods;
use super::{rfc3339, ResultsError};
use crate::period_run;
use crate::service::Service;
use crate::store::PlantRow;

/// Most periods one answer values (a week of hourly periods): each is reconciled again.
pub const MAX_PERIODS: usize = 168;

/// One period's answer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct PeriodValue {
    pub period: String,
    #[serde(flatten)]
    pub value: MeterValueReport,
}

/// How often each repair or addition came first over a range.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct Firsts {
    /// The meter or candidate (`STREAM molar_flow`, `STREAM mole_fraction COMPONENT`).
    pub item: String,
    pub periods: usize,
}

/// The answer: of one period, or of a range.
#[derive(Debug, Serialize, ToSchema)]
#[serde(untagged)]
pub enum MeterValueAnswer {
    Period(Box<PeriodValue>),
    Range(RangeValue),
}

/// The answer over a range: each period's, and the repairs and additions that came first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct RangeValue {
    pub from: String,
    pub to: String,
    /// Periods with readings whose estimate failed, left out.
    pub not_reconciled: Vec<String>,
    pub best_repair: Vec<Firsts>,
    pub best_addition: Vec<Firsts>,
    pub periods: Vec<PeriodValue>,
}

/// The meter value of one analysed period; a period that was not reconciled has none.
pub fn of_period(
    plant: &Plant,
    start: DateTime<Utc>,
    analysis: &Analysis,
    request: &Request,
) -> Result<PeriodValue, ResultsError> {
    let est = match (&analysis.estimate, analysis.report.status) {
        (Some(est), status) if status.is_usable() => est,
        (_, status) => {
            return Err(ResultsError::NotReconciled(format!(
                "the period starting {} was not reconciled ({}), so its meters cannot be valued",
                rfc3339(start),
                status.as_str()
            )))
        }
    };
    let value = meter_value::meter_value(plant, est, request).map_err(ResultsError::MeterValue)?;
    Ok(PeriodValue {
        period: rfc3339(start),
        value,
    })
}

/// Count how often each item comes first, most often first.
fn firsts(items: impl Iterator<Item = String>) -> Vec<Firsts> {
    let mut counts: BTreeMap<String, usize> = BTreeMap::new();
    for item in items {
        *counts.entry(item).or_default() += 1;
    }
    let mut out: Vec<Firsts> = counts
        .into_iter()
        .map(|(item, periods)| Firsts { item, periods })
        .collect();
    out.sort_by(|a, b| b.periods.cmp(&a.periods).then(a.item.cmp(&b.item)));
    out
}

/// The answer of a range from its periods' values.
pub fn of_range(
    from: DateTime<Utc>,
    to: DateTime<Utc>,
    periods: Vec<PeriodValue>,
    not_reconciled: Vec<String>,
) -> RangeValue {
    let best_repair = firsts(
        periods
            .iter()
            .filter_map(|p| p.value.meters.first().map(|m| m.tag.clone())),
    );
    let best_addition = firsts(periods.iter().filter_map(|p| {
        p.value.candidates.first().map(|c| {
            let c = &c.candidate;
            let quantity = serde_json::to_value(c.quantity)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
                .unwrap_or_default();
            [Some(c.stream.clone()), Some(quantity), c.component.clone()]
                .into_iter()
                .flatten()
                .collect::<Vec<_>>()
                .join(" ")
        })
    }));
    RangeValue {
        from: rfc3339(from),
        to: rfc3339(to),
        not_reconciled,
        best_repair,
        best_addition,
        periods,
    }
}

/// The meter value of the stored period starting at `start`.
pub async fn of_stored_period(
    service: &Service,
    plant: &PlantRow,
    start: DateTime<Utc>,
    request: Request,
) -> Result<PeriodValue, ResultsError> {
    let (model, mut periods) =
        stored_periods(service, plant, start, None, 1, "a meter value").await?;
    let (s, readings, left_out) = periods.remove(0);
    tokio::task::spawn_blocking(move || {
        let analysis = period_run::analyse(&model, s, readings, left_out);
        of_period(&model, s, &analysis, &request)
    })
    .await
    .map_err(|e| ResultsError::Task(e.to_string()))?
}

/// The meter value of each stored period of `from..to` that was reconciled.
pub async fn of_stored_range(
    service: &Service,
    plant: &PlantRow,
    from: DateTime<Utc>,
    to: DateTime<Utc>,
    request: Request,
) -> Result<RangeValue, ResultsError> {
    let (model, periods) =
        stored_periods(service, plant, from, Some(to), MAX_PERIODS, "a meter value").await?;
    tokio::task::spawn_blocking(move || {
        let mut values = Vec::new();
        let mut failed = Vec::new();
        for (s, readings, left_out) in periods {
            let analysis = period_run::analyse(&model, s, readings, left_out);
            match of_period(&model, s, &analysis, &request) {
                Ok(v) => values.push(v),
                Err(ResultsError::NotReconciled(_)) => failed.push(rfc3339(s)),
                Err(e) => return Err(e),
            }
        }
        Ok(of_range(from, to, values, failed))
    })
    .await
    .map_err(|e| ResultsError::Task(e.to_string()))?
}
