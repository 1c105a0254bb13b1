//! GLR and serial compensation (Narasimhan & Mah 1987, AIChE J. 33) from the sparse
//! classification's factorisation, without W as a matrix: the same statistics as `dense.rs`
//! with a handful of solves of the KKT system instead of one per meter and per unit.
//!
//! With W = I − J P Jᵀ (a projector), the accepted directions u₁ … u_k (orthonormal, in the
//! range of W) and W_k = W − Σ u_j u_jᵀ, hypothesis f has the statistic T = (fᵀ r_k)² / (fᵀ W_k f)
//! with r_k = W_k r₀, and
//!
//! - fᵀ W_k f = fᵀ W f − Σ (u_jᵀ f)², fᵀ r_k = fᵀ W r₀ − Σ (u_jᵀ f)(u_jᵀ r₀): each accepted
//!   direction corrects every statistic by a rank-one term;
//! - a bias in meter i (f = e_i): fᵀ W f = 1 − (J P Jᵀ)_ii, from the selected inverse;
//!   fᵀ r_k = (r_k)_i, with W r₀ one solve;
//! - a leak with right-hand side d: its signature f_d = J x_d, x_d the state part of
//!   K̃⁻¹ [0; d], satisfies W f_d = f_d (`SparseCovariance::constraint_signature`), so
//!   fᵀ W f = ‖f_d‖², read from the selected inverse's entries among the unit's balance rows
//!   (`SparseCovariance::signature_norm`), and f_dᵀ v = dᵀ y(v) for any v with one solve for
//!   y(v) (`SparseCovariance::signature_products`): one solve gives fᵀ W r₀ of every leak, and
//!   one more every u_jᵀ f.
//!
//! Each round then costs the lead's W-column (one solve: W e_h for a meter, f_d for a leak),
//! corrected by the earlier directions, and its products with every leak's signature (one
//! solve), which give the collinearity test of the group (cos = fᵀ W_k f_h / (‖W_k f‖ ‖W_k f_h‖))
//! and, divided by ‖W_k f_h‖, the next rank-one corrections.

use super::{
    leak_directions, meter_hypotheses, Basis, Hypothesis, Identification, Round, DETECTABLE,
    EQUIVALENCE_TOLERANCE,
};
use crate::cancel::{Cancel, Cancelled};
use crate::covariance::SparseCovariance;
use crate::model::Plant;
use crate::stats::{chi2_critical, global_test, sidak};

/// Where a hypothesis's signature lives.
enum Signature {
    /// A bias in the meter at this index among the measured.
    Meter(usize),
    /// A leak with this constraint right-hand side (row, value).
    Leak(Vec<(usize, f64)>),
}

impl Signature {
    /// fᵀ v, given v and y(v) = `signature_products(v)`.
    fn dot(&self, v: &[f64], products: &[f64]) -> f64 {
        match self {
            Signature::Meter(k) => v[*k],
            Signature::Leak(d) => d.iter().map(|&(row, x)| x * products[row]).sum(),
        }
    }
}

/// A leak signature's ‖f‖² below this share of the terms it is the difference of is rounding:
/// the leak is invisible to this meter set (J x_d in the range of J N) and is not tested.
const ROUNDING: f64 = 1e-10;

