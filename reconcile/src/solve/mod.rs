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
//!
//! Here the iteration and its stopping tests; the KKT system in `kkt`, the working set in
//! `active_set`, the merit and line search in `line_search`, the measurements' residuals in
//! `measured`.

mod active_set;
mod kkt;
mod line_search;
mod measured;
mod norms;

pub use measured::Measured;
pub(crate) use measured::{scaled_measurements, scaled_residuals};

use active_set::qp_step;
use kkt::{constraint_curvature, Kkt, Step};
use line_search::{line_search, Landing};
use norms::{norm_1, norm_inf};

use crate::cancel::Cancel;
use crate::equations::{constraints, Layout};
use crate::model::Plant;
use crate::sparse::{Symbolic, Triplets};

/// How the iteration ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SolveStatus {
    Converged,
    NotConverged,
    Infeasible,
}

/// The estimate's state and how the iteration reached it.
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
    /// Checked before each iteration: once it has passed, the iteration stops where it is,
    /// `NotConverged` (the caller, which gave it, tells that from a genuine failure by
    /// checking it too). Never, by default.
    pub cancel: Cancel,
}

impl Default for SolveOptions {
    fn default() -> Self {
        SolveOptions {
            max_iterations: 100,
            constraint_tolerance: 1e-10,
            step_tolerance: 1e-9,
            cancel: Cancel::never(),
        }
    }
}

/// The largest flow, at least 1 kmol/h: the scale of the constraint tolerances.
fn flow_scale(layout: &Layout, z: &[f64]) -> f64 {
    norm_inf(&z[..layout.extent_start]).max(1.0)
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
        if options.cancel.is_cancelled() {
            break;
        }
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

        // Exact-penalty merit with a penalty above the largest multiplier.
        mu = f64::max(mu, 2.0 * norm_inf(&step.lambda) + 1.0);
        let correction = |g_trial: &[f64], fixed: &[bool]| {
            let zero = vec![0.0; n];
            // The same matrix as the step's: its factorisation serves again.
            if kkt.1 == fixed {
                kkt.0.step(&zero, g_trial, fixed, cache)
            } else {
                Kkt::new(layout, &gj, &j_rows, fixed, &curvature, cache)
                    .and_then(|mut system| system.step(&zero, g_trial, fixed, cache))
            }
        };
        let Landing {
            z: trial,
            alpha,
            alpha_max,
            blocked,
        } = line_search(
            plant,
            layout,
            measured,
            &z,
            &step,
            (&r, &g, &jtr),
            mu,
            &fixed,
            correction,
        );
        if let Some(b) = blocked {
            fixed[b] = true;
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
