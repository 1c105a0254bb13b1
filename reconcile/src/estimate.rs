//! A period's estimate with everything needed to test it (docs/methods.md §2–§3): the seam on
//! which fault identification, the loop figures and the report build.

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::classify::Classification;
use crate::equations::{measurement, Layout};
use crate::model::Plant;
use crate::solve::{Measured, Solution};

/// The estimate of one period with everything needed to test it: the seam on which fault
/// identification builds.
#[derive(Debug, Clone)]
pub struct Estimate {
    pub layout: Layout,
    pub measured: Vec<Measured>,
    pub solution: Solution,
    pub classification: Classification,
    /// Restarts tried because the first estimate did not converge or failed the global test.
    pub restarts: usize,
}

impl Estimate {
    /// Correlations ρᵢⱼ = Cᵢⱼ / √(Cᵢᵢ Cⱼⱼ) of the measured meters' adjustments (i, j index
    /// `measured`, i ≠ j), C the covariance of the σ-scaled adjustments; only |ρ| ≥ `min_abs`
    /// and meters with adjustment variance. Under a bias in meter j the expected normalised
    /// adjustment of meter i is ρᵢⱼ times that of j. Empty when the classification holds no
    /// dense covariance (the sparse path).
    pub fn adjustment_correlations(&self, min_abs: f64) -> Vec<(usize, usize, f64)> {
        uncancelled(self.adjustment_correlations_cancellable(min_abs, &Cancel::never()))
    }

    /// [`Estimate::adjustment_correlations`], given up once `cancel` has passed (on the sparse
    /// path the covariance costs one solve per meter, and the deadline is checked before
    /// each).
    pub fn adjustment_correlations_cancellable(
        &self,
        min_abs: f64,
        cancel: &Cancel,
    ) -> Result<Vec<(usize, usize, f64)>, Cancelled> {
        let c = self
            .classification
            .scaled_adjustment_covariance_cancellable(cancel)?;
        let m = self.measured.len();
        let mut out = Vec::new();
        if c.nrows() != m || c.ncols() != m {
            return Ok(out);
        }
        for i in 0..m {
            for j in (0..m).filter(|&j| j != i) {
                let (cii, cjj) = (c[(i, i)], c[(j, j)]);
                if cii <= 1e-9 || cjj <= 1e-9 {
                    continue;
                }
                let rho = (c[(i, j)] / (cii * cjj).sqrt()).clamp(-1.0, 1.0);
                if rho.is_finite() && rho.abs() >= min_abs {
                    out.push((i, j, rho));
                }
            }
        }
        Ok(out)
    }

    /// Reconciled value of measured meter k (index into `measured`) and its gradient.
    pub fn reconciled(&self, plant: &Plant, k: usize) -> (f64, Vec<(usize, f64)>) {
        measurement(
            plant,
            &self.layout,
            &plant.meters[self.measured[k].meter],
            &self.solution.z,
        )
    }
}
