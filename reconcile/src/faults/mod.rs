//! Which meter is wrong (docs/methods.md §5): gross-error identification on the linearised estimate.
//!
//! In the σ-scaled measurement space the residuals r = (y − ŷ)/σ have covariance W = I − U Uᵀ
//! (a projector; see classify.rs). A fault of size b with signature f shifts their mean to
//! b W f. Hypotheses:
//! - a bias in redundant meter i: f = e_i, b in the meter's uom divided by σ_i;
//! - a leak (unmodelled loss) at unit u of its inlet mixture: the true state satisfies
//!   G z = ℓ d, with d the unit's inlet mole fractions on its balance rows; f = J z_d with
//!   G z_d = d (the minimum-norm solution), ℓ in kmol/h.
//!
//! The generalised likelihood ratio of hypothesis f (Narasimhan & Mah 1987, AIChE J. 33) is
//! T = (fᵀr)² / (fᵀWf), with estimate b̂ = fᵀr / (fᵀWf) and σ(b̂) = (fᵀWf)^{-1/2}.
//! Identification is by serial compensation (ibid.): the strongest hypothesis is accepted, its
//! direction is projected out of r and W (the linearised equivalent of estimating its
//! magnitude along with the state), and the search repeats until the compensated global test
//! passes or no hypothesis is significant at the Šidák-corrected level.
//!
//! Hypotheses whose signatures W f are collinear cannot be told apart by any amount of data
//! from this meter set (the equivalency theory of Bagajewicz & Jiang, 1998–1999): they are
//! accepted together as one group of candidates, never one of them alone. Hypotheses that are
//! not collinear but whose statistic is within χ²_{1−α}(1) of the strongest join the group too
//! (a likelihood-ratio confidence set): this period's data cannot tell them apart.
//!
//! Two ways to the same statistics ([`Method`]):
//! - `dense.rs`: W as an m × m matrix and every signature as a vector (m solves of the KKT
//!   system on the sparse path); used with the dense classification, where W is U's product;
//! - `sparse.rs`: from the sparse classification's factorisation and its selected inverse, a few
//!   solves per accepted group (large networks).

mod dense;
mod sparse;

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::classify::Classification;
use crate::equations::{Layout, Row};
use crate::estimate::Estimate;
use crate::model::Plant;
use crate::report::{Fault, FaultCandidate, FaultKind};
use crate::solve::{scaled_residuals, Measured};
use crate::stats::{chi2_critical, global_test, normal_quantile};

/// Two signatures are equivalent when |cos| of the angle between W f₁ and W f₂ is at least
/// 1 − this.
pub const EQUIVALENCE_TOLERANCE: f64 = 1e-6;
/// A hypothesis whose signature keeps less than this share of variance (fᵀWf / fᵀf) after
/// projection is undetectable by this meter set and is not tested.
const DETECTABLE: f64 = 1e-9;

/// How the GLR statistics are computed; both give the same answers (tests/glr_paths.rs).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// W = I − J P Jᵀ as an m × m matrix and the signatures as vectors: one solve of the KKT
    /// system per meter and per unit on the sparse path.
    Dense,
    /// From the sparse classification's factorisation (`covariance.rs`): W_ii from the selected
    /// inverse, a leak's fᵀf from its entries among the unit's balance rows, and two solves per
    /// round. Needs the sparse classification; without it the dense method is used.
    Factorised,
}

/// What identification reads of an estimate.
struct Basis<'a> {
    layout: &'a Layout,
    measured: &'a [Measured],
    z: &'a [f64],
    classification: &'a Classification,
}

/// What a hypothesis is, whichever way its statistics are computed.
#[derive(Debug, Clone)]
struct Hypothesis {
    kind: FaultKind,
    /// Meter tag or unit id.
    id: String,
    /// Factor from the scaled magnitude to the reported one (σ_i for a meter, 1 for a leak).
    unit_factor: f64,
}

/// The meter-bias hypotheses: one per redundant meter, with its index among the measured.
fn meter_hypotheses(plant: &Plant, est: &Basis) -> Vec<(usize, Hypothesis)> {
    let c = est.classification;
    est.measured
        .iter()
        .enumerate()
        .filter(|&(k, _)| c.is_redundant(k))
        .map(|(k, meas)| {
            (
                k,
                Hypothesis {
                    kind: FaultKind::MeterBias,
                    id: plant.meters[meas.meter].tag.clone(),
                    unit_factor: meas.sigma,
                },
            )
        })
        .collect()
}

