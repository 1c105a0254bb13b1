//! Reconciled balances of a range: each period's stream flows from its current run, and the
//! amounts over the whole range (kmol and kg per stream and per stream component) with σ.
//!
//! # σ of an amount over the range
//!
//! The amount of a stream over the range is A = Σ_h F_h·Δt_h, its flow F_h in period h times the
//! period's length in hours. Periods are reconciled independently, so the errors of different
//! periods are treated as independent:
//!
//! ```text
//! σ_A = sqrt( Σ_h (σ_h·Δt_h)² )
//! ```
//!
//! This holds for random measurement noise. It understates σ_A when a meter is biased: a
//! systematic error repeats in every period and does not average out, so over n periods it
//! adds up to n times the bias, not √n times. A meter the reports mark suspect, or one whose
//! health shows a standing bias, makes the stated σ of a long total optimistic.
//!
//! A total is null for a stream (or a component) that has no value in some period of the
//! range: a period without a run, one whose run did not give usable values (not converged,
//! infeasible, no data), or one where the stream was unobservable. Those periods are listed in
//! the answer; a total never silently sums fewer hours than the range has.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::report::StreamReport;
use serde::Serialize;
use utoipa::ToSchema;

use super::stored::ReportPart;
use super::{rfc3339, PeriodRange};

/// The status of a period without a current run.
pub const NO_RUN: &str = "no_run";

/// The balances of a range.
#[derive(Debug, Serialize, ToSchema)]
pub struct Balances {
    pub plant: String,
    /// The range asked for, RFC 3339, UTC.
    pub from: String,
    pub to: String,
    pub period_seconds: i64,
    /// Every period of the range, oldest first.
    pub periods: Vec<PeriodBalance>,
    /// Which periods the totals could use, and why the others could not.
    pub coverage: Coverage,
    /// Amounts over the whole range.
    pub totals: RangeTotals,
}

/// One period's reconciled stream flows.
#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodBalance {
    pub start: String,
    pub end: String,
    /// The current run's status (solved, unobservable, not_converged, infeasible, no_data),
    /// or `no_run`.
    pub status: String,
    /// Length of the period in hours.
    pub hours: f64,
    /// The report's streams; empty unless the status is solved or unobservable.
    pub streams: Vec<StreamFlows>,
}

/// A stream's reconciled flows in one period, as its report has them.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct StreamFlows {
    pub id: String,
    /// kmol/h; null where unobservable.
    pub molar_flow: Option<f64>,
    pub molar_flow_sigma: Option<f64>,
    /// kg/h.
    pub mass_flow: Option<f64>,
    pub mass_flow_sigma: Option<f64>,
    /// kmol/h per carried component.
    pub component_flows: BTreeMap<String, Option<f64>>,
    pub component_flows_sigma: BTreeMap<String, Option<f64>>,
    /// The total flow is observable.
    pub observable: bool,
}

