//! Candidate new meters and what each would buy: a flow meter on every stream with no flow
//! meter, an analyser for every component of every stream that has none for it, each at a
//! default accuracy per kind; the figure's σ with it added, the states it makes observable,
//! the meters it makes testable, and the change in the smallest detectable bias of the meters
//! already there. The question is the one of the sensor-placement literature (Bagajewicz,
//! *Design and Upgrade of Process Plant Instrumentation*, 2000; Kretsovalis & Mah on the
//! observability and redundancy gained by added measurements); the answer here is exact for
//! the linearisation at the reconciled state (augmented.rs), never a fresh estimate.

use crate::equations::measurement;
use crate::estimate::Estimate;
use crate::faults::{detectable_bias, REPORTED_POWER};
use crate::model::{Meter, Plant, Quantity, Sigma};
use crate::stats::measurement_test_critical;
use crate::uncertainty::Uncertainty;
use crate::uom::Uom;

use super::{figure_under, measured_products, quantities, Augmented, NON_REDUNDANT};

/// A detectable-bias change smaller than this share is not listed (the Šidák correction alone
/// moves every meter's by a little when one more meter is tested).
const LISTED_CHANGE: f64 = 0.01;
/// A stream carrying less than this (kmol/h) gets no candidate: there is nothing to meter.
const EMPTY_STREAM: f64 = 1e-9;

/// The accuracy a candidate of each kind is assumed to have.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Accuracies {
    /// A flow meter's σ, percent of its reading.
    pub flow_sigma_pct: f64,
    /// A flow meter's σ in kmol/h, when given instead of the percentage (the only way to
    /// value a flow meter on a stream the estimate leaves at zero, an unobservable one).
    pub flow_sigma: Option<f64>,
    /// An analyser's σ, mol % absolute.
    pub analyser_sigma: f64,
}

impl Default for Accuracies {
    /// 1 % of reading for a flow meter and 0.2 mol % for an analyser: common practice for a
    /// well-installed differential-pressure or vortex transmitter and a process gas
    /// chromatograph on loop gas (no single published source; give your own).
    fn default() -> Self {
        Accuracies {
            flow_sigma_pct: 1.0,
            flow_sigma: None,
            analyser_sigma: 0.2,
        }
    }
}

/// A meter that could be added.
#[derive(Debug, Clone, PartialEq)]
pub struct Candidate {
    pub stream: usize,
    /// `MolarFlow` (kmol/h) or `MoleFraction` (mol %).
    pub quantity: Quantity,
    pub component: Option<usize>,
    pub uom: Uom,
    /// Its σ in its uom at the reconciled state.
    pub sigma: f64,
    /// Its σ rule when percent of reading.
    pub sigma_pct: Option<f64>,
    /// Its gradient on the state, in its uom.
    pub gradient: Vec<(usize, f64)>,
}