/// The leak hypotheses: for each unit with a positive inflow, d (its inlet mole fractions on
/// its balance rows, as (row, value)), in model order.
fn leak_directions(plant: &Plant, est: &Basis) -> Vec<(Hypothesis, Vec<(usize, f64)>)> {
    let layout = est.layout;
    let z = est.z;
    let mut rows_of: Vec<Vec<(usize, usize)>> = vec![Vec::new(); plant.units.len()];
    for (row, r) in layout.rows.iter().enumerate() {
        match *r {
            Row::Balance { unit, component } => rows_of[unit].push((row, component)),
            Row::Split { .. } => {}
        }
    }
    let mut out = Vec::new();
    for (u, unit) in plant.units.iter().enumerate() {
        let mut inflow = vec![0.0; plant.components.len()];
        for &s in &unit.inlets {
            for &cc in &plant.streams[s].components {
                inflow[cc] += z[layout.flow(plant, s, cc).expect("carried")];
            }
        }
        let total: f64 = inflow.iter().sum();
        if total <= 0.0 {
            continue;
        }
        let d = rows_of[u]
            .iter()
            .map(|&(row, component)| (row, inflow[component] / total))
            .collect();
        out.push((
            Hypothesis {
                kind: FaultKind::Leak,
                id: unit.id.clone(),
                unit_factor: 1.0,
            },
            d,
        ));
    }
    out
}

/// One round's statistics of every hypothesis: fᵀ W_k r and fᵀ W_k f (`None`: not tested, as
/// accepted or undetectable), with W_k the compensated W and r = W_k r₀.
struct Round {
    num: Vec<f64>,
    den: Vec<Option<f64>>,
}

impl Round {
    fn statistic(&self, k: usize) -> Option<f64> {
        self.den[k].map(|q| self.num[k].powi(2) / q)
    }

    /// The strongest hypothesis and its statistic; among ties within rounding (equivalent
    /// members have equal statistics in exact arithmetic), the first in model order, so the
    /// same data always head the group with the same member.
    fn strongest(&self) -> Option<(usize, f64)> {
        let statistics: Vec<Option<f64>> = (0..self.den.len()).map(|k| self.statistic(k)).collect();
        let t_max = statistics.iter().flatten().copied().reduce(f64::max)?;
        statistics
            .iter()
            .enumerate()
            .find_map(|(k, s)| s.filter(|&tk| tk >= t_max * (1.0 - 1e-9)).map(|tk| (k, tk)))
    }

    /// The group of candidates around the strongest hypothesis `h` (statistic `t`): every
    /// hypothesis whose signature is collinear with the strongest one's (`collinear`:
    /// structurally equivalent, no amount of data from this meter set can tell them apart),
    /// and every other whose statistic falls short of the strongest by less than χ²_{1−α}(1),
    /// the likelihood-ratio confidence set: the data of this period cannot tell those apart at
    /// the model's level either. Pushes the fault and its suspect meters on `result`; returns
    /// the members.
    fn accept(
        &self,
        alpha: f64,
        hyps: &[Hypothesis],
        (h, t): (usize, f64),
        collinear: impl Fn(usize) -> bool,
        result: &mut Identification,
    ) -> Vec<usize> {
        let close = chi2_critical(alpha, 1);
        let group: Vec<usize> = (0..hyps.len())
            .filter(|&k| {
                self.statistic(k)
                    .is_some_and(|tk| collinear(k) || t - tk <= close)
            })
            .collect();
        let mut candidates = Vec::new();
        for &k in &group {
            let fwf = self.den[k].expect("tested");
            let b = self.num[k] / fwf;
            candidates.push(FaultCandidate {
                kind: hyps[k].kind,
                id: hyps[k].id.clone(),
                equivalent: collinear(k),
                magnitude: b * hyps[k].unit_factor,
                magnitude_sigma: hyps[k].unit_factor / fwf.sqrt(),
                statistic: self.num[k].powi(2) / fwf,
            });
            if hyps[k].kind == FaultKind::MeterBias {
                result.suspect_tags.push(hyps[k].id.clone());
            }
        }
        let lead_candidate = candidates
            .iter()
            .find(|c| c.id == hyps[h].id)
            .cloned()
            .expect("in group");
        let kind = if candidates.iter().all(|c| c.kind == FaultKind::MeterBias) {
            FaultKind::MeterBias
        } else if candidates.iter().all(|c| c.kind == FaultKind::Leak) {
            FaultKind::Leak
        } else {
            FaultKind::MeterBiasOrLeak
        };
        result.faults.push(Fault {
            kind,
            candidates: candidates.iter().map(|c| c.id.clone()).collect(),
            magnitude: lead_candidate.magnitude,
            magnitude_sigma: lead_candidate.magnitude_sigma,
            statistic: t,
            members: candidates,
        });
        group
    }
}

