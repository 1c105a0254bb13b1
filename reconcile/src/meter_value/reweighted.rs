//! One meter's weight changed: σ halved (δ = 3w) or the meter lost (δ = −w), by the
//! Sherman–Morrison formula on the reconciled covariance (see the module above).

use crate::uncertainty::Uncertainty;

/// How far a lost meter's leverage may fall short of 1 and still count as non-redundant
/// (the classification's redundancy tolerance).
pub(super) const NON_REDUNDANT: f64 = crate::classify::REDUNDANCY_TOLERANCE;

/// A function loads on the lost direction d = P j when |aᵀd| exceeds this share of ‖a‖‖d‖:
/// the classification's own observability tolerance.
const LOADS: f64 = 1e-7;

/// The estimate's uncertainty with one meter's weight changed.
pub struct Reweighted<'a> {
    base: &'a dyn Uncertainty,
    /// P j, dense on the state (j the meter's gradient in its uom).
    pj: &'a [f64],
    /// jᵀPj.
    jpj: f64,
    change: Change,
}

enum Change {
    /// P' = P − c (P j)(P j)ᵀ with c = δ / (1 + δ jᵀPj).
    RankOne(f64),
    /// A non-redundant meter lost: the direction d = P j is no longer determined.
    Lost,
}

fn dot(a: &[(usize, f64)], x: &[f64]) -> f64 {
    a.iter().map(|&(i, v)| v * x[i]).sum()
}

impl<'a> Reweighted<'a> {
    /// The covariance with the weight of the meter with gradient `j`, P j = `pj` and σ
    /// `sigma` multiplied by `factor` (4 for σ halved, 0 for the meter lost).
    pub fn new(
        base: &'a dyn Uncertainty,
        j: &[(usize, f64)],
        pj: &'a [f64],
        sigma: f64,
        factor: f64,
    ) -> Self {
        let jpj = dot(j, pj);
        let w = 1.0 / (sigma * sigma);
        let delta = (factor - 1.0) * w;
        let denom = 1.0 + delta * jpj;
        let change = if factor == 0.0 && denom <= NON_REDUNDANT {
            Change::Lost
        } else {
            Change::RankOne(delta / denom)
        };
        Reweighted {
            base,
            pj,
            jpj,
            change,
        }
    }

    /// aᵀ(P − P′)b: what the change takes off the covariance of two functions.
    pub fn change_of(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        let (apj, jpb) = (dot(a, self.pj), dot(b, self.pj));
        match self.change {
            Change::RankOne(c) => c * apj * jpb,
            Change::Lost if self.jpj > 0.0 => apj * jpb / self.jpj,
            Change::Lost => 0.0,
        }
    }

    /// The meter's loss leaves some function of the state undetermined.
    pub fn loses_a_direction(&self) -> bool {
        matches!(self.change, Change::Lost)
    }
}

impl Uncertainty for Reweighted<'_> {
    fn is_observable(&self, a: &[(usize, f64)]) -> bool {
        if !self.base.is_observable(a) {
            return false;
        }
        match &self.change {
            Change::RankOne(_) => true,
            Change::Lost => {
                let ad = dot(a, self.pj);
                let norm_a = a.iter().map(|(_, v)| v * v).sum::<f64>().sqrt();
                let norm_d = self.pj.iter().map(|v| v * v).sum::<f64>().sqrt();
                ad.abs() <= LOADS * norm_a * norm_d
            }
        }
    }

    fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        self.base.covariance(a, b) - self.change_of(a, b)
    }

    fn by_parts(&self) -> bool {
        self.base.by_parts()
    }
}