/// The candidates of an estimate: a molar flow meter on every stream with no flow meter of
/// any kind, an analyser on every component of every stream of two or more components with
/// no meter of that component. A stream the estimate leaves at zero flow gets no analyser,
/// and a flow meter only at an absolute accuracy (a percentage of nothing is no accuracy);
/// one that is observably empty gets none.
pub fn candidates(plant: &Plant, est: &Estimate, accuracies: &Accuracies) -> Vec<Candidate> {
    let layout = &est.layout;
    let z = &est.solution.z;
    let has_flow_meter = |s: usize| {
        plant.meters.iter().any(|m| {
            m.stream == s
                && matches!(
                    m.quantity,
                    Quantity::MolarFlow | Quantity::MassFlow | Quantity::StdVolumeFlow
                )
        })
    };
    let has_analyser = |s: usize, c: usize| {
        plant
            .meters
            .iter()
            .any(|m| m.stream == s && m.component == Some(c))
    };
    let mut out = Vec::new();
    for (s, stream) in plant.streams.iter().enumerate() {
        let flows: Vec<(usize, f64)> = layout.stream_flows(plant, s).map(|i| (i, 1.0)).collect();
        let total: f64 = flows.iter().map(|&(i, _)| z[i]).sum();
        let empty = total <= EMPTY_STREAM;
        if empty && est.classification.is_observable(&flows) {
            continue;
        }
        let flow_sigma = match accuracies.flow_sigma {
            Some(sigma) => Sigma::Absolute(sigma),
            None => Sigma::PercentOfReading(accuracies.flow_sigma_pct),
        };
        if !has_flow_meter(s) {
            out.extend(candidate(
                plant,
                est,
                s,
                Quantity::MolarFlow,
                None,
                Uom::KmolPerHour,
                flow_sigma,
            ));
        }
        if empty || stream.components.len() < 2 {
            continue;
        }
        for &c in stream.components.iter().filter(|&&c| !has_analyser(s, c)) {
            out.extend(candidate(
                plant,
                est,
                s,
                Quantity::MoleFraction,
                Some(c),
                Uom::Percent,
                Sigma::Absolute(accuracies.analyser_sigma),
            ));
        }
    }
    out
}

fn candidate(
    plant: &Plant,
    est: &Estimate,
    stream: usize,
    quantity: Quantity,
    component: Option<usize>,
    uom: Uom,
    sigma: Sigma,
) -> Option<Candidate> {
    let meter = Meter {
        tag: String::new(),
        stream,
        quantity,
        component,
        basis: None,
        uom,
        sigma,
        range: None,
    };
    let (value, gradient) = measurement(plant, &est.layout, &meter, &est.solution.z);
    let sigma_pct = match sigma {
        Sigma::PercentOfReading(p) => Some(p),
        _ => None,
    };
    Some(Candidate {
        stream,
        quantity,
        component,
        uom,
        sigma: meter.sigma_for(value)?,
        sigma_pct,
        gradient,
    })
    .filter(|c| c.gradient.iter().any(|&(_, v)| v != 0.0))
}

/// A meter's smallest detectable bias (in its uom, at the reports' power) now and with the
/// candidate added; `None` where it is not tested.
#[derive(Debug, Clone, PartialEq)]
pub struct DetectableBias {
    pub meter: usize,
    pub now: Option<f64>,
    pub with_it: Option<f64>,
}

/// What one candidate would buy.
#[derive(Debug, Clone, PartialEq)]
pub struct CandidateWorth {
    /// Index into the candidates.
    pub candidate: usize,
    /// The figure's σ with the candidate added; `None` while the figure stays unobservable.
    pub sigma_if_added: Option<f64>,
    /// What it makes observable, named as `unobservable_if_lost` names it.
    pub makes_observable: Vec<String>,
    /// Meters (indices in the plant) not tested now that it makes testable.
    pub makes_testable: Vec<usize>,
    /// Whether the candidate itself would be tested (it is redundant once added).
    pub testable: bool,
    /// Meters whose smallest detectable bias changes by more than 1 %, largest change first.
    pub detectable_bias: Vec<DetectableBias>,
}

/// The measured meters' redundancy and detectability, now or with additions.
struct Testing {
    /// Leverage of each measured meter (index into `est.measured`).
    leverage: Vec<f64>,
    critical: f64,
}

impl Testing {
    fn redundant(&self, k: usize) -> bool {
        1.0 - self.leverage[k] > NON_REDUNDANT
    }

    fn detectable_bias(&self, est: &Estimate, k: usize) -> Option<f64> {
        let variance = 1.0 - self.leverage[k];
        if !self.redundant(k) {
            return None;
        }
        detectable_bias(
            est.measured[k].sigma,
            variance,
            self.critical,
            REPORTED_POWER,
        )
    }
}

