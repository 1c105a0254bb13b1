//! What each meter is worth to a figure: the figure's σ as it is, with one meter's σ halved (a
//! recalibration or a better transmitter), and without that meter (it fails), by rank-one
//! updates of the reconciled covariance, never by a fresh estimate per meter.
//!
//! A meter i with gradient j (its h(z) in its own uom) and σᵢ adds wᵢ j jᵀ to the information
//! of the estimate, wᵢ = 1/σᵢ². Changing its weight by δ changes the covariance P of the state
//! by the Sherman–Morrison formula (Sherman & Morrison, Ann. Math. Statist. 21, 1950):
//!
//! ```text
//! P' = P − δ P j jᵀ P / (1 + δ jᵀ P j)
//! ```
//!
//! so the covariance of two linear functions a, b of the state needs only aᵀPb, aᵀPj and
//! jᵀPb, which the base estimate already gives. Halving σᵢ is δ = 3wᵢ. Losing the meter is
//! δ = −wᵢ, and 1 + δ jᵀPj = 1 − hᵢ, hᵢ the meter's leverage: a redundant meter (hᵢ < 1) can
//! be lost and the formula holds; a non-redundant one (hᵢ = 1) determines a direction of the
//! state no other meter does, so every function that loads on P j becomes unobservable, and
//! the others keep the variance of the generalised inverse P − P j jᵀ P / (jᵀPj).
//!
//! The update is exact for the linearisation at the reconciled state: with noise-free data
//! the estimate does not move when the weights change, and a test checks every number against
//! a fresh estimate with the model changed.

use crate::estimate::Estimate;
use crate::figures::loop_figures_of;
use crate::model::{Plant, UnitKind};
use crate::report::Figure;
use crate::uncertainty::Uncertainty;

mod answer;
mod augmented;
mod best;
mod candidates;
mod reweighted;

pub use answer::{
    meter_value, AccuracyEntry, BestEntry, BiasChange, CandidateEntry, CandidateName, GoalFigure,
    MeterEntry, MeterValueReport, Request, RequestError,
};
pub use augmented::Augmented;
pub use best::{
    best_additions, search_additions, Additions, Search, WeightedFigure, EXHAUSTIVE_LIMIT,
};
pub use candidates::{
    candidate_worths, candidates, Accuracies, Candidate, CandidateWorth, DetectableBias,
};
pub use reweighted::Reweighted;
use reweighted::NON_REDUNDANT;

/// One meter's worth to a figure.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterWorth {
    /// Index of the meter in the plant.
    pub meter: usize,
    /// The figure's σ with this meter's σ halved.
    pub sigma_if_halved: Option<f64>,
    /// The figure's σ without this meter; `None` when its loss leaves the figure unobservable.
    pub sigma_if_lost: Option<f64>,
    /// The meter's loss leaves some function of the state undetermined (it is non-redundant).
    pub loses_a_direction: bool,
    /// What its loss leaves unobservable that is observable now: `flow of stream S`,
    /// `extent of reaction R`, `split fraction of stream S`.
    pub unobservable_if_lost: Vec<String>,
    /// Meters (indices in the plant) that are tested now and could no longer be without it.
    pub untestable_if_lost: Vec<usize>,
}

/// The quantities a loss can leave unobservable, named as a report's `unobservable` names
/// them: each stream's total flow, each extent, each splitter outlet's fraction (the last
/// outlet's is 1 − Σ of the others), with its gradient on the state.
fn quantities(plant: &Plant, est: &Estimate) -> Vec<(String, Vec<(usize, f64)>)> {
    let layout = &est.layout;
    let mut out: Vec<(String, Vec<(usize, f64)>)> = (0..plant.streams.len())
        .map(|s| {
            let grad = layout.stream_flows(plant, s).map(|i| (i, 1.0)).collect();
            (format!("flow of stream \"{}\"", plant.streams[s].id), grad)
        })
        .collect();
    for (r, reaction) in plant.reactions.iter().enumerate() {
        out.push((
            format!("extent of reaction \"{}\"", reaction.id),
            vec![(layout.extent(r), 1.0)],
        ));
    }
    for unit in plant.units.iter().filter(|u| u.kind == UnitKind::Splitter) {
        let mut rest = Vec::new();
        for (k, &o) in unit.outlets.iter().enumerate() {
            let grad = match layout.split(o) {
                Some(i) if k + 1 < unit.outlets.len() => {
                    rest.push((i, -1.0));
                    vec![(i, 1.0)]
                }
                _ => rest.clone(),
            };
            out.push((
                format!("split fraction of stream \"{}\"", plant.streams[o].id),
                grad,
            ));
        }
    }
    out
}

/// The names of the figures of the state itself.
pub const STATE_FIGURES: [&str; 3] = ["molar_flow", "component_flow", "split_fraction"];