/// Result of identification: the accepted faults and the tags the report should mark suspect.
#[derive(Debug, Clone, Default)]
pub struct Identification {
    pub faults: Vec<Fault>,
    pub suspect_tags: Vec<String>,
    /// Objective and degrees of freedom after compensating the accepted faults.
    pub compensated_objective: f64,
    pub compensated_dof: usize,
}

/// Serial compensation on the estimate's residuals.
pub fn identify(plant: &Plant, est: &Estimate) -> Identification {
    identify_at(
        plant,
        &est.layout,
        &est.measured,
        &est.solution.z,
        &est.classification,
    )
}

/// `identify` on the parts of an estimate: a solution z of the measured values with its
/// classification. The factorised method where the classification is sparse, else the dense.
pub fn identify_at(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    classification: &Classification,
) -> Identification {
    identify_with(
        plant,
        layout,
        measured,
        z,
        classification,
        Method::Factorised,
    )
}

/// `identify_at` by the given method (the dense one where the classification is dense).
pub fn identify_with(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    classification: &Classification,
    method: Method,
) -> Identification {
    let est = &Basis {
        layout,
        measured,
        z,
        classification,
    };
    uncancelled(identify_by(plant, est, method, &Cancel::never()))
}

/// [`identify_at`], given up with [`Cancelled`] once `cancel`'s deadline has passed: checked
/// in the dense path's adjustment covariance and hypotheses and every few hypotheses of its
/// rounds, and at every round of the factorised path.
pub fn identify_at_cancellable(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    classification: &Classification,
    cancel: &Cancel,
) -> Result<Identification, Cancelled> {
    let est = &Basis {
        layout,
        measured,
        z,
        classification,
    };
    identify_by(plant, est, Method::Factorised, cancel)
}

fn identify_by(
    plant: &Plant,
    est: &Basis,
    method: Method,
    cancel: &Cancel,
) -> Result<Identification, Cancelled> {
    let m = est.measured.len();
    let c = est.classification;
    let mut result = Identification::default();
    if m == 0 || c.redundancy == 0 {
        return Ok(result);
    }
    let r0 = scaled_residuals(plant, est.layout, est.measured, est.z);
    let objective: f64 = r0.iter().map(|x| x * x).sum();
    if c.sparse.is_some() && global_test(objective, c.redundancy, plant.alpha).passed {
        // Large networks: the objective (the report's global test) decides before anything is
        // solved for. (At the solution W r0 = r0 up to the solver's tolerance.)
        result.compensated_objective = objective;
        result.compensated_dof = c.redundancy;
        return Ok(result);
    }
    match (&c.sparse, method) {
        (Some(sparse), Method::Factorised) => sparse::identify(plant, est, sparse, &r0, cancel),
        _ => dense::identify(plant, est, &r0, cancel),
    }
}

/// The power at which reports state a meter's smallest detectable bias.
pub const REPORTED_POWER: f64 = 0.90;

/// The smallest bias (in the meter's uom) the measurement test detects with probability
/// `power` at its Šidák-corrected critical value: δ = (z_crit + z_power) σ / sqrt(W_ii), from
/// E[d_i] = δ sqrt(W_ii) / σ for a bias δ in meter i (the second tail is neglected).
pub fn detectable_bias(
    sigma: f64,
    adjustment_variance: f64,
    critical: f64,
    power: f64,
) -> Option<f64> {
    (adjustment_variance > 0.0)
        .then(|| (critical + normal_quantile(power)) * sigma / adjustment_variance.sqrt())
}
