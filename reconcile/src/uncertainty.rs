//! What a σ of a derived value needs: whether a linear function of the state is determined by
//! the data, and the covariance of two such functions. The reconciled estimate's
//! classification is one source; a what-if's state, carried from the base case through the
//! implicit function theorem, is another (whatif/propagate.rs).

use crate::classify::Classification;

pub trait Uncertainty {
    /// Is the linear function with gradient `a` (sparse, on the state) determined by the data?
    fn is_observable(&self, a: &[(usize, f64)]) -> bool;
    /// Covariance of two linear functions with gradients `a` and `b`.
    fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64;
    /// Standard deviation of a linear function with gradient `a`.
    fn sigma(&self, a: &[(usize, f64)]) -> f64 {
        self.covariance(a, a).max(0.0).sqrt()
    }
    /// A ratio's variance is better taken in parts (aᵀPa − 2f aᵀPb + f² bᵀPb) / b², as on the
    /// sparse path, where P b of a recurring denominator is solved for once.
    fn by_parts(&self) -> bool {
        false
    }
}

impl Uncertainty for Classification {
    fn is_observable(&self, a: &[(usize, f64)]) -> bool {
        Classification::is_observable(self, a)
    }

    fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        Classification::covariance(self, a, b)
    }

    fn sigma(&self, a: &[(usize, f64)]) -> f64 {
        Classification::sigma(self, a)
    }

    fn by_parts(&self) -> bool {
        self.sparse.is_some()
    }
}
