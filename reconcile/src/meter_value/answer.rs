//! The meter-value answer for one period, named for people: what each meter is worth to a
//! figure, what each candidate new meter would buy, and the best k additions. The same
//! answer for `loopbal meter-value` on files and for the service's route.

use serde::{Deserialize, Serialize};

use crate::estimate::Estimate;
use crate::figures::loop_figures_of;
use crate::model::{Plant, Quantity};
use crate::report::{Figure, CAUTION};

use super::{
    best_additions, candidate_worths, candidates, figure_under, meter_worths, Accuracies,
    Candidate, WeightedFigure, STATE_FIGURES,
};

/// What is asked of one period.
#[derive(Debug, Clone, PartialEq)]
pub struct Request {
    /// The figures; the first is the one the meters and candidates are valued for, all of
    /// them (with their weights) the ones the best additions are chosen for.
    pub figures: Vec<WeightedFigure>,
    pub accuracies: Accuracies,
    /// How many new meters to choose together.
    pub add_best: Option<usize>,
}

/// A request the estimate cannot answer; each names the item at fault.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RequestError {
    #[error("no figure asked for: give one as NAME:SUBJECT")]
    NoFigure,
    #[error("unknown figure \"{name}\"; the figures are: {known}")]
    UnknownFigure { name: String, known: String },
    #[error("figure \"{name}\" has no subject \"{subject}\"; its subjects are: {known}")]
    UnknownSubject {
        name: String,
        subject: String,
        known: String,
    },
    #[error("{what} must be a positive number, not {value}")]
    NotPositive { what: String, value: f64 },
    #[error("add_best {k} is more than the {available} candidate meters of this plant")]
    TooMany { k: usize, available: usize },
}

/// One existing meter's worth to the figure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct MeterEntry {
    pub tag: String,
    pub uom: String,
    /// Its σ this period, in its uom.
    pub sigma: f64,
    pub sigma_if_halved: Option<f64>,
    pub sigma_if_lost: Option<f64>,
    pub unobservable_if_lost: Vec<String>,
    pub untestable_if_lost: Vec<String>,
}

/// A candidate new meter as the answer names it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct CandidateName {
    pub stream: String,
    pub quantity: Quantity,
    pub component: Option<String>,
    pub uom: String,
    /// Its assumed σ in its uom at the reconciled state.
    pub sigma: f64,
    /// Its σ rule, when percent of reading.
    pub sigma_pct: Option<f64>,
}

/// A meter's smallest detectable bias now and with a candidate added.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct BiasChange {
    pub tag: String,
    pub uom: String,
    pub now: Option<f64>,
    pub with_it: Option<f64>,
}

/// What one candidate would buy.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct CandidateEntry {
    #[serde(flatten)]
    pub candidate: CandidateName,
    pub sigma_if_added: Option<f64>,
    pub makes_observable: Vec<String>,
    pub makes_testable: Vec<String>,
    /// The candidate itself would be tested.
    pub testable: bool,
    pub detectable_bias: Vec<BiasChange>,
}

/// One figure of the best additions' goal.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct GoalFigure {
    pub name: String,
    pub subject: String,
    pub weight: f64,
    pub sigma: Option<f64>,
    pub sigma_after: Option<f64>,
}

/// The best k additions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct BestEntry {
    pub k: usize,
    /// `exhaustive` (every subset tried) or `greedy`.
    pub search: String,
    pub method: String,
    pub subsets_evaluated: usize,
    pub figures: Vec<GoalFigure>,
    pub additions: Vec<CandidateName>,
}

/// The accuracies the candidates were given.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct AccuracyEntry {
    pub flow_sigma_pct: f64,
    /// kmol/h, when given instead of the percentage.
    pub flow_sigma: Option<f64>,
    pub analyser_sigma: f64,
    pub analyser_uom: String,
}

/// The answer for one period.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct MeterValueReport {
    pub figure: Figure,
    /// Measured meters, the best repair (smallest σ with its σ halved) first.
    pub meters: Vec<MeterEntry>,
    /// Candidates, the best buy (smallest σ with it added) first.
    pub candidates: Vec<CandidateEntry>,
    pub accuracies: AccuracyEntry,
    pub best: Option<BestEntry>,
    /// The standing caution, and what the σ here rest on.
    pub caution: String,
}

/// What a meter's value rests on, said with every answer.
const VALUE_CAUTION: &str = "Each σ is the reconciled σ with one change alone, linearised at this period's estimate and with the accuracies stated; a candidate's installed accuracy, and a repaired meter's, may differ. Choosing, installing or removing a meter follows the site's procedures.";

const METHOD: &str = "low-rank updates of the reconciled covariance (Sherman–Morrison; Meyer 1973 \
    where a meter determines a new direction); subsets as in Bagajewicz, Design and Upgrade of \
    Process Plant Instrumentation (2000), observability and redundancy gained as in \
    Kretsovalis & Mah";

fn positive(what: &str, value: f64) -> Result<(), RequestError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(RequestError::NotPositive {
            what: what.to_string(),
            value,
        })
    }
}

