//! GLR and serial compensation with W as an m × m matrix (Narasimhan & Mah 1987, AIChE J. 33):
//! every signature f is a vector, W f a product, and compensation subtracts u uᵀ from W with u
//! the accepted signature W f normalised. W = I − U Uᵀ on the dense classification; on the
//! sparse one it costs a solve per meter (`Classification::scaled_adjustment_covariance`) and
//! the leak signatures a solve per unit, which `sparse.rs` avoids for large networks.

use nalgebra::{DMatrix, DVector};

use super::{
    leak_directions, meter_hypotheses, Basis, Hypothesis, Identification, Round, DETECTABLE,
};
use crate::cancel::{Cancel, Cancelled};
use crate::classify::Classification;
use crate::equations::constraints;
use crate::model::Plant;
use crate::solve::scaled_measurements;
use crate::sparse::Triplets;
use crate::stats::{chi2_critical, global_test, sidak};

/// Every hypothesis with its signature f in the σ-scaled measurement space: e_i for a bias in
/// meter i, J z_d with G z_d = d for a leak; given up once `cancel` has passed (checked before
/// each unit's leak signature, a solve of the constraints).
fn hypotheses(
    plant: &Plant,
    est: &Basis,
    cancel: &Cancel,
) -> Result<Vec<(Hypothesis, DVector<f64>)>, Cancelled> {
    let m = est.measured.len();
    let mut out: Vec<(Hypothesis, DVector<f64>)> = meter_hypotheses(plant, est)
        .into_iter()
        .map(|(k, hyp)| {
            let mut f = DVector::zeros(m);
            f[k] = 1.0;
            (hyp, f)
        })
        .collect();
    // Leaks: G z_d = d, f = J z_d.
    let layout = est.layout;
    let mut gj = Triplets::new(layout.rows.len(), layout.n);
    constraints(plant, layout, est.z, Some(&mut gj));
    let (_, jt) = scaled_measurements(plant, layout, est.measured, est.z);
    if gj.nrows == 0 {
        return Ok(out);
    }
    cancel.check()?;
    let solver = ConstraintSolver::new(&gj, est.classification);
    for (hyp, rows) in leak_directions(plant, est) {
        cancel.check()?;
        let mut d = DVector::zeros(layout.rows.len());
        for (row, v) in rows {
            d[row] = v;
        }
        let Some(zd) = solver.solve(&d) else {
            continue;
        };
        out.push((hyp, DVector::from_vec(jt.mul_vec(&zd))));
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
    Qr(DMatrix<f64>, DMatrix<f64>),
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

/// Hypotheses whose statistics are computed between two looks at the deadline.
const HYPOTHESES_PER_CHECK: usize = 64;

/// Serial compensation with W explicit, from the σ-scaled residuals `r0` at the solution.
pub(super) fn identify(
    plant: &Plant,
    est: &Basis,
    r0: &[f64],
    cancel: &Cancel,
) -> Result<Identification, Cancelled> {
    let c = est.classification;
    let mut result = Identification::default();
    let r0 = DVector::from_column_slice(r0);
    let mut w: DMatrix<f64> = c.scaled_adjustment_covariance_cancellable(cancel)?;
    let mut r = &w * &r0;
    let mut dof = c.redundancy;
    if global_test(r.dot(&r), dof, plant.alpha).passed {
        // Nothing to identify: spare the hypotheses (a dense solve per unit for the leaks).
        result.compensated_objective = r.dot(&r);
        result.compensated_dof = dof;
        return Ok(result);
    }
    let (hyps, fs): (Vec<Hypothesis>, Vec<DVector<f64>>) =
        hypotheses(plant, est, cancel)?.into_iter().unzip();
    let mut accepted = vec![false; hyps.len()];
    let tested = hyps.len().max(1);
    // Per-hypothesis level: Šidák over every hypothesis tested; T follows χ²(1) under H0.
    let critical = chi2_critical(sidak(plant.alpha, tested), 1);

    while dof > 0 && !global_test(r.dot(&r), dof, plant.alpha).passed {
        // GLR of every hypothesis still open.
        let mut round = Round {
            num: vec![0.0; hyps.len()],
            den: vec![None; hyps.len()],
        };
        let mut signatures: Vec<Option<DVector<f64>>> = vec![None; hyps.len()];
        for (h, f) in fs.iter().enumerate() {
            // A round costs a product with the m × m W per hypothesis: a large network's
            // round takes a good part of a second.
            if h % HYPOTHESES_PER_CHECK == 0 {
                cancel.check()?;
            }
            if accepted[h] {
                continue;
            }
            let wf = &w * f;
            let fwf = f.dot(&wf);
            if fwf <= DETECTABLE * f.dot(f) {
                continue;
            }
            round.num[h] = wf.dot(&r);
            round.den[h] = Some(fwf);
            signatures[h] = Some(wf);
        }
        let Some((h, t)) = round.strongest() else {
            break;
        };
        if t <= critical {
            break;
        }
        let lead = signatures[h].clone().expect("tested");
        let lead_norm = lead.norm();
        let collinear = |k: usize| {
            signatures[k].as_ref().is_some_and(|s| {
                (s.dot(&lead) / (s.norm() * lead_norm)).abs() >= 1.0 - super::EQUIVALENCE_TOLERANCE
            })
        };
        for k in round.accept(plant.alpha, &hyps, (h, t), collinear, &mut result) {
            accepted[k] = true;
        }
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