/// The periods behind the totals.
#[derive(Debug, Default, Serialize, ToSchema)]
pub struct Coverage {
    /// Periods in the range.
    pub periods: usize,
    /// Periods whose run gave usable values (status solved or unobservable).
    pub covered: usize,
    /// Hours of the range, and of its covered periods.
    pub hours: f64,
    pub covered_hours: f64,
    /// Starts of the periods without a run (no readings, or not run yet).
    pub missing: Vec<String>,
    /// Periods whose run gave no usable values, with its status.
    pub not_usable: Vec<PeriodNote>,
    /// Covered periods in which some streams (or their components) were unobservable.
    pub unobservable: Vec<UnobservablePeriod>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct PeriodNote {
    pub start: String,
    pub status: String,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct UnobservablePeriod {
    pub start: String,
    /// Streams with a null flow or component flow that period.
    pub streams: Vec<String>,
}

/// Amounts over the range.
#[derive(Debug, Serialize, ToSchema)]
pub struct RangeTotals {
    /// Hours the totals span: the whole range.
    pub hours: f64,
    pub streams: Vec<StreamTotal>,
}

/// A stream's amounts over the range: Σ flow × period hours. σ = sqrt(Σ (σ_h·Δt_h)²), periods
/// taken as independent (understated when a meter is biased). Null when some period of the
/// range has no value for it.
#[derive(Debug, Serialize, ToSchema)]
pub struct StreamTotal {
    pub id: String,
    /// Periods of the range without a molar flow of this stream (the reason is in
    /// `coverage`); the totals are null unless it is 0.
    pub periods_without_value: usize,
    /// kmol.
    pub amount_kmol: Option<f64>,
    pub amount_kmol_sigma: Option<f64>,
    /// kg.
    pub amount_kg: Option<f64>,
    pub amount_kg_sigma: Option<f64>,
    /// kmol per component.
    pub component_amounts_kmol: BTreeMap<String, Option<f64>>,
    pub component_amounts_kmol_sigma: BTreeMap<String, Option<f64>>,
}

impl From<StreamReport> for StreamFlows {
    fn from(s: StreamReport) -> StreamFlows {
        StreamFlows {
            id: s.id,
            molar_flow: s.molar_flow,
            molar_flow_sigma: s.molar_flow_sigma,
            mass_flow: s.mass_flow,
            mass_flow_sigma: s.mass_flow_sigma,
            component_flows: s.component_flows,
            component_flows_sigma: s.component_flows_sigma,
            observable: s.observable,
        }
    }
}

/// Σ value·Δt and Σ (σ·Δt)² of one quantity; poisoned (None) by the first period without a
/// value or a σ.
#[derive(Debug, Clone, Copy)]
struct Sum(Option<(f64, f64)>);

impl Default for Sum {
    fn default() -> Sum {
        Sum(Some((0.0, 0.0)))
    }
}

impl Sum {
    fn add(&mut self, value: Option<f64>, sigma: Option<f64>, hours: f64) {
        self.0 = match (self.0, value, sigma) {
            (Some((a, v)), Some(x), Some(s)) => Some((a + x * hours, v + (s * hours).powi(2))),
            _ => None,
        };
    }

    fn missing(&mut self) {
        self.0 = None;
    }

    fn amount(&self) -> Option<f64> {
        self.0.map(|(a, _)| a)
    }

    fn sigma(&self) -> Option<f64> {
        self.0.map(|(_, v)| v.sqrt())
    }
}

#[derive(Debug, Default)]
struct StreamSum {
    without_value: usize,
    molar: Sum,
    mass: Sum,
    components: BTreeMap<String, Sum>,
}

/// Each period's reconciled stream flows, the coverage of the range and the amounts over it,
/// from the current reports of the range's periods (`reports`, by period start, read with
/// [`current_parts`](super::stored::current_parts)).
pub fn balances(
    plant: &str,
    range: &PeriodRange,
    mut reports: BTreeMap<DateTime<Utc>, ReportPart>,
) -> Balances {
    // Streams in the order the reports list them (model order).
    let mut order: Vec<String> = Vec::new();
    for report in reports.values() {
        for s in report.streams.iter().flatten() {
            if !order.contains(&s.id) {
                order.push(s.id.clone());
            }
        }
    }
    let mut sums: BTreeMap<String, StreamSum> = order
        .iter()
        .map(|id| (id.clone(), StreamSum::default()))
        .collect();

    let mut coverage = Coverage {
        periods: range.starts.len(),
        ..Coverage::default()
    };
    let mut periods = Vec::with_capacity(range.starts.len());
    for &start in &range.starts {
        let report = reports.remove(&start);
        let end = report
            .as_ref()
            .and_then(|r| r.period_end.as_deref())
            .and_then(|e| DateTime::parse_from_rfc3339(e).ok())
            .map_or(range.end_of(start), |e| e.with_timezone(&Utc));
        let hours = (end - start).num_milliseconds() as f64 / 3.6e6;
        coverage.hours += hours;
        let status = report
            .as_ref()
            .map_or(NO_RUN, |r| r.status.as_str())
            .to_string();
        let streams: Vec<StreamFlows> = match report {
            Some(r) if r.status.is_usable() => {
                coverage.covered += 1;
                coverage.covered_hours += hours;
                r.streams
                    .unwrap_or_default()
                    .into_iter()
                    .map(StreamFlows::from)
                    .collect()
            }
            Some(_) => {
                coverage.not_usable.push(PeriodNote {
                    start: rfc3339(start),
                    status: status.clone(),
                });
                Vec::new()
            }
            None => {
                coverage.missing.push(rfc3339(start));
                Vec::new()
            }
        };
        let mut unobservable = Vec::new();
        for (id, sum) in sums.iter_mut() {
            let Some(s) = streams.iter().find(|s| &s.id == id) else {
                sum.without_value += 1;
                sum.molar.missing();
                sum.mass.missing();
                sum.components.values_mut().for_each(Sum::missing);
                continue;
            };
            if s.molar_flow.is_none() {
                sum.without_value += 1;
            }
            let gap = s.molar_flow.is_none()
                || s.mass_flow.is_none()
                || s.component_flows.values().any(Option::is_none);
            if gap {
                unobservable.push(id.clone());
            }
            sum.molar.add(s.molar_flow, s.molar_flow_sigma, hours);
            sum.mass.add(s.mass_flow, s.mass_flow_sigma, hours);
            for (c, value) in &s.component_flows {
                if !sum.components.contains_key(c) {
                    // A component first carried in a later period had no value before.
                    let mut fresh = Sum::default();
                    if !periods.is_empty() {
                        fresh.missing();
                    }
                    sum.components.insert(c.clone(), fresh);
                }
                let sigma = s.component_flows_sigma.get(c).copied().flatten();
                if let Some(total) = sum.components.get_mut(c) {
                    total.add(*value, sigma, hours);
                }
            }
            for (c, total) in sum.components.iter_mut() {
                if !s.component_flows.contains_key(c) {
                    total.missing();
                }
            }
        }
        if !unobservable.is_empty() {
            coverage.unobservable.push(UnobservablePeriod {
                start: rfc3339(start),
                streams: unobservable,
            });
        }
        periods.push(PeriodBalance {
            start: rfc3339(start),
            end: rfc3339(end),
            status,
            hours,
            streams,
        });
    }

    let streams = order
        .iter()
        .filter_map(|id| sums.remove_entry(id))
        .map(|(id, sum)| StreamTotal {
            id,
            periods_without_value: sum.without_value,
            amount_kmol: sum.molar.amount(),
            amount_kmol_sigma: sum.molar.sigma(),
            amount_kg: sum.mass.amount(),
            amount_kg_sigma: sum.mass.sigma(),
            component_amounts_kmol: sum
                .components
                .iter()
                .map(|(c, s)| (c.clone(), s.amount()))
                .collect(),
            component_amounts_kmol_sigma: sum
                .components
                .iter()
                .map(|(c, s)| (c.clone(), s.sigma()))
                .collect(),
        })
        .collect();
    let hours = coverage.hours;
    Balances {
        plant: plant.to_string(),
        from: rfc3339(range.from),
        to: rfc3339(range.to),
        period_seconds: range.period_seconds,
        periods,
        coverage,
        totals: RangeTotals { hours, streams },
    }
}
