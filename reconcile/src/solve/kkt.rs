//! The KKT system of one iteration (docs/methods.md §2): its assembly with the working set and
//! the constraint curvature, an LDLᵀ of the quasi-definite matrix with iterative refinement,
//! and the sparse and dense LU as fallbacks.

use super::norms::norm_inf;
use crate::equations::{Layout, Row};
use crate::model::Plant;
use crate::sparse::{SparseLu, Symbolic, Triplets};

/// Regularisation of the constraint block of the KKT matrix (removed by refinement).
const DELTA: f64 = 1e-10;

/// The step Δz of one iteration and the constraints' multipliers λ.
pub(super) struct Step {
    pub(super) dz: Vec<f64>,
    pub(super) lambda: Vec<f64>,
}

/// The factorised KKT matrix of one iteration and working set, for the step and the
/// second-order correction (same matrix, another right-hand side).
pub(super) struct Kkt {
    n: usize,
    p: usize,
    k: Triplets,
    /// ‖K‖∞ of the unregularised matrix (δ = 0), for the refinement's residual test.
    norm: f64,
    factor: Factor,
}

enum Factor {
    /// LDLᵀ of the quasi-definite matrix, held in the symbolic cache: its identity there.
    Ldl(u64),
    /// Fallback when the LDLᵀ fails or its refinement does not converge: sparse LU with
    /// threshold partial pivoting.
    Sparse(SparseLu),
    /// Fallback when the sparse LU refuses the matrix: dense LU with full pivoting.
    Dense(nalgebra::linalg::FullPivLU<f64, nalgebra::Dyn, nalgebra::Dyn>),
}

/// Refinement steps of an LDLᵀ solution at most (each must at least halve the residual), and
/// the residual it must reach, relative to ‖K‖∞ ‖x‖∞ + ‖b‖∞: otherwise the step is taken from
/// the LU.
const LDL_REFINEMENTS: usize = 8;
const LDL_TOLERANCE: f64 = 1e-14;
/// Refinement steps at most for the plain Gauss–Newton step from the factorisation with the
/// constraint curvature (`Kkt::step_without`).
const PLAIN_REFINEMENTS: usize = 12;

impl Kkt {
    /// Assemble and factorise the KKT matrix at z with the variables in `fixed` held where
    /// they are. Fixed variables and the curvature (zero when not in use) keep their entries as
    /// explicit zeros, so the pattern, and with it the fill-reducing ordering and symbolic
    /// analysis in `cache`, stays the same for the whole solve.
    ///
    /// With the (1,1) block JᵀJ + C + εI positive definite the matrix is symmetric
    /// quasi-definite, and an LDLᵀ with a fixed fill-reducing ordering and no pivoting exists
    /// for it (Vanderbei 1995); it is tried first, and refactorised numerically in the cached
    /// pattern. The LU is the fallback.
    pub(super) fn new(
        layout: &Layout,
        gj: &Triplets,
        j_rows: &[Vec<(usize, f64)>],
        fixed: &[bool],
        curvature: &[(usize, usize, f64)],
        cache: &mut Option<Symbolic>,
    ) -> Option<Kkt> {
        let n = layout.n;
        let p = gj.nrows;
        let free = |a: usize, b: usize| !fixed[a] && !fixed[b];
        let mut k = Triplets::new(n + p, n + p);
        k.entries.reserve(
            curvature.len()
                + j_rows.iter().map(|r| r.len() * r.len()).sum::<usize>()
                + n
                + 2 * gj.entries.len()
                + p,
        );
        for &(a, b, v) in curvature {
            k.push(a, b, if free(a, b) { v } else { 0.0 });
        }
        // JᵀJ from the rows of J: each measurement row touches a handful of columns.
        let mut diag = vec![0.0; n];
        for row in j_rows {
            for &(a, va) in row {
                for &(b, vb) in row {
                    k.push(a, b, if free(a, b) { va * vb } else { 0.0 });
                }
                if !fixed[a] {
                    diag[a] += va * va;
                }
            }
        }
        let eps = 1e-12 * diag.iter().fold(1.0_f64, |a, &d| a.max(d));
        for (i, &f) in fixed.iter().enumerate() {
            k.push(i, i, if f { 1.0 } else { eps });
        }
        for &(row, col, v) in &gj.entries {
            let v = if fixed[col] { 0.0 } else { v };
            k.push(n + row, col, v);
            k.push(col, n + row, v);
        }
        for row in 0..p {
            k.push(n + row, n + row, -DELTA);
        }
        let mut rows = vec![0.0; n + p];
        for &(r, _, v) in &k.entries {
            rows[r] += v.abs();
        }
        let norm = norm_inf(&rows);
        let factor = match Symbolic::for_matrix(cache, &k).factor_ldl(&k, n) {
            Some(id) => Factor::Ldl(id),
            None => Kkt::lu(&k, cache),
        };
        Some(Kkt {
            n,
            p,
            k,
            norm,
            factor,
        })
    }

