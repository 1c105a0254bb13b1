//! The primal active set for the bounds (n ≥ 0, 0 ≤ φ ≤ 1, ξ ≥ 0 for irreversible reactions;
//! Nocedal & Wright, *Numerical Optimization*, 2nd ed., §16.5, docs/methods.md §2): the
//! working set of one iteration's step.

use super::kkt::{Kkt, Step};
use crate::equations::Layout;
use crate::sparse::{Symbolic, Triplets};

/// The step of one iteration's quadratic model with the working set: every variable on a bound
/// is fixed, less those whose bound multiplier has the wrong sign (they want to move
/// inwards). Returns the step and the factorised KKT matrix with the working set it was built
/// for; `fixed` is left as the final working set.
#[allow(clippy::too_many_arguments)]
pub(super) fn qp_step(
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
        // A free variable on its bound that the step would push outwards joins the set. For
        // one released in this loop, a step that merely rounds to either side of zero leaves
        // it free: while the balances tie it to others still on their bounds it cannot move
        // alone, and must wait for them to be released too.
        let tiny = 1e-12 * s.dz.iter().fold(0.0f64, |m, d| m.max(d.abs()));
        let mut changed = false;
        for i in 0..n {
            let slack = if released[i] { tiny } else { 0.0 };
            let outwards = (z[i] == layout.lower[i] && s.dz[i] < -slack)
                || (z[i] == layout.upper[i] && s.dz[i] > slack);
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
        // What is left of an outward step of a free variable on its bound is rounding (a
        // larger one fixed it above): drop it, so that the step keeps the bound exactly and
        // the line search is not stopped at zero length by it.
        let mut s = s;
        for i in 0..n {
            let outwards = (z[i] == layout.lower[i] && s.dz[i] < 0.0)
                || (z[i] == layout.upper[i] && s.dz[i] > 0.0);
            if !fixed[i] && outwards {
                s.dz[i] = 0.0;
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