/// The figure of `name` and `subject` as reconciled, and what each candidate would buy it.
/// `None` when the estimate has no such figure.
pub fn candidate_worths(
    plant: &Plant,
    est: &Estimate,
    name: &str,
    subject: &str,
    candidates: &[Candidate],
) -> Option<Vec<CandidateWorth>> {
    figure_under(plant, est, &est.classification, name, subject)?;
    let quantities = quantities(plant, est);
    let products = measured_products(plant, est);
    let testing = |leverage: Vec<f64>, extra: usize| {
        let mut t = Testing {
            leverage,
            critical: 0.0,
        };
        let tests = (0..est.measured.len()).filter(|&k| t.redundant(k)).count() + extra;
        t.critical = measurement_test_critical(plant.alpha, tests);
        t
    };
    let leverage_now: Vec<f64> = est
        .measured
        .iter()
        .zip(&products)
        .map(|(m, p)| (p.variance / (m.sigma * m.sigma)).min(1.0))
        .collect();
    let now = testing(leverage_now.clone(), 0);
    let worths = candidates
        .iter()
        .enumerate()
        .map(|(i, cand)| {
            let mut aug = Augmented::new(&est.classification);
            let new_direction = aug.add(&cand.gradient, cand.sigma);
            // A candidate that determines a new direction is its only measure (leverage 1)
            // and changes no other meter's test; otherwise, with c = g/σ and β = 1 + cᵀPc,
            // its leverage is cᵀPc/β and meter k's variance falls by (cᵀPjₖ)²/β.
            let c: Vec<(usize, f64)> = cand
                .gradient
                .iter()
                .map(|&(i, v)| (i, v / cand.sigma))
                .collect();
            let (testable, leverage) = if new_direction {
                (false, leverage_now.clone())
            } else {
                let cpc = est.classification.covariance(&c, &c);
                let beta = 1.0 + cpc;
                let leverage = est
                    .measured
                    .iter()
                    .zip(&products)
                    .map(|(m, p)| {
                        let cpj: f64 = c.iter().map(|&(i, v)| v * p.pj[i]).sum();
                        ((p.variance - cpj * cpj / beta) / (m.sigma * m.sigma)).min(1.0)
                    })
                    .collect();
                (1.0 - cpc / beta > NON_REDUNDANT, leverage)
            };
            let after = testing(leverage, usize::from(testable));
            let makes_observable = if new_direction {
                quantities
                    .iter()
                    .filter(|(_, a)| !est.classification.is_observable(a) && aug.is_observable(a))
                    .map(|(name, _)| name.clone())
                    .collect()
            } else {
                Vec::new()
            };
            let makes_testable = (0..est.measured.len())
                .filter(|&k| !now.redundant(k) && after.redundant(k))
                .map(|k| est.measured[k].meter)
                .collect();
            let mut detectable: Vec<DetectableBias> = (0..est.measured.len())
                .map(|k| DetectableBias {
                    meter: est.measured[k].meter,
                    now: now.detectable_bias(est, k),
                    with_it: after.detectable_bias(est, k),
                })
                .filter(|d| match (d.now, d.with_it) {
                    (Some(a), Some(b)) => (a - b).abs() > LISTED_CHANGE * a,
                    (None, None) => false,
                    _ => true,
                })
                .collect();
            detectable.sort_by(|a, b| relative_drop(b).total_cmp(&relative_drop(a)));
            CandidateWorth {
                candidate: i,
                sigma_if_added: figure_under(plant, est, &aug, name, subject).and_then(|f| f.sigma),
                makes_observable,
                makes_testable,
                testable,
                detectable_bias: detectable,
            }
        })
        .collect();
    Some(worths)
}

/// How much a meter's detectable bias falls (1 for one that becomes testable).
fn relative_drop(d: &DetectableBias) -> f64 {
    match (d.now, d.with_it) {
        (Some(a), Some(b)) if a > 0.0 => (a - b) / a,
        (None, Some(_)) => 1.0,
        _ => 0.0,
    }
}
