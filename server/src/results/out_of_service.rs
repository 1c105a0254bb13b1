//! What the loop loses while a meter is out of service: the loop figures whose σ grows
//! without it, from the engine's meter worth (`reconcile::meter_value::meter_worths`).
//!
//! A stored run keeps its report, not the estimate behind it, and the periods since the meter
//! went out were run without it; so the basis is the last period before the interval in which
//! the meter had a value and was in service: its stored readings are reconciled again exactly
//! as its run reconciled them (the other meters out of service then left out as well), and
//! each loop figure's σ is compared with its σ without the meter (a rank-one update of that
//! estimate's covariance). The loop's state has moved since, so the σ are those of that
//! period, which is what the loop gives up on a like hour.

use chrono::{DateTime, Utc};
use reconcile::meter_value::meter_worths;
use reconcile::{Analysis, Plant};
use serde::Serialize;
use utoipa::ToSchema;

use super::{rfc3339, ResultsError};
use crate::out_of_service::{covering, left_out, Interval};
use crate::period_run;
use crate::service::Service;
use crate::store::PlantRow;

/// A figure's σ grows by more than this share without the meter to count as lost.
const GROWS: f64 = 0.01;

/// A loop figure the meter's absence costs.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Loss {
    pub name: String,
    pub subject: String,
    pub uom: String,
    /// σ with the meter.
    pub sigma: f64,
    /// σ without it; null when the figure cannot be determined without it.
    pub sigma_if_lost: Option<f64>,
}

/// What the loop loses while a meter is out, and the period it was judged on.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Losses {
    /// The period whose estimate the losses are of; none when no period before the interval
    /// had the meter in service with a value (then nothing is listed).
    pub from_period: Option<DateTime<Utc>>,
    pub figures: Vec<Loss>,
    /// Flows, extents and split fractions the meter set cannot determine without it.
    pub unobservable: Vec<String>,
}

/// The losses of the meter `tag` out of service in `interval` (one of `intervals`).
pub async fn losses(
    service: &Service,
    plant: &PlantRow,
    intervals: &[Interval],
    interval: &Interval,
) -> Result<Losses, ResultsError> {
    let tag = interval.tag.as_str();
    let records = service
        .store
        .meter_periods(
            plant,
            Some(tag),
            super::meters::record_start(None, Some(interval.since), service.health_window),
            interval.since,
        )
        .await?;
    let Some(start) = records
        .iter()
        .rev()
        .map(|(_, p)| p)
        .find(|p| p.measured.is_some() && covering(intervals, tag, p.period_start).is_none())
        .map(|p| p.period_start)
    else {
        return Ok(Losses::default());
    };
    let (model, _) = service.model_at(plant, start).await?;
    let readings = service
        .period_readings(plant, start, model.period_seconds)
        .await?;
    let left = left_out(&model, intervals, start);
    let tag = tag.to_string();
    tokio::task::spawn_blocking(move || {
        let analysis = period_run::analyse(&model, start, readings, left);
        Losses {
            from_period: Some(start),
            ..figure_losses(&model, &analysis, &tag)
        }
    })
    .await
    .map_err(|e| ResultsError::Task(e.to_string()))
}

/// Each loop figure of the analysis whose σ grows by more than [`GROWS`] without the meter
/// `tag`, or that it leaves undetermined; and what else it leaves unobservable.
fn figure_losses(model: &Plant, analysis: &Analysis, tag: &str) -> Losses {
    let (Some(est), Some(meter)) = (&analysis.estimate, model.meter_index(tag)) else {
        return Losses::default();
    };
    if !analysis.report.status.is_usable() {
        return Losses::default();
    }
    let mut out = Losses::default();
    for figure in &analysis.report.figures {
        let Some(sigma) = figure.sigma else {
            continue;
        };
        let Some((_, worths)) = meter_worths(model, est, &figure.name, &figure.subject) else {
            continue;
        };
        let Some(worth) = worths.into_iter().find(|w| w.meter == meter) else {
            continue;
        };
        if out.unobservable.is_empty() {
            out.unobservable = worth.unobservable_if_lost.clone();
        }
        let lost = match worth.sigma_if_lost {
            Some(s) => s > sigma * (1.0 + GROWS),
            None => true,
        };
        if lost {
            out.figures.push(Loss {
                name: figure.name.clone(),
                subject: figure.subject.clone(),
                uom: figure.uom.clone(),
                sigma,
                sigma_if_lost: worth.sigma_if_lost,
            });
        }
    }
    out
}

/// The losses in a sentence, for the meter list's reason.
pub fn sentence(losses: &Losses) -> String {
    let Some(from) = losses.from_period else {
        return "no period before it had the meter in service to judge what the loop loses"
            .to_string();
    };
    if losses.figures.is_empty() && losses.unobservable.is_empty() {
        return format!(
            "on the period from {} no loop figure's σ grows by more than 1 % without it",
            rfc3339(from)
        );
    }
    let mut parts: Vec<String> = losses
        .figures
        .iter()
        .map(|l| match l.sigma_if_lost {
            Some(s) => format!("{} of {} σ {:.3e} → {:.3e}", l.name, l.subject, l.sigma, s),
            None => format!("{} of {} undetermined", l.name, l.subject),
        })
        .collect();
    parts.extend(
        losses
            .unobservable
            .iter()
            .map(|u| format!("{u} undetermined")),
    );
    format!(
        "on the period from {}, without it: {}",
        rfc3339(from),
        parts.join("; ")
    )
}