    fn lu(k: &Triplets, cache: &mut Option<Symbolic>) -> Factor {
        match SparseLu::with_symbolic(k, cache) {
            Some(lu) => Factor::Sparse(lu),
            None => Factor::Dense(k.to_dense().full_piv_lu()),
        }
    }

    /// b − K x for the unregularised KKT matrix (δ = 0).
    fn residual(&self, b: &[f64], x: &[f64]) -> Vec<f64> {
        let mut kx = self.k.mul_vec(x);
        for row in 0..self.p {
            kx[self.n + row] += DELTA * x[self.n + row];
        }
        b.iter().zip(&kx).map(|(b, a)| b - a).collect()
    }

    /// K x = b from the LDLᵀ `id` with iterative refinement against the unregularised matrix,
    /// which removes both δ and QDLDL's dynamic regularisation; `None` when the refinement does
    /// not reach the residual tolerance.
    fn solve_ldl(&self, id: u64, b: &[f64], cache: &mut Option<Symbolic>) -> Option<Vec<f64>> {
        let sym = cache.as_mut()?;
        let mut x = b.to_vec();
        if !sym.solve_ldl(id, &mut x) {
            return None;
        }
        let size = norm_inf(b);
        let mut previous = f64::INFINITY;
        for step in 0..=LDL_REFINEMENTS {
            let mut res = self.residual(b, &x);
            let r = norm_inf(&res);
            if !r.is_finite() || !norm_inf(&x).is_finite() {
                return None;
            }
            if r <= LDL_TOLERANCE * (self.norm * norm_inf(&x) + size) {
                return Some(x);
            }
            // Stagnation: a singular matrix with an inconsistent right-hand side (dependent
            // constraint rows), where only the LU's δ-regularised answer is the expected one.
            if step == LDL_REFINEMENTS || r > 0.5 * previous {
                break;
            }
            previous = r;
            sym.solve_ldl(id, &mut res);
            x.iter_mut().zip(&res).for_each(|(a, d)| *a += d);
        }
        None
    }

    /// The step for the gradient `top` and constraint values g.
    pub(super) fn step(
        &mut self,
        top: &[f64],
        g: &[f64],
        fixed: &[bool],
        cache: &mut Option<Symbolic>,
    ) -> Option<Step> {
        let n = self.n;
        let mut rhs = top.to_vec();
        for (i, &f) in fixed.iter().enumerate() {
            if f {
                rhs[i] = 0.0;
            }
        }
        rhs.extend(g.iter().map(|x| -x));
        if let Factor::Ldl(id) = self.factor {
            match self.solve_ldl(id, &rhs, cache) {
                Some(sol) => return Kkt::finish(n, sol),
                None => self.factor = Kkt::lu(&self.k, cache),
            }
        }
        let sol = match &self.factor {
            Factor::Sparse(lu) => {
                // Iterative refinement against the unregularised KKT matrix (δ = 0): the −δI
                // block only makes the factorisation safe with dependent rows; left in, it
                // would settle the iteration where g = δλ instead of g = 0.
                let mut x = lu.solve(&rhs);
                for _ in 0..3 {
                    let res = self.residual(&rhs, &x);
                    let dx = lu.solve(&res);
                    x.iter_mut().zip(&dx).for_each(|(a, d)| *a += d);
                }
                x
            }
            Factor::Dense(lu) => lu
                .solve(&nalgebra::DVector::from_vec(rhs))?
                .as_slice()
                .to_vec(),
            Factor::Ldl(_) => unreachable!("replaced above"),
        };
        Kkt::finish(n, sol)
    }

