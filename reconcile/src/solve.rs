//! The estimate (docs/methods.md §2): weighted least squares subject to g(z) = 0 and bounds, solved
//! by equality-constrained Gauss–Newton (SQP with the Gauss–Newton Hessian).
//!
//! Each iteration linearises h and g at z and solves the KKT system
//!
//! ```text
//! [ JᵀJ + εI   Gᵀ ] [ Δz ]   [ Jᵀr ]
//! [ G         −δI ] [ λ  ] = [ −g  ]
//! ```
//!
//! with J the σ-scaled measurement Jacobian and r the σ-scaled residual. The small ε keeps the
//! system regular when some states are unobservable (their step is then the minimum-norm one);
//! δ does the same for dependent constraint rows. Bounds (n ≥ 0, 0 ≤ φ ≤ 1, ξ ≥ 0 for
//! irreversible reactions) are kept with a primal active set: a step is cut at the first bound
//! it would cross, that variable is fixed there, and fixed variables are released when their
//! bound multiplier has the wrong sign (Nocedal & Wright, *Numerical Optimization*, 2nd ed.,
//! §16.5). A backtracking line search on the exact-penalty merit ½‖r‖² + μ‖g‖₁ (ibid. §18.3)
//! guards the step from poor starting regions.

use crate::equations::{constraints, measurement, measurement_value, Layout, Row};
use crate::model::Plant;
use crate::sparse::{SparseLu, Symbolic, Triplets};

/// A meter measured in the period being reconciled: its value and σ in the meter's uom.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    pub meter: usize,
    pub value: f64,
    pub sigma: f64,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SolveStatus {
    Converged,
    NotConverged,
    Infeasible,
}

#[derive(Debug, Clone)]
pub struct Solution {
    pub z: Vec<f64>,
    pub status: SolveStatus,
    pub iterations: usize,
    /// Σ ((y − h)/σ)² at z.
    pub objective: f64,
    /// ‖g(z)‖∞ in kmol/h.
    pub constraint_residual: f64,
    /// Largest relative step of the last iteration.
    pub last_step: f64,
    /// Variables held at a bound at the solution.
    pub at_bound: Vec<bool>,
    /// Per iteration: (‖g‖∞, objective, step length α, variables at a bound).
    pub history: Vec<(f64, f64, f64, usize)>,
}

/// Regularisation of the constraint block of the KKT matrix (removed by refinement).
const DELTA: f64 = 1e-10;

/// The iteration ends when the balances are met and the plain Gauss–Newton step would move no
/// reconciled meter value by more than this many σ (stationarity, see `solve_with`).
const STATIONARY: f64 = 1e-7;
/// The same with a step that has stopped shrinking relative to z, or an objective that has
/// stopped changing: the rest is rounding, and at most this many σ.
const STATIONARY_ROUNDING: f64 = 1e-6;

/// Settings of the iteration.
#[derive(Debug, Clone, Copy)]
pub struct SolveOptions {
    pub max_iterations: usize,
    /// Tolerance on ‖g‖∞ relative to the largest flow.
    pub constraint_tolerance: f64,
    /// Tolerance on the largest step relative to (1 + |z|).
    pub step_tolerance: f64,
}

impl Default for SolveOptions {
    fn default() -> Self {
        SolveOptions {
            max_iterations: 100,
            constraint_tolerance: 1e-10,
            step_tolerance: 1e-9,
        }
    }
}

/// σ-scaled residuals r and Jacobian J of the measurements at z, and the objective ‖r‖².
pub(crate) fn scaled_measurements(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
) -> (Vec<f64>, Triplets) {
    let mut r = Vec::with_capacity(measured.len());
    let mut j = Triplets::new(measured.len(), layout.n);
    for (i, m) in measured.iter().enumerate() {
        let (h, grad) = measurement(plant, layout, &plant.meters[m.meter], z);
        r.push((m.value - h) / m.sigma);
        for (col, d) in grad {
            j.push(i, col, d / m.sigma);
        }
    }
    (r, j)
}