/// A figure of the state itself: `molar_flow` of a stream (subject `STREAM`, kmol/h),
/// `component_flow` (subject `STREAM:COMPONENT`, kmol/h) or `split_fraction` of a splitter
/// outlet (subject `STREAM`, not the last outlet of its splitter), with its gradient.
fn state_figure(
    plant: &Plant,
    est: &Estimate,
    name: &str,
    subject: &str,
) -> Option<(&'static str, Vec<(usize, f64)>)> {
    let layout = &est.layout;
    match name {
        "molar_flow" => {
            let s = plant.stream_index(subject)?;
            Some((
                "kmol/h",
                layout.stream_flows(plant, s).map(|i| (i, 1.0)).collect(),
            ))
        }
        "component_flow" => {
            let (stream, component) = subject.split_once(':')?;
            let s = plant.stream_index(stream)?;
            let c = plant.components.iter().position(|c| c.id == component)?;
            Some(("kmol/h", vec![(layout.flow(plant, s, c)?, 1.0)]))
        }
        "split_fraction" => {
            let s = plant.stream_index(subject)?;
            Some(("fraction", vec![(layout.split(s)?, 1.0)]))
        }
        _ => None,
    }
}

/// The figure of `name` and `subject` at the estimate's state under `unc`: a loop figure, or
/// a figure of the state itself (see [`state_figure`]).
fn figure_under(
    plant: &Plant,
    est: &Estimate,
    unc: &dyn Uncertainty,
    name: &str,
    subject: &str,
) -> Option<Figure> {
    if let Some((uom, grad)) = state_figure(plant, est, name, subject) {
        let observable = unc.is_observable(&grad);
        let value: f64 = grad.iter().map(|&(i, a)| a * est.solution.z[i]).sum();
        return Some(Figure {
            name: name.to_string(),
            subject: subject.to_string(),
            uom: uom.to_string(),
            value: observable.then_some(value),
            sigma: observable.then(|| unc.sigma(&grad)),
        });
    }
    loop_figures_of(plant, &est.layout, &est.solution.z, unc)
        .into_iter()
        .find(|f| f.name == name && f.subject == subject)
}

/// A measured meter's gradient, its variance as reconciled (jᵀPj) and P j, dense: the
/// products every change of that meter, and every meter's test under a change, need.
pub(crate) struct MeterProduct {
    pub gradient: Vec<(usize, f64)>,
    pub variance: f64,
    pub pj: Vec<f64>,
}

/// The products of every measured meter (one product with P each: one solve on the sparse
/// path).
pub(crate) fn measured_products(plant: &Plant, est: &Estimate) -> Vec<MeterProduct> {
    (0..est.measured.len())
        .map(|k| {
            let gradient = est.reconciled(plant, k).1;
            let pj = est.classification.apply(&gradient);
            let variance = gradient.iter().map(|&(i, v)| v * pj[i]).sum();
            MeterProduct {
                gradient,
                variance,
                pj,
            }
        })
        .collect()
}

/// The figure as reconciled, and each measured meter's worth to it: its σ with the meter's σ
/// halved and without the meter. `None` when the estimate has no such figure.
pub fn meter_worths(
    plant: &Plant,
    est: &Estimate,
    name: &str,
    subject: &str,
) -> Option<(Figure, Vec<MeterWorth>)> {
    let base = figure_under(plant, est, &est.classification, name, subject)?;
    let quantities = quantities(plant, est);
    let meters = measured_products(plant, est);
    let under =
        |unc: &Reweighted| figure_under(plant, est, unc, name, subject).and_then(|f| f.sigma);
    let worths = est
        .measured
        .iter()
        .zip(&meters)
        .map(|(m, product)| {
            let (j, sigma, pj) = (&product.gradient, m.sigma, &product.pj[..]);
            let halved = Reweighted::new(&est.classification, j, pj, sigma, 4.0);
            let without = Reweighted::new(&est.classification, j, pj, sigma, 0.0);
            let unobservable_if_lost = quantities
                .iter()
                .filter(|(_, a)| est.classification.is_observable(a) && !without.is_observable(a))
                .map(|(name, _)| name.clone())
                .collect();
            // A meter is tested while its adjustment has variance: 1 − wₖ jₖᵀ P jₖ > 0.
            let untestable_if_lost = est
                .measured
                .iter()
                .zip(&meters)
                .enumerate()
                .filter(|(k, (other, _))| {
                    other.meter != m.meter && est.classification.is_redundant(*k)
                })
                .filter(|(_, (other, p))| {
                    let jk = &p.gradient;
                    let after = p.variance - (without.change_of(jk, jk));
                    1.0 - after / (other.sigma * other.sigma) <= NON_REDUNDANT
                })
                .map(|(_, (other, _))| other.meter)
                .collect();
            MeterWorth {
                meter: m.meter,
                sigma_if_halved: under(&halved),
                sigma_if_lost: under(&without),
                loses_a_direction: without.loses_a_direction(),
                unobservable_if_lost,
                untestable_if_lost,
            }
        })
        .collect();
    Some((base, worths))
}