    /// One solve with the factorisation held, without refinement.
    fn solve_raw(&self, b: &[f64], cache: &mut Option<Symbolic>) -> Option<Vec<f64>> {
        match &self.factor {
            Factor::Ldl(id) => {
                let mut x = b.to_vec();
                cache.as_mut()?.solve_ldl(*id, &mut x).then_some(x)
            }
            Factor::Sparse(lu) => Some(lu.solve(b)),
            Factor::Dense(lu) => lu
                .solve(&nalgebra::DVector::from_column_slice(b))
                .map(|x| x.as_slice().to_vec()),
        }
    }

    /// The step of the same working set without the curvature `curvature` (the plain
    /// Gauss–Newton KKT matrix K − C), from this matrix's factorisation by iterative
    /// refinement, starting at this matrix's step `from`: x ← x + K⁻¹ (b − (K − C) x). It
    /// converges when C is small beside the rest of K, as it is near a solution; `None`
    /// otherwise (the caller factorises K − C then).
    pub(super) fn step_without(
        &self,
        from: &Step,
        top: &[f64],
        g: &[f64],
        fixed: &[bool],
        curvature: &[(usize, usize, f64)],
        cache: &mut Option<Symbolic>,
    ) -> Option<Step> {
        let n = self.n;
        let mut rhs = top.to_vec();
        for (i, &f) in fixed.iter().enumerate() {
            if f {
                rhs[i] = 0.0;
            }
        }
        rhs.extend(g.iter().map(|x| -x));
        let mut x: Vec<f64> = from.dz.iter().chain(&from.lambda).copied().collect();
        let size = norm_inf(&rhs);
        let mut previous = f64::INFINITY;
        for _ in 0..PLAIN_REFINEMENTS {
            let mut res = self.residual(&rhs, &x);
            for &(a, b, v) in curvature {
                if !fixed[a] && !fixed[b] {
                    res[a] += v * x[b];
                }
            }
            let r = norm_inf(&res);
            if !r.is_finite() {
                return None;
            }
            if r <= LDL_TOLERANCE * (self.norm * norm_inf(&x) + size) {
                return Kkt::finish(n, x);
            }
            if r > 0.5 * previous {
                return None;
            }
            previous = r;
            let dx = self.solve_raw(&res, cache)?;
            x.iter_mut().zip(&dx).for_each(|(a, d)| *a += d);
        }
        None
    }

    fn finish(n: usize, sol: Vec<f64>) -> Option<Step> {
        if sol.iter().any(|v| !v.is_finite()) {
            return None;
        }
        Some(Step {
            dz: sol[..n].to_vec(),
            lambda: sol[n..].to_vec(),
        })
    }
}

/// Entries (both triangles) of Σ_k λ_k ∇²g_k: only the splitter rows n_k − φ n_in are curved.
/// With `lambda` None the entries are there with the value zero (the same KKT pattern).
pub(super) fn constraint_curvature(
    plant: &Plant,
    layout: &Layout,
    lambda: Option<&[f64]>,
) -> Vec<(usize, usize, f64)> {
    let mut out = Vec::new();
    for (row, kind) in layout.rows.iter().enumerate() {
        match *kind {
            Row::Split {
                unit,
                outlet,
                component,
            } => {
                let inlet = plant.units[unit].inlets[0];
                let i = layout.flow(plant, inlet, component).expect("validated");
                let phi = layout.split(outlet).expect("split var");
                let v = lambda.map_or(0.0, |l| -l[row]);
                out.push((i, phi, v));
                out.push((phi, i, v));
            }
            // A balance is linear.
            Row::Balance { .. } => {}
        }
    }
    out
}