/// σ-scaled residuals r alone, for the line search's merit: no Jacobian is built.
pub(crate) fn scaled_residuals(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
) -> Vec<f64> {
    measured
        .iter()
        .map(|m| (m.value - measurement_value(plant, layout, &plant.meters[m.meter], z)) / m.sigma)
        .collect()
}

fn norm_inf(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a, x| a.max(x.abs()))
}

fn norm_1(v: &[f64]) -> f64 {
    v.iter().map(|x| x.abs()).sum()
}

fn flow_scale(layout: &Layout, z: &[f64]) -> f64 {
    norm_inf(&z[..layout.extent_start]).max(1.0)
}

struct Step {
    dz: Vec<f64>,
    lambda: Vec<f64>,
}

/// The factorised KKT matrix of one iteration and working set, for the step and the
/// second-order correction (same matrix, another right-hand side).
struct Kkt {
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
    fn new(
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
    fn step(
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
    fn step_without(
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
fn constraint_curvature(
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

/// The step of one iteration's quadratic model with the working set: every variable on a bound
/// is fixed, less those whose bound multiplier has the wrong sign (they want to move
/// inwards). Returns the step and the factorised KKT matrix with the working set it was built
/// for; `fixed` is left as the final working set.
#[allow(clippy::too_many_arguments)]
fn qp_step(
    layout: &Layout,
    gj: &Triplets,
    j: &Triplets,
    j_rows: &[Vec<(usize, f64)>],
    jtr: &[f64],
    g: &[f64],
    z: &[f64],
    fixed: &mut [bool],
    curvature: &[(usize, usize, f64)],
    cache: &mut Option<Symbolic>,
) -> Option<(Step, (Kkt, Vec<bool>))> {
    let n = layout.n;
    for i in 0..n {
        fixed[i] = z[i] == layout.lower[i] || z[i] == layout.upper[i];
    }
    let mut step = None;
    let mut kkt = None;
    // Variables released in this iteration's working-set loop: one that the next step
    // pushes outwards again is fixed for good, which ends any cycle.
    let mut released = vec![false; n];
    let mut locked = vec![false; n];
    for _ in 0..(2 * n + 2) {
        let Some(mut system) = Kkt::new(layout, gj, j_rows, fixed, curvature, cache) else {
            break;
        };
        let Some(s) = system.step(jtr, g, fixed, cache) else {
            break;
        };
        let snapshot = fixed.to_vec();
        // A free variable on its bound that the step would push outwards joins the set.
        let mut changed = false;
        for i in 0..n {
            let outwards = (z[i] == layout.lower[i] && s.dz[i] < 0.0)
                || (z[i] == layout.upper[i] && s.dz[i] > 0.0);
            if !fixed[i] && outwards {
                fixed[i] = true;
                changed = true;
                locked[i] = released[i];
            }
        }
        if !changed {
            // QP stationarity: (JᵀJ + Σλ∇²g) Δz + Gᵀλ − Jᵀr = μ, with μ ≥ 0 at a lower
            // bound and μ ≤ 0 at an upper bound; release the variable whose μ is most wrong.
            let mut hdz = j.tr_mul_vec(&j.mul_vec(&s.dz));
            for &(a, b, v) in curvature {
                hdz[a] += v * s.dz[b];
            }
            let gtl = gj.tr_mul_vec(&s.lambda);
            let mut worst: Option<(usize, f64)> = None;
            for i in (0..n).filter(|&i| fixed[i] && !locked[i]) {
                let m = hdz[i] + gtl[i] - jtr[i];
                let wrong = if z[i] == layout.lower[i] { -m } else { m };
                if wrong > 1e-12 * (1.0 + jtr[i].abs() + gtl[i].abs())
                    && worst.is_none_or(|(_, w)| wrong > w)
                {
                    worst = Some((i, wrong));
                }
            }
            if let Some((i, _)) = worst {
                fixed[i] = false;
                released[i] = true;
                changed = true;
            }
        }
        step = Some(s);
        kkt = Some((system, snapshot));
        if !changed {
            break;
        }
    }
    Some((step?, kkt?))
}

/// Minimise Σ((y − h(z))/σ)² subject to g(z) = 0 and the layout's bounds, from `start`.
pub fn solve(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    start: Vec<f64>,
    options: SolveOptions,
) -> Solution {
    solve_with(plant, layout, measured, start, options, &mut None)
}

/// `solve`, reusing (and leaving in `cache`) the symbolic analysis of the KKT matrix, whose
/// pattern depends only on the plant and the meters measured: restarts share it.
pub fn solve_with(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    start: Vec<f64>,
    options: SolveOptions,
    cache: &mut Option<Symbolic>,
) -> Solution {
    let n = layout.n;
    let mut z = start;
    for i in 0..n {
        z[i] = z[i].clamp(layout.lower[i], layout.upper[i]);
    }
    let mut fixed = vec![false; n];
    let mut last_step = f64::INFINITY;
    let mut iterations = 0;
    let mut status = SolveStatus::NotConverged;
    let mut mu = 1.0;
    // Multipliers of the previous iteration, for the constraint curvature of the Lagrangian.
    let mut lambda: Vec<f64> = vec![0.0; layout.rows.len()];
    let mut history: Vec<(f64, f64, f64, usize)> = Vec::new();
    // After a step with the constraint curvature that the line search refused, the next
    // iteration takes the plain Gauss–Newton step.
    let mut force_plain = false;

    while iterations < options.max_iterations {
        iterations += 1;
        let mut gj = Triplets::new(layout.rows.len(), n);
        let g = constraints(plant, layout, &z, Some(&mut gj));
        let (r, j) = scaled_measurements(plant, layout, measured, &z);
        // Newton on the constraints: add Σ_k λ_k ∇²g_k, from the bilinear splitter rows
        // (∂²/∂φ∂n_in = −1), once the constraints are nearly met; far from them the plain
        // Gauss–Newton matrix is the safer model.
        let near = norm_inf(&g) <= 1e-3 * flow_scale(layout, &z);
        let curved = near && !force_plain && lambda.iter().any(|&l| l != 0.0);
        let mut curvature = constraint_curvature(plant, layout, curved.then_some(&lambda[..]));
        force_plain = false;
        let jtr = j.tr_mul_vec(&r);
        let mut j_rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); j.nrows];
        for &(row, col, v) in &j.entries {
            j_rows[row].push((col, v));
        }
        let Some((mut step, mut kkt)) = qp_step(
            layout, &gj, &j, &j_rows, &jtr, &g, &z, &mut fixed, &curvature, cache,
        ) else {
            status = SolveStatus::NotConverged;
            break;
        };
        // The curvature term Σλ∇²g is indefinite: on the null space of G the model with it
        // need not be convex, and its step then need not descend (Nocedal & Wright §18.3,
        // where the Hessian is modified to be positive definite on that space). The plain
        // Gauss–Newton matrix JᵀJ is positive semidefinite, and its step always descends: it
        // replaces a step whose first-order change of the merit is not negative.
        let mut plain = !curved;
        let use_plain = |step: &mut Step,
                         kkt: &mut (Kkt, Vec<bool>),
                         curvature: &mut Vec<_>,
                         fixed: &mut [bool],
                         cache: &mut Option<Symbolic>| {
            let flat = constraint_curvature(plant, layout, None);
            let gn = qp_step(layout, &gj, &j, &j_rows, &jtr, &g, &z, fixed, &flat, cache);
            match gn {
                Some((s, k)) => {
                    (*step, *kkt, *curvature) = (s, k, flat);
                    true
                }
                None => false,
            }
        };
        if curved {
            let mu_trial = f64::max(mu, 2.0 * norm_inf(&step.lambda) + 1.0);
            let slope = -(0..n).map(|i| jtr[i] * step.dz[i]).sum::<f64>() - mu_trial * norm_1(&g);
            if slope >= 0.0 {
                plain = use_plain(&mut step, &mut kkt, &mut curvature, &mut fixed, cache);
            }
        }
        let scale = flow_scale(layout, &z);
        let g_inf = norm_inf(&g);
        let step_rel = (0..n)
            .map(|i| step.dz[i].abs() / (1.0 + z[i].abs()))
            .fold(0.0, f64::max);
        // How far the step would move the reconciled values, in units of their σ: along
        // unobservable directions the step length means nothing, this measure stays exact.
        let mut moves = norm_inf(&j.mul_vec(&step.dz));
        // Stagnation: the objective has stopped changing over two iterations with the
        // balances met; what remains of the step is rounding in poorly determined directions.
        let objective: f64 = r.iter().map(|x| x * x).sum();
        let stagnant = history.len() >= 2 && {
            let before = history[history.len() - 2].1;
            (before - objective).abs() <= 1e-12 * (1.0 + objective)
        };
        let feasible = g_inf <= options.constraint_tolerance * scale;
        if feasible && (step_rel <= options.step_tolerance || moves <= STATIONARY || stagnant) {
            // Stationarity is judged on the plain Gauss–Newton step: with the balances met,
            // J Δz is the projection of the scaled residuals on the directions the model
            // allows (the reduced gradient in the metric of JᵀJ), zero exactly at a stationary
            // point of the objective on g(z) = 0. The step with the constraint curvature can
            // be small where the point is not stationary (its model is not convex there).
            if !plain {
                // Usually from the factorisation in hand, by refinement; else factorised.
                let refined = kkt
                    .0
                    .step_without(&step, &jtr, &g, &fixed, &curvature, cache);
                // (The plain step, not the curved one, is taken if the point is not stationary.)
                plain = match refined {
                    Some(gn) => {
                        step = gn;
                        true
                    }
                    None => use_plain(&mut step, &mut kkt, &mut curvature, &mut fixed, cache),
                };
                if plain {
                    moves = norm_inf(&j.mul_vec(&step.dz));
                }
            }
            // A small relative step or an objective that stopped changing is taken as the end
            // only when what remains is at most STATIONARY_ROUNDING σ.
            if moves <= STATIONARY
                || ((step_rel <= options.step_tolerance || stagnant)
                    && moves <= STATIONARY_ROUNDING)
            {
                last_step = step_rel;
                status = SolveStatus::Converged;
                break;
            }
        }
        lambda.clone_from(&step.lambda);

        // Longest step that keeps the free variables within their bounds.
        let mut alpha_max: f64 = 1.0;
        let mut blocking = None;
        for i in 0..n {
            if fixed[i] || step.dz[i] == 0.0 {
                continue;
            }
            let limit = if step.dz[i] < 0.0 {
                layout.lower[i]
            } else {
                layout.upper[i]
            };
            if limit.is_finite() {
                let a = (limit - z[i]) / step.dz[i];
                if a < alpha_max {
                    alpha_max = a.max(0.0);
                    blocking = Some(i);
                }
            }
        }

        // Exact-penalty merit with a penalty above the largest multiplier.
        mu = f64::max(mu, 2.0 * norm_inf(&step.lambda) + 1.0);
        let merit = |z: &[f64]| -> f64 {
            let r = scaled_residuals(plant, layout, measured, z);
            let g = constraints(plant, layout, z, None);
            0.5 * r.iter().map(|x| x * x).sum::<f64>() + mu * norm_1(&g)
        };
        let m0 = 0.5 * r.iter().map(|x| x * x).sum::<f64>() + mu * norm_1(&g);
        let slope = -(0..n).map(|i| jtr[i] * step.dz[i]).sum::<f64>() - mu * norm_1(&g);
        let accept = |trial: &[f64], alpha: f64| {
            // Armijo on the merit, with room for rounding once the decrease reaches it.
            merit(trial) <= m0 + 1e-4 * alpha * slope.min(0.0) + 1e-13 * (1.0 + m0.abs())
        };
        let project = |v: Vec<f64>| -> Vec<f64> {
            v.into_iter()
                .enumerate()
                .map(|(i, x)| x.clamp(layout.lower[i], layout.upper[i]))
                .collect()
        };
        // First the full step projected on the bounds: a variable heading for its bound lands
        // on it (and joins the working set next iteration) instead of creeping towards it.
        let full = project((0..n).map(|i| z[i] + step.dz[i]).collect());
        let mut alpha = 1.0;
        let mut trial: Vec<f64> = full.clone();
        // Only when the projection moves no more than a hair: a real cut changes the step's
        // direction, and then the cut step below is the better guide.
        let projected_little = alpha_max >= 0.999;
        let mut accepted = projected_little && accept(&full, 1.0);
        if !accepted && projected_little {
            // Second-order correction against the Maratos effect (Nocedal & Wright §18.3): the
            // full step's own constraint violation is removed by a least-change step.
            let g_trial = constraints(plant, layout, &full, None);
            let zero = vec![0.0; n];
            // The same matrix as the step's: its factorisation serves again.
            let soc = if kkt.1 == fixed {
                kkt.0.step(&zero, &g_trial, &fixed, cache)
            } else {
                Kkt::new(layout, &gj, &j_rows, &fixed, &curvature, cache)
                    .and_then(|mut system| system.step(&zero, &g_trial, &fixed, cache))
            };
            if let Some(soc) = soc {
                let corrected = project((0..n).map(|i| full[i] + soc.dz[i]).collect());
                if accept(&corrected, 1.0) {
                    trial = corrected;
                    accepted = true;
                }
            }
        }
        if !accepted {
            // Backtrack along the step cut at the first bound it crosses.
            alpha = alpha_max;
            loop {
                trial = (0..n).map(|i| z[i] + alpha * step.dz[i]).collect();
                if accept(&trial, alpha) || alpha < 1e-10 {
                    break;
                }
                alpha *= 0.5;
            }
        }
        for i in 0..n {
            trial[i] = trial[i].clamp(layout.lower[i], layout.upper[i]);
        }
        if alpha == alpha_max {
            if let Some(b) = blocking {
                trial[b] = if step.dz[b] < 0.0 {
                    layout.lower[b]
                } else {
                    layout.upper[b]
                };
                fixed[b] = true;
            }
        }
        history.push((
            norm_inf(&g),
            r.iter().map(|x| x * x).sum::<f64>(),
            alpha,
            fixed.iter().filter(|&&f| f).count(),
        ));
        last_step = (0..n)
            .map(|i| (trial[i] - z[i]).abs() / (1.0 + z[i].abs()))
            .fold(0.0, f64::max);
        z = trial;
        if alpha < 1e-10 && alpha_max > 1e-10 {
            if !plain {
                // The step with the constraint curvature found no descent: the plain
                // Gauss–Newton step, which descends, is tried next.
                force_plain = true;
                continue;
            }
            // The line search found no descent along the Gauss–Newton step. With the balances
            // met and a step that would move no reconciled value by more than 1e-5 σ, that is
            // rounding at the optimum; otherwise the linearisation no longer helps and the
            // iteration has failed.
            if feasible && moves <= 1e-5 {
                status = SolveStatus::Converged;
            }
            break;
        }
    }

    let g = constraints(plant, layout, &z, None);
    let r = scaled_residuals(plant, layout, measured, &z);
    let constraint_residual = norm_inf(&g);
    if status != SolveStatus::Converged && constraint_residual > 1e-6 * flow_scale(layout, &z) {
        status = SolveStatus::Infeasible;
    }
    Solution {
        objective: r.iter().map(|x| x * x).sum(),
        constraint_residual,
        last_step,
        at_bound: fixed,
        history,
        z,
        status,
        iterations,
    }
}
