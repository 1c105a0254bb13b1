//! The line search (docs/methods.md §2, "Globalisation"): backtracking on the exact-penalty
//! merit ½‖r‖² + μ‖g‖₁ (Nocedal & Wright, *Numerical Optimization*, 2nd ed., §18.3), the full
//! step projected on the bounds tried first, with a second-order correction against the
//! Maratos effect (ibid.).

use super::kkt::Step;
use super::measured::{scaled_residuals, Measured};
use super::norms::norm_1;
use crate::equations::{constraints, Layout};
use crate::model::Plant;

/// Where the line search lands.
pub(super) struct Landing {
    /// The new point, within the bounds.
    pub(super) z: Vec<f64>,
    /// The step length taken.
    pub(super) alpha: f64,
    /// The longest step that keeps the free variables within their bounds.
    pub(super) alpha_max: f64,
    /// The variable the step was cut at, now on its bound: it joins the working set.
    pub(super) blocked: Option<usize>,
}

/// The point along `step` from z that the merit with penalty `mu` accepts (Armijo). `r` and
/// `g` are the scaled residuals and constraint values at z, `jtr` is Jᵀr; `correction` gives
/// the second-order correction for the constraint values of a trial point, with the working
/// set `fixed`.
#[allow(clippy::too_many_arguments)]
pub(super) fn line_search(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    step: &Step,
    (r, g, jtr): (&[f64], &[f64], &[f64]),
    mu: f64,
    fixed: &[bool],
    mut correction: impl FnMut(&[f64], &[bool]) -> Option<Step>,
) -> Landing {
    let n = layout.n;
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

    // Exact-penalty merit with a penalty above the largest multiplier (raised by the caller).
    let merit = |z: &[f64]| -> f64 {
        let r = scaled_residuals(plant, layout, measured, z);
        let g = constraints(plant, layout, z, None);
        0.5 * r.iter().map(|x| x * x).sum::<f64>() + mu * norm_1(&g)
    };
    let m0 = 0.5 * r.iter().map(|x| x * x).sum::<f64>() + mu * norm_1(g);
    let slope = -(0..n).map(|i| jtr[i] * step.dz[i]).sum::<f64>() - mu * norm_1(g);
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
        let soc = correction(&g_trial, fixed);
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
    let mut blocked = None;
    if alpha == alpha_max {
        if let Some(b) = blocking {
            trial[b] = if step.dz[b] < 0.0 {
                layout.lower[b]
            } else {
                layout.upper[b]
            };
            blocked = Some(b);
        }
    }
    Landing {
        z: trial,
        alpha,
        alpha_max,
        blocked,
    }
}
