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

use nalgebra::{DMatrix, DVector};

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::classify::Classification;
use crate::equations::{constraints, Layout, Row};
use crate::estimate::Estimate;
use crate::model::Plant;
use crate::report::{Fault, FaultCandidate, FaultKind};
use crate::solve::{scaled_measurements, scaled_residuals, Measured};
use crate::sparse::Triplets;
use crate::stats::{chi2_critical, global_test, normal_quantile, sidak};

/// Two signatures are equivalent when |cos| of the angle between W f₁ and W f₂ is at least
/// 1 − this.
pub const EQUIVALENCE_TOLERANCE: f64 = 1e-6;
/// A hypothesis whose signature keeps less than this share of variance (fᵀWf / fᵀf) after
/// projection is undetectable by this meter set and is not tested.
const DETECTABLE: f64 = 1e-9;

/// Hypotheses whose statistics are computed between two looks at the deadline.
const HYPOTHESES_PER_CHECK: usize = 64;

#[derive(Debug, Clone)]
struct Hypothesis {
    kind: FaultKind,
    /// Meter tag or unit id.
    id: String,
    /// Signature in the σ-scaled measurement space.
    f: DVector<f64>,
    /// Factor from the scaled magnitude to the reported one (σ_i for a meter, 1 for a leak).
    unit_factor: f64,
}

/// What identification reads of an estimate.
struct Basis<'a> {
    layout: &'a Layout,
    measured: &'a [Measured],
    z: &'a [f64],
    classification: &'a Classification,
}

/// The hypotheses of `est`; given up once `cancel` has passed (checked before each unit's
/// leak signature, a solve of the constraints).
fn hypotheses(plant: &Plant, est: &Basis, cancel: &Cancel) -> Result<Vec<Hypothesis>, Cancelled> {
    let m = est.measured.len();
    let c = est.classification;
    let mut out = Vec::new();
    for (k, meas) in est.measured.iter().enumerate() {
        if c.is_redundant(k) {
            let mut f = DVector::zeros(m);
            f[k] = 1.0;
            out.push(Hypothesis {
                kind: FaultKind::MeterBias,
                id: plant.meters[meas.meter].tag.clone(),
                f,
                unit_factor: meas.sigma,
            });
        }
    }
    // Leaks: G z_d = d, f = J z_d.
    let layout = est.layout;
    let z = est.z;
    let mut gj = Triplets::new(layout.rows.len(), layout.n);
    constraints(plant, layout, z, Some(&mut gj));
    let (_, jt) = scaled_measurements(plant, layout, est.measured, z);
    if gj.nrows == 0 {
        return Ok(out);
    }
    cancel.check()?;
    let solver = ConstraintSolver::new(&gj, c);
    for (u, unit) in plant.units.iter().enumerate() {
        cancel.check()?;
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
        let d = DVector::from_fn(layout.rows.len(), |row, _| match layout.rows[row] {
            Row::Balance { unit, component } if unit == u => inflow[component] / total,
            Row::Balance { .. } | Row::Split { .. } => 0.0,
        });
        let Some(zd) = solver.solve(&d) else {
            continue;
        };
        out.push(Hypothesis {
            kind: FaultKind::Leak,
            id: unit.id.clone(),
            f: DVector::from_vec(jt.mul_vec(&zd)),
            unit_factor: 1.0,
        });
    }
    Ok(out)
}

/// Solutions z_d of G z_d = d for the leak signatures. The GLR statistic, the magnitude and the
/// collinearity test see only W f, and W annihilates J times any direction of the null space
/// of G, so any solution serves; the minimum-norm one is used where G is dense.
enum ConstraintSolver<'a> {
    /// z = Q R⁻ᵀ d from a Householder QR Gᵀ = Q R: the minimum-norm solution when G has full
    /// row rank, many times cheaper than the SVD (Golub & Van Loan, *Matrix Computations*, 4th
    /// ed., §5.6).
    Qr(nalgebra::DMatrix<f64>, nalgebra::DMatrix<f64>),
    /// The SVD's minimum-norm solution (singular values below 1e-12 dropped), when R shows a
    /// possible rank deficiency (dependent rows).
    Svd(nalgebra::SVD<f64, nalgebra::Dyn, nalgebra::Dyn>),
    /// Large networks: the solution of the KKT system of the sparse classification.
    Sparse(&'a crate::covariance::SparseCovariance),
}

/// A diagonal entry of R this much smaller than the largest counts as a possible rank
/// deficiency, and the SVD decides instead (as in classify.rs).
const QR_RANK_GUARD: f64 = 1e-7;

