//! σ of a what-if state, carried from the reconciled base case by the delta method.
//!
//! The new state z solves F(z, v) = 0, the model's equations and one row per specification,
//! whose values v are functions of the base state z₀ (or settings, without uncertainty). By the
//! implicit function theorem dz/dv = −F_z⁻¹ F_v, F_v diagonal in the specification rows; by
//! the delta method through the calibration map, Cov(v) = D P Dᵀ with D = ∂v/∂z₀ and P the
//! base estimate's covariance. A linear function aᵀz of the new state then has
//! Var = wᵀ Cov(v) w with w = (dz/dv)ᵀ a.

use nalgebra::DMatrix;

use crate::simulate::SpecSystem;
use crate::sparse::SparseLu;
use crate::uncertainty::Uncertainty;

use super::base::Calibrated;

/// The sensitivity of the new state to the uncertain specification values and their
/// covariance: an [`Uncertainty`] for figures and streams of the new state.
pub struct Propagated {
    /// Indices (into the parameters) of the values that carry uncertainty.
    uncertain: Vec<usize>,
    /// dz/dv_k for each uncertain k: column k is n long.
    sensitivity: Vec<Vec<f64>>,
    /// Cov(v) over the uncertain values.
    cov: DMatrix<f64>,
}

impl Propagated {
    /// `None` when F_z is singular at z (no isolated steady state there).
    pub fn new(
        plant: &crate::model::Plant,
        system: &SpecSystem,
        calibrated: &Calibrated,
        z: &[f64],
    ) -> Option<Propagated> {
        let (_, jac) = system.residual(plant, z);
        let lu = SparseLu::new(&jac)?;
        let d_value = system.value_derivatives(z);
        let n = jac.ncols;
        let mut sensitivity = Vec::with_capacity(calibrated.uncertain.len());
        for &k in &calibrated.uncertain {
            let mut e = vec![0.0; n];
            e[system.spec_row(k)] = d_value[k];
            let s: Vec<f64> = lu.solve(&e).into_iter().map(|v| -v).collect();
            if s.iter().any(|v| !v.is_finite()) {
                return None;
            }
            sensitivity.push(s);
        }
        Some(Propagated {
            uncertain: calibrated.uncertain.clone(),
            sensitivity,
            cov: calibrated.cov.clone(),
        })
    }

    /// w = (dz/dv)ᵀ a over the uncertain values.
    fn weights(&self, a: &[(usize, f64)]) -> Vec<f64> {
        self.sensitivity
            .iter()
            .map(|s| a.iter().map(|&(i, v)| v * s[i]).sum())
            .collect()
    }

    /// Number of specification values that carry the base case's uncertainty.
    pub fn uncertain_values(&self) -> usize {
        self.uncertain.len()
    }
}

impl Uncertainty for Propagated {
    /// Every value the model needs was checked observable in the base case (the calibration
    /// refuses otherwise), so every function of the new state is determined.
    fn is_observable(&self, _a: &[(usize, f64)]) -> bool {
        true
    }

    fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        let (wa, wb) = (self.weights(a), self.weights(b));
        let mut total = 0.0;
        for k in 0..wa.len() {
            for l in 0..wb.len() {
                total += wa[k] * self.cov[(k, l)] * wb[l];
            }
        }
        total
    }
}
