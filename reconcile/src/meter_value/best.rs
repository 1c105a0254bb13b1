//! The best k new meters for one figure or a weighted set of figures.
//!
//! The measure of a set of additions is, first, how many of the figures it leaves
//! unobservable, then Σ w_f (σ_f / σ_f,now)² (σ_f,now taken as 1 where the figure is
//! unobservable now): the weighted variance left, each figure relative to its own. Where the
//! number of subsets C(N, k) is small enough every subset is tried and the best is exact;
//! otherwise the greedy rule of the sensor-placement literature (Bagajewicz, *Design and
//! Upgrade of Process Plant Instrumentation*, 2000, ch. on upgrade) adds, k times, the
//! candidate that lowers the measure most given those chosen before.

use crate::estimate::Estimate;
use crate::model::Plant;
use crate::report::Figure;

use super::{figure_under, Augmented, Candidate};

/// Largest number of subsets tried one by one.
pub const EXHAUSTIVE_LIMIT: u128 = 2_000;

/// A figure of the set and its weight.
#[derive(Debug, Clone, PartialEq)]
pub struct WeightedFigure {
    pub name: String,
    pub subject: String,
    pub weight: f64,
}

/// How the best set was found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Search {
    /// Every subset of k candidates tried: the best set.
    Exhaustive,
    /// k greedy steps: a good set, not always the best.
    Greedy,
}

impl Search {
    pub fn as_str(self) -> &'static str {
        match self {
            Search::Exhaustive => "exhaustive",
            Search::Greedy => "greedy",
        }
    }
}

/// The chosen additions.
#[derive(Debug, Clone, PartialEq)]
pub struct Additions {
    pub search: Search,
    /// Indices into the candidates, in the order chosen (greedy) or ascending (exhaustive).
    pub chosen: Vec<usize>,
    /// Each figure's σ with all of them added (`None`: still unobservable).
    pub sigma_after: Vec<Option<f64>>,
    /// Sets whose measure was computed.
    pub evaluated: usize,
}

/// A set's measure: figures left unobservable, then the weighted relative variance.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Measure {
    unobservable: usize,
    variance: f64,
}

impl Measure {
    fn better_than(&self, other: &Measure) -> bool {
        (self.unobservable, self.variance) < (other.unobservable, other.variance)
    }
}

struct Goal<'p> {
    plant: &'p Plant,
    est: &'p Estimate,
    figures: &'p [(WeightedFigure, Figure)],
    evaluated: usize,
}

impl Goal<'_> {
    fn sigmas(&self, aug: &Augmented) -> Vec<Option<f64>> {
        self.figures
            .iter()
            .map(|(f, _)| {
                figure_under(self.plant, self.est, aug, &f.name, &f.subject).and_then(|f| f.sigma)
            })
            .collect()
    }

    fn measure(&mut self, aug: &Augmented) -> Measure {
        self.evaluated += 1;
        let mut m = Measure {
            unobservable: 0,
            variance: 0.0,
        };
        for ((f, now), sigma) in self.figures.iter().zip(self.sigmas(aug)) {
            match sigma {
                None => m.unobservable += 1,
                Some(s) => {
                    let scale = now.sigma.filter(|&s| s > 0.0).unwrap_or(1.0);
                    m.variance += f.weight * (s / scale).powi(2);
                }
            }
        }
        m
    }
}

/// C(n, k), saturating.
fn subsets(n: usize, k: usize) -> u128 {
    (0..k as u128).fold(1u128, |acc, i| acc.saturating_mul(n as u128 - i) / (i + 1))
}

/// The best `k` candidates (k ≤ candidates) for the weighted `figures`, each given with its
/// figure as reconciled now: every subset when there are at most [`EXHAUSTIVE_LIMIT`],
/// greedy otherwise.
pub fn best_additions(
    plant: &Plant,
    est: &Estimate,
    candidates: &[Candidate],
    figures: &[(WeightedFigure, Figure)],
    k: usize,
) -> Additions {
    let search = if subsets(candidates.len(), k) <= EXHAUSTIVE_LIMIT {
        Search::Exhaustive
    } else {
        Search::Greedy
    };
    search_additions(plant, est, candidates, figures, k, search)
}

/// The best `k` candidates by the given search.
pub fn search_additions(
    plant: &Plant,
    est: &Estimate,
    candidates: &[Candidate],
    figures: &[(WeightedFigure, Figure)],
    k: usize,
    search: Search,
) -> Additions {
    let mut goal = Goal {
        plant,
        est,
        figures,
        evaluated: 0,
    };
    let base = Augmented::new(&est.classification);
    let (chosen, aug) = match search {
        Search::Exhaustive => {
            let mut best = None;
            exhaustive(
                &mut goal,
                candidates,
                k,
                0,
                base,
                &mut Vec::new(),
                &mut best,
            );
            let (_, chosen, aug) = best.expect("k ≤ candidates: one subset at least");
            (chosen, aug)
        }
        Search::Greedy => greedy(&mut goal, candidates, k, base),
    };
    Additions {
        search,
        chosen,
        sigma_after: goal.sigmas(&aug),
        evaluated: goal.evaluated,
    }
}

type Best<'a> = Option<(Measure, Vec<usize>, Augmented<'a>)>;

fn exhaustive<'a>(
    goal: &mut Goal,
    candidates: &[Candidate],
    k: usize,
    from: usize,
    aug: Augmented<'a>,
    chosen: &mut Vec<usize>,
    best: &mut Best<'a>,
) {
    if chosen.len() == k {
        let m = goal.measure(&aug);
        if best.as_ref().is_none_or(|(b, _, _)| m.better_than(b)) {
            *best = Some((m, chosen.clone(), aug));
        }
        return;
    }
    // Leave room for the ones still to choose.
    for i in from..=candidates.len() - (k - chosen.len()) {
        let mut next = aug.clone();
        next.add(&candidates[i].gradient, candidates[i].sigma);
        chosen.push(i);
        exhaustive(goal, candidates, k, i + 1, next, chosen, best);
        chosen.pop();
    }
}

fn greedy<'a>(
    goal: &mut Goal,
    candidates: &[Candidate],
    k: usize,
    mut aug: Augmented<'a>,
) -> (Vec<usize>, Augmented<'a>) {
    let mut chosen = Vec::new();
    for _ in 0..k {
        let mut step: Option<(Measure, usize, Augmented<'a>)> = None;
        for (i, cand) in candidates.iter().enumerate() {
            if chosen.contains(&i) {
                continue;
            }
            let mut next = aug.clone();
            next.add(&cand.gradient, cand.sigma);
            let m = goal.measure(&next);
            if step.as_ref().is_none_or(|(b, _, _)| m.better_than(b)) {
                step = Some((m, i, next));
            }
        }
        let (_, i, next) = step.expect("k ≤ candidates: one left at every step");
        chosen.push(i);
        aug = next;
    }
    (chosen, aug)
}

#[cfg(test)]
mod tests {
    use super::subsets;

    #[test]
    fn subsets_are_binomial_coefficients_and_saturate() {
        assert_eq!(subsets(5, 0), 1);
        assert_eq!(subsets(5, 2), 10);
        assert_eq!(subsets(66, 3), 45_760);
        assert_eq!(subsets(40, 40), 1);
        assert!(
            subsets(100_000, 40) > super::EXHAUSTIVE_LIMIT,
            "huge, not wrapped"
        );
    }
}