impl<'a> ConstraintSolver<'a> {
    fn new(gj: &Triplets, c: &'a Classification) -> ConstraintSolver<'a> {
        if let Some(sparse) = &c.sparse {
            return ConstraintSolver::Sparse(sparse);
        }
        let g = gj.to_dense();
        if g.nrows() <= g.ncols() {
            let qr = g.transpose().qr();
            let r = qr.r();
            let diag = r.diagonal();
            let (lo, hi) = diag.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), &x| {
                (lo.min(x.abs()), hi.max(x.abs()))
            });
            if lo > QR_RANK_GUARD * hi {
                return ConstraintSolver::Qr(qr.q(), r);
            }
        }
        ConstraintSolver::Svd(g.svd(true, true))
    }

    fn solve(&self, d: &DVector<f64>) -> Option<Vec<f64>> {
        match self {
            ConstraintSolver::Qr(q, r) => {
                let y = r.transpose().solve_lower_triangular(d)?;
                Some((q * y).as_slice().to_vec())
            }
            ConstraintSolver::Svd(svd) => svd.solve(d, 1e-12).ok().map(|x| x.as_slice().to_vec()),
            ConstraintSolver::Sparse(sparse) => Some(sparse.constraint_solution(d.as_slice())),
        }
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
/// classification.
pub fn identify_at(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    classification: &Classification,
) -> Identification {
    uncancelled(identify_at_cancellable(
        plant,
        layout,
        measured,
        z,
        classification,
        &Cancel::never(),
    ))
}

/// [`identify_at`], given up with [`Cancelled`] once `cancel`'s deadline has passed: checked
/// in the adjustment covariance's solves (the sparse path), before each leak signature and
/// every few hypotheses of each round of serial compensation.
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
    let m = est.measured.len();
    let c = est.classification;
    let mut result = Identification::default();
    if m == 0 || c.redundancy == 0 {
        return Ok(result);
    }
    let r0 = DVector::from_vec(scaled_residuals(plant, est.layout, est.measured, est.z));
    if c.sparse.is_some() && global_test(r0.dot(&r0), c.redundancy, plant.alpha).passed {
        // Large networks: W costs one solve per meter; the objective (the report's global
        // test) decides first. (At the solution W r0 = r0 up to the solver's tolerance.)
        result.compensated_objective = r0.dot(&r0);
        result.compensated_dof = c.redundancy;
        return Ok(result);
    }
    let mut w: DMatrix<f64> = c.scaled_adjustment_covariance_cancellable(cancel)?;
    let mut r = &w * &r0;
    let mut dof = c.redundancy;
    if global_test(r.dot(&r), dof, plant.alpha).passed {
        // Nothing to identify: spare the hypotheses (a dense solve per unit for the leaks).
        result.compensated_objective = r.dot(&r);
        result.compensated_dof = dof;
        return Ok(result);
    }
    let hyps = hypotheses(plant, est, cancel)?;
    let mut accepted = vec![false; hyps.len()];
    let tested = hyps.len().max(1);
    // Per-hypothesis level: Šidák over every hypothesis tested; T follows χ²(1) under H0.
    let critical = chi2_critical(sidak(plant.alpha, tested), 1);

    while dof > 0 && !global_test(r.dot(&r), dof, plant.alpha).passed {
        // GLR of every hypothesis still open.
        let mut statistics: Vec<Option<f64>> = vec![None; hyps.len()];
        let mut signatures: Vec<Option<DVector<f64>>> = vec![None; hyps.len()];
        for (h, hyp) in hyps.iter().enumerate() {
            // A round costs a product with the m × m W per hypothesis: a large network's
            // round takes a good part of a second.
            if h % HYPOTHESES_PER_CHECK == 0 {
                cancel.check()?;
            }
            if accepted[h] {
                continue;
            }
            let wf = &w * &hyp.f;
            let fwf = hyp.f.dot(&wf);
            if fwf <= DETECTABLE * hyp.f.dot(&hyp.f) {
                continue;
            }
            statistics[h] = Some(wf.dot(&r).powi(2) / fwf);
            signatures[h] = Some(wf);
        }
        let Some(t_max) = statistics.iter().flatten().copied().reduce(f64::max) else {
            break;
        };
        // The strongest hypothesis; among ties within rounding (equivalent members have equal
        // statistics in exact arithmetic), the first in model order, so the same data always
        // head the group with the same member.
        let Some((h, t)) = statistics
            .iter()
            .enumerate()
            .find_map(|(k, s)| s.filter(|&tk| tk >= t_max * (1.0 - 1e-9)).map(|tk| (k, tk)))
        else {
            break;
        };
        if t <= critical {
            break;
        }
        // The group of candidates: every hypothesis whose signature is collinear with the
        // strongest one's (structurally equivalent: no amount of data from this meter set can
        // tell them apart), and every other whose statistic falls short of the strongest by
        // less than χ²_{1−α}(1), the likelihood-ratio confidence set: the data of this period
        // cannot tell those apart at the model's level either.
        let lead = signatures[h].clone().expect("tested");
        let lead_norm = lead.norm();
        let close = chi2_critical(plant.alpha, 1);
        let collinear = |s: &DVector<f64>| {
            (s.dot(&lead) / (s.norm() * lead_norm)).abs() >= 1.0 - EQUIVALENCE_TOLERANCE
        };
        let group: Vec<usize> = (0..hyps.len())
            .filter(|&k| {
                signatures[k].as_ref().is_some_and(|s| {
                    let tk = s.dot(&r).powi(2) / hyps[k].f.dot(s);
                    collinear(s) || t - tk <= close
                })
            })
            .collect();
        let mut candidates = Vec::new();
        for &k in &group {
            accepted[k] = true;
            let wf = signatures[k].as_ref().expect("tested");
            let fwf = hyps[k].f.dot(wf);
            let b = wf.dot(&r) / fwf;
            candidates.push(FaultCandidate {
                kind: hyps[k].kind,
                id: hyps[k].id.clone(),
                equivalent: collinear(wf),
                magnitude: b * hyps[k].unit_factor,
                magnitude_sigma: hyps[k].unit_factor / fwf.sqrt(),
                statistic: wf.dot(&r).powi(2) / fwf,
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
        // Compensate: project the accepted direction out of the residuals and of W.
        let unit = &lead / lead_norm;
        w -= &unit * unit.transpose();
        r = &w * &r0;
        dof -= 1;
    }
    result.compensated_objective = r.dot(&r);
    result.compensated_dof = dof;
    Ok(result)
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
