//! The base case of a what-if: one period's reconciled estimate, or a range of periods whose
//! calibrated values are combined by their covariance.
//!
//! For a range, each period t gives the specification values v_t with covariance C_t (the
//! delta method through the calibration map, on that period's estimate). Taken as independent
//! estimates of one steady state, they combine by inverse-covariance weighting, the
//! minimum-variance unbiased combination (generalised least squares; e.g. Kay, *Fundamentals
//! of Statistical Signal Processing: Estimation Theory*, 1993, §4.6):
//!
//!   v = (Σ_t C_t⁻¹)⁻¹ Σ_t C_t⁻¹ v_t,   Cov(v) = (Σ_t C_t⁻¹)⁻¹,
//!
//! with pseudo-inverses where a C_t is singular (a value that period pins exactly). The new
//! state starts from the last period's.

use nalgebra::DMatrix;

use crate::classify::Classification;
use crate::equations::Layout;
use crate::estimate::Estimate;
use crate::model::Plant;

use super::calibrate::{self, quantity, Param, ReactionHold};
use super::settings::Set;
use super::WhatIfError;

/// Eigenvalues below this share of the largest are dropped in a pseudo-inverse.
const PINV_TOLERANCE: f64 = 1e-12;

/// The estimates a what-if starts from, oldest first.
pub struct BaseCase<'a> {
    pub estimates: Vec<&'a Estimate>,
}

/// The model's specifications with the covariance of their uncertain values.
pub struct Calibrated {
    pub params: Vec<Param>,
    /// Indices of the params whose values carry the base case's uncertainty.
    pub uncertain: Vec<usize>,
    /// Cov(v) over `uncertain`.
    pub cov: DMatrix<f64>,
}

impl<'a> BaseCase<'a> {
    pub fn layout(&self) -> &'a Layout {
        &self.estimates[0].layout
    }

    /// The state Newton starts from: the last period's.
    pub fn start(&self) -> &'a [f64] {
        &self.estimates[self.estimates.len() - 1].solution.z
    }

    /// The specifications at these settings; every uncertain value checked observable in each
    /// period, and combined over the periods.
    pub fn calibrated(
        &self,
        plant: &Plant,
        sets: &[Set],
        free: Option<usize>,
        hold: ReactionHold,
    ) -> Result<Calibrated, WhatIfError> {
        let mut each = Vec::with_capacity(self.estimates.len());
        for est in &self.estimates {
            let params =
                calibrate::calibrate(plant, &est.layout, &est.solution.z, sets, free, hold)?;
            for p in &params {
                if !p.grad.is_empty() && !est.classification.is_observable(&p.grad) {
                    return Err(WhatIfError::Unobservable(quantity(&p.spec)));
                }
            }
            let uncertain: Vec<usize> = (0..params.len())
                .filter(|&k| !params[k].grad.is_empty())
                .collect();
            let cov = parameter_covariance(&est.classification, &params, &uncertain);
            each.push(Calibrated {
                params,
                uncertain,
                cov,
            });
        }
        if each.len() == 1 {
            return Ok(each.pop().expect("one"));
        }
        Ok(combine(each))
    }
}

/// Inverse-covariance weighting of the periods' values (the module header).
fn combine(each: Vec<Calibrated>) -> Calibrated {
    let uncertain = each[0].uncertain.clone();
    let m = uncertain.len();
    let mut info = DMatrix::<f64>::zeros(m, m);
    let mut weighted = DMatrix::<f64>::zeros(m, 1);
    for c in &each {
        let w = pseudo_inverse(&c.cov);
        let v = DMatrix::from_iterator(m, 1, uncertain.iter().map(|&k| c.params[k].spec.value()));
        weighted += &w * v;
        info += w;
    }
    let cov = pseudo_inverse(&info);
    let v = &cov * weighted;
    let mut params = each.into_iter().last().expect("periods").params;
    for (j, &k) in uncertain.iter().enumerate() {
        set_value(&mut params[k].spec, v[(j, 0)]);
    }
    Calibrated {
        params,
        uncertain,
        cov,
    }
}

fn set_value(spec: &mut crate::simulate::Spec, v: f64) {
    use crate::simulate::Spec;
    match spec {
        Spec::ComponentFlow { value, .. }
        | Spec::Extent { value, .. }
        | Spec::Conversion { value, .. }
        | Spec::SplitFraction { value, .. }
        | Spec::Recovery { value, .. }
        | Spec::InletFraction { value, .. } => *value = v,
    }
}

/// Pseudo-inverse of a symmetric positive semi-definite matrix by its eigen-decomposition.
fn pseudo_inverse(a: &DMatrix<f64>) -> DMatrix<f64> {
    let n = a.nrows();
    if n == 0 {
        return a.clone();
    }
    let sym = (a + a.transpose()) * 0.5;
    let eig = sym.symmetric_eigen();
    let largest = eig.eigenvalues.iter().fold(0.0_f64, |m, &v| m.max(v.abs()));
    let mut out = DMatrix::zeros(n, n);
    for (k, &lambda) in eig.eigenvalues.iter().enumerate() {
        if lambda > PINV_TOLERANCE * largest && lambda > 0.0 {
            let q = eig.eigenvectors.column(k);
            out += (q * q.transpose()) / lambda;
        }
    }
    out
}

/// Cov(v) = D P Dᵀ over the uncertain values, by the base classification's covariance of two
/// linear functions of the base state (dense or sparse path alike).
pub fn parameter_covariance(
    base: &Classification,
    params: &[Param],
    uncertain: &[usize],
) -> DMatrix<f64> {
    let m = uncertain.len();
    let mut cov = DMatrix::zeros(m, m);
    if base.sparse.is_none() {
        // Dense path: P = L Lᵀ, so Cov = (Lᵀ D_k) · (Lᵀ D_l); project each once.
        let proj: Vec<Vec<f64>> = uncertain
            .iter()
            .map(|&k| base.project(&params[k].grad))
            .collect();
        for k in 0..m {
            for l in 0..=k {
                let c: f64 = proj[k].iter().zip(&proj[l]).map(|(x, y)| x * y).sum();
                cov[(k, l)] = c;
                cov[(l, k)] = c;
            }
        }
        return cov;
    }
    for k in 0..m {
        for l in 0..=k {
            let c = base.covariance(&params[uncertain[k]].grad, &params[uncertain[l]].grad);
            cov[(k, l)] = c;
            cov[(l, k)] = c;
        }
    }
    cov
}