/// Serial compensation from the factorisation, from the σ-scaled residuals `r0` at the
/// solution.
pub(super) fn identify(
    plant: &Plant,
    est: &Basis,
    cov: &SparseCovariance,
    r0: &[f64],
    cancel: &Cancel,
) -> Result<Identification, Cancelled> {
    let c = est.classification;
    let mut result = Identification::default();
    let m = r0.len();
    let mut r = cov.adjustment(r0);
    let mut dof = c.redundancy;
    let objective = |r: &[f64]| r.iter().map(|x| x * x).sum::<f64>();
    if global_test(objective(&r), dof, plant.alpha).passed {
        result.compensated_objective = objective(&r);
        result.compensated_dof = dof;
        return Ok(result);
    }
    cancel.check()?;

    let mut hyps: Vec<Hypothesis> = Vec::new();
    let mut sigs: Vec<Signature> = Vec::new();
    // fᵀ W_k f as compensated so far, and fᵀ W f before (the detectability test's reference).
    let mut den: Vec<f64> = Vec::new();
    let mut den0: Vec<f64> = Vec::new();
    // Leaks whose ‖f‖² is rounding are not tested (see ROUNDING).
    let mut invisible: Vec<bool> = Vec::new();
    for (k, hyp) in meter_hypotheses(plant, est) {
        hyps.push(hyp);
        sigs.push(Signature::Meter(k));
        den.push(1.0 - cov.leverage(k));
        den0.push(1.0);
        invisible.push(false);
    }
    for (hyp, d) in leak_directions(plant, est) {
        let (norm, terms) = cov.signature_norm(&d);
        hyps.push(hyp);
        sigs.push(Signature::Leak(d));
        den.push(norm);
        den0.push(norm);
        invisible.push(norm <= ROUNDING * terms);
    }
    let leaks = sigs.iter().any(|s| matches!(s, Signature::Leak(_)));
    // fᵀ W_k r₀ of every leak (a meter's is read from r_k).
    let mut leak_num: Vec<f64> = {
        let products = if leaks {
            cov.signature_products(&r)
        } else {
            Vec::new()
        };
        sigs.iter()
            .map(|s| match s {
                Signature::Meter(_) => 0.0,
                Signature::Leak(_) => s.dot(&r, &products),
            })
            .collect()
    };
    // The accepted directions u_j (orthonormal, in the range of W) and u_jᵀ f of every
    // hypothesis.
    let mut directions: Vec<Vec<f64>> = Vec::new();
    let mut along: Vec<Vec<f64>> = Vec::new();
    let mut accepted = vec![false; hyps.len()];
    let tested = hyps.len().max(1);
    // Per-hypothesis level: Šidák over every hypothesis tested; T follows χ²(1) under H0.
    let critical = chi2_critical(sidak(plant.alpha, tested), 1);

    while dof > 0 && !global_test(objective(&r), dof, plant.alpha).passed {
        // Each round costs two solves with the factorisation.
        cancel.check()?;
        let mut round = Round {
            num: vec![0.0; hyps.len()],
            den: vec![None; hyps.len()],
        };
        for h in 0..hyps.len() {
            if accepted[h] || invisible[h] || den[h] <= DETECTABLE * den0[h] {
                continue;
            }
            round.num[h] = match sigs[h] {
                Signature::Meter(k) => r[k],
                Signature::Leak(_) => leak_num[h],
            };
            round.den[h] = Some(den[h]);
        }
        let Some((h, t)) = round.strongest() else {
            break;
        };
        if t <= critical {
            break;
        }
        // The lead's signature W_k f_h = W f_h − Σ u_j (u_jᵀ f_h): one solve, and its products
        // f_kᵀ W_k f_h with every signature: one more.
        let mut lead = match &sigs[h] {
            Signature::Meter(k) => {
                let mut e = vec![0.0; m];
                e[*k] = 1.0;
                cov.adjustment(&e)
            }
            Signature::Leak(d) => {
                let mut dense = vec![0.0; est.layout.rows.len()];
                for &(row, v) in d {
                    dense[row] += v;
                }
                cov.constraint_signature(&dense)
            }
        };
        for (u, a) in directions.iter().zip(&along) {
            let a = a[h];
            lead.iter_mut().zip(u).for_each(|(x, ui)| *x -= a * ui);
        }
        let lead_norm = lead.iter().map(|x| x * x).sum::<f64>().sqrt();
        let products = if leaks {
            cov.signature_products(&lead)
        } else {
            Vec::new()
        };
        let cross: Vec<f64> = sigs.iter().map(|s| s.dot(&lead, &products)).collect();
        let collinear = |k: usize| {
            round.den[k].is_some_and(|q| {
                (cross[k] / (q.sqrt() * lead_norm)).abs() >= 1.0 - EQUIVALENCE_TOLERANCE
            })
        };
        for k in round.accept(plant.alpha, &hyps, (h, t), collinear, &mut result) {
            accepted[k] = true;
        }
        // Compensate: u = W_k f_h / ‖W_k f_h‖ out of r and every statistic.
        let u: Vec<f64> = lead.iter().map(|x| x / lead_norm).collect();
        let a: Vec<f64> = cross.iter().map(|c| c / lead_norm).collect();
        let ur0: f64 = u.iter().zip(r0).map(|(x, y)| x * y).sum();
        for k in 0..hyps.len() {
            den[k] -= a[k] * a[k];
            leak_num[k] -= a[k] * ur0;
        }
        r.iter_mut().zip(&u).for_each(|(x, ui)| *x -= ur0 * ui);
        directions.push(u);
        along.push(a);
        dof -= 1;
    }
    result.compensated_objective = objective(&r);
    result.compensated_dof = dof;
    Ok(result)
}