/// Check the request's figures against the estimate: each known, by name then subject.
fn check_figure(plant: &Plant, est: &Estimate, f: &WeightedFigure) -> Result<Figure, RequestError> {
    positive(&format!("the weight of {}:{}", f.name, f.subject), f.weight)?;
    if let Some(figure) = figure_under(plant, est, &est.classification, &f.name, &f.subject) {
        return Ok(figure);
    }
    let figures = loop_figures_of(plant, &est.layout, &est.solution.z, &est.classification);
    let mut names: Vec<&str> = Vec::new();
    for name in figures.iter().map(|f| f.name.as_str()).chain(STATE_FIGURES) {
        if !names.contains(&name) {
            names.push(name);
        }
    }
    if !names.contains(&f.name.as_str()) {
        return Err(RequestError::UnknownFigure {
            name: f.name.clone(),
            known: names.join(", "),
        });
    }
    let subjects: Vec<&str> = figures
        .iter()
        .filter(|g| g.name == f.name)
        .map(|g| g.subject.as_str())
        .collect();
    let known = if subjects.is_empty() {
        "a stream (component_flow: STREAM:COMPONENT; split_fraction: a splitter outlet but its last)"
            .to_string()
    } else {
        subjects.join(", ")
    };
    Err(RequestError::UnknownSubject {
        name: f.name.clone(),
        subject: f.subject.clone(),
        known,
    })
}

fn name_candidate(plant: &Plant, c: &Candidate) -> CandidateName {
    CandidateName {
        stream: plant.streams[c.stream].id.clone(),
        quantity: c.quantity,
        component: c.component.map(|k| plant.components[k].id.clone()),
        uom: c.uom.as_str().to_string(),
        sigma: c.sigma,
        sigma_pct: c.sigma_pct,
    }
}

fn by_sigma(a: Option<f64>, b: Option<f64>) -> std::cmp::Ordering {
    match (a, b) {
        (Some(x), Some(y)) => x.total_cmp(&y),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    }
}

/// Answer `request` for the period of `est`.
pub fn meter_value(
    plant: &Plant,
    est: &Estimate,
    request: &Request,
) -> Result<MeterValueReport, RequestError> {
    let first = request.figures.first().ok_or(RequestError::NoFigure)?;
    let goal = request
        .figures
        .iter()
        .map(|f| Ok((f.clone(), check_figure(plant, est, f)?)))
        .collect::<Result<Vec<_>, RequestError>>()?;
    let acc = &request.accuracies;
    positive(
        "the flow meter accuracy (σ, % of reading)",
        acc.flow_sigma_pct,
    )?;
    if let Some(sigma) = acc.flow_sigma {
        positive("the flow meter accuracy (σ, kmol/h)", sigma)?;
    }
    positive("the analyser accuracy (σ, mol %)", acc.analyser_sigma)?;
    let cands = candidates(plant, est, acc);
    if let Some(k) = request.add_best {
        if k == 0 || k > cands.len() {
            return Err(RequestError::TooMany {
                k,
                available: cands.len(),
            });
        }
    }
    let tag = |m: usize| plant.meters[m].tag.clone();
    let (figure, worths) =
        meter_worths(plant, est, &first.name, &first.subject).expect("checked above");
    let sigma_of: std::collections::BTreeMap<usize, f64> =
        est.measured.iter().map(|m| (m.meter, m.sigma)).collect();
    let mut meters: Vec<MeterEntry> = worths
        .into_iter()
        .map(|w| MeterEntry {
            tag: tag(w.meter),
            uom: plant.meters[w.meter].uom.as_str().to_string(),
            sigma: sigma_of[&w.meter],
            sigma_if_halved: w.sigma_if_halved,
            sigma_if_lost: w.sigma_if_lost,
            unobservable_if_lost: w.unobservable_if_lost,
            untestable_if_lost: w.untestable_if_lost.into_iter().map(tag).collect(),
        })
        .collect();
    meters.sort_by(|a, b| by_sigma(a.sigma_if_halved, b.sigma_if_halved));
    let worths =
        candidate_worths(plant, est, &first.name, &first.subject, &cands).expect("checked above");
    let mut entries: Vec<CandidateEntry> = worths
        .into_iter()
        .map(|w| CandidateEntry {
            candidate: name_candidate(plant, &cands[w.candidate]),
            sigma_if_added: w.sigma_if_added,
            makes_observable: w.makes_observable,
            makes_testable: w.makes_testable.into_iter().map(tag).collect(),
            testable: w.testable,
            detectable_bias: w
                .detectable_bias
                .into_iter()
                .map(|d| BiasChange {
                    tag: tag(d.meter),
                    uom: plant.meters[d.meter].uom.as_str().to_string(),
                    now: d.now,
                    with_it: d.with_it,
                })
                .collect(),
        })
        .collect();
    entries.sort_by(|a, b| by_sigma(a.sigma_if_added, b.sigma_if_added));
    let best = request.add_best.map(|k| {
        let additions = best_additions(plant, est, &cands, &goal, k);
        BestEntry {
            k,
            search: additions.search.as_str().to_string(),
            method: METHOD.to_string(),
            subsets_evaluated: additions.evaluated,
            figures: goal
                .iter()
                .zip(&additions.sigma_after)
                .map(|((f, now), after)| GoalFigure {
                    name: f.name.clone(),
                    subject: f.subject.clone(),
                    weight: f.weight,
                    sigma: now.sigma,
                    sigma_after: *after,
                })
                .collect(),
            additions: additions
                .chosen
                .iter()
                .map(|&i| name_candidate(plant, &cands[i]))
                .collect(),
        }
    });
    Ok(MeterValueReport {
        figure,
        meters,
        candidates: entries,
        accuracies: AccuracyEntry {
            flow_sigma_pct: acc.flow_sigma_pct,
            flow_sigma: acc.flow_sigma,
            analyser_sigma: acc.analyser_sigma,
            analyser_uom: "%".to_string(),
        },
        best,
        caution: format!("{CAUTION} {VALUE_CAUTION}"),
    })
}
