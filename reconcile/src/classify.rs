//! Classification and covariance at the solution (DOMAIN.md §5–§6), on the linearised system.
//!
//! With G the constraint Jacobian and J the σ-scaled measurement Jacobian, restricted to the
//! variables not held at a bound, let N be an orthonormal basis of the null space of G (the
//! directions the model allows) and B = J N with the singular value decomposition
//! B = U S Vᵀ of rank r. Then, as in the projection methods of Crowe, Garcia Campos & Hrymak
//! (1983) and Crowe (1986):
//! - the unobservable directions are N V₀ (V₀ the right singular vectors of zero singular
//!   value): a linear function aᵀz is observable iff a ⟂ N V₀;
//! - the covariance of the estimate is P = N V_r S_r⁻² V_rᵀ Nᵀ = L Lᵀ with L = N V_r S_r⁻¹;
//! - the hat matrix of the scaled measurements is U_r U_rᵀ, so the covariance of the scaled
//!   adjustments is I − U_r U_rᵀ, and meter i is redundant iff 1 − (U_r U_rᵀ)_ii > 0;
//! - the degree of redundancy is ν = m − r.
//!
//! This is the dense path, meant for loops of up to a few hundred states.

use nalgebra::DMatrix;

use crate::equations::{constraints, Layout};
use crate::model::Plant;
use crate::solve::{scaled_measurements, Measured};
use crate::sparse::Triplets;

/// Relative singular-value threshold for rank decisions.
const RANK_TOLERANCE: f64 = 1e-9;
/// A functional is unobservable when its projection on an unobservable direction exceeds this
/// fraction of its norm.
const OBSERVABILITY_TOLERANCE: f64 = 1e-7;
/// A meter is redundant when the variance of its scaled adjustment exceeds this.
pub const REDUNDANCY_TOLERANCE: f64 = 1e-8;

#[derive(Debug, Clone)]
pub struct Classification {
    /// Orthonormal unobservable directions, n × k.
    pub unobservable: DMatrix<f64>,
    /// Covariance factor: P = L Lᵀ, n × r.
    pub l: DMatrix<f64>,
    /// Left singular vectors of rank: hat matrix of the scaled measurements is U Uᵀ, m × r.
    pub u: DMatrix<f64>,
    /// ν = m − rank(J N).
    pub redundancy: usize,
}

/// Dense columns of a triplet matrix restricted to `cols`.
fn dense_columns(t: &Triplets, cols: &[usize], map: &[Option<usize>]) -> DMatrix<f64> {
    let mut m = DMatrix::zeros(t.nrows, cols.len());
    for &(r, c, v) in &t.entries {
        if let Some(k) = map[c] {
            m[(r, k)] += v;
        }
    }
    m
}

/// Right singular vectors of `a` (all of them, padding with zero rows when a is wide) and the
/// singular values (zero-extended to the number of columns).
fn full_svd(a: &DMatrix<f64>) -> (DMatrix<f64>, Vec<f64>, DMatrix<f64>) {
    let (rows, cols) = a.shape();
    let padded = if rows < cols {
        let mut p = DMatrix::zeros(cols, cols);
        p.view_mut((0, 0), (rows, cols)).copy_from(a);
        p
    } else {
        a.clone()
    };
    let svd = padded.svd(true, true);
    let u = svd.u.expect("requested");
    let v_t = svd.v_t.expect("requested");
    let mut order: Vec<usize> = (0..svd.singular_values.len()).collect();
    order.sort_by(|&i, &j| svd.singular_values[j].total_cmp(&svd.singular_values[i]));
    let s: Vec<f64> = order.iter().map(|&i| svd.singular_values[i]).collect();
    let v = DMatrix::from_fn(cols, order.len(), |r, k| v_t[(order[k], r)]);
    let u = DMatrix::from_fn(u.nrows().min(rows.max(1)), order.len(), |r, k| u[(r, order[k])]);
    let mut s_full = s;
    s_full.resize(cols, 0.0);
    // V may have fewer columns than `cols` only when rows ≥ cols is false, which padding avoids.
    (u, s_full, v)
}

pub fn classify(plant: &Plant, layout: &Layout, measured: &[Measured], z: &[f64], at_bound: &[bool]) -> Classification {
    let n = layout.n;
    let free: Vec<usize> = (0..n).filter(|&i| !at_bound[i]).collect();
    let mut map = vec![None; n];
    for (k, &i) in free.iter().enumerate() {
        map[i] = Some(k);
    }
    let mut gj = Triplets::new(layout.rows.len(), n);
    constraints(plant, layout, z, Some(&mut gj));
    let (_, j) = scaled_measurements(plant, layout, measured, z);
    let g = dense_columns(&gj, &free, &map);
    let jf = dense_columns(&j, &free, &map);
    let nf = free.len();
    let m = measured.len();

    // Null space of G: right singular vectors beyond its rank.
    let nullspace = if g.nrows() == 0 {
        DMatrix::identity(nf, nf)
    } else {
        let (_, s, v) = full_svd(&g);
        let smax = s.first().copied().unwrap_or(0.0);
        let rank = s.iter().filter(|&&x| x > RANK_TOLERANCE * smax.max(1e-300)).count();
        v.columns(rank, nf - rank).into_owned()
    };
    let q = nullspace.ncols();

    let (l_free, u, unobs_free, rank) = if q == 0 {
        (DMatrix::zeros(nf, 0), DMatrix::zeros(m, 0), DMatrix::zeros(nf, 0), 0)
    } else if m == 0 {
        (DMatrix::zeros(nf, 0), DMatrix::zeros(0, 0), nullspace.clone(), 0)
    } else {
        let b = &jf * &nullspace;
        let (u_full, s, v) = full_svd(&b);
        let smax = s.first().copied().unwrap_or(0.0);
        let rank = s.iter().filter(|&&x| x > RANK_TOLERANCE * smax.max(1e-300)).count();
        let vr = v.columns(0, rank);
        let mut l = &nullspace * vr;
        for k in 0..rank {
            l.column_mut(k).scale_mut(1.0 / s[k]);
        }
        let u = u_full.view((0, 0), (m, rank)).into_owned();
        let unobs = &nullspace * v.columns(rank, q - rank);
        (l, u, unobs, rank)
    };

    let embed = |a: &DMatrix<f64>| {
        let mut full = DMatrix::zeros(n, a.ncols());
        for (k, &i) in free.iter().enumerate() {
            full.row_mut(i).copy_from(&a.row(k));
        }
        full
    };
    Classification {
        unobservable: embed(&unobs_free),
        l: embed(&l_free),
        u,
        redundancy: m - rank,
    }
}

impl Classification {
    /// Is the linear function with gradient `a` (sparse) determined by the data?
    pub fn is_observable(&self, a: &[(usize, f64)]) -> bool {
        let norm = a.iter().map(|(_, v)| v * v).sum::<f64>().sqrt();
        if norm == 0.0 {
            return true;
        }
        (0..self.unobservable.ncols()).all(|k| {
            let p: f64 = a.iter().map(|&(i, v)| v * self.unobservable[(i, k)]).sum();
            p.abs() <= OBSERVABILITY_TOLERANCE * norm
        })
    }

    /// Lᵀa: the covariance of two functions is the dot product of their projections.
    pub fn project(&self, a: &[(usize, f64)]) -> Vec<f64> {
        (0..self.l.ncols())
            .map(|k| a.iter().map(|&(i, v)| v * self.l[(i, k)]).sum())
            .collect()
    }

    /// Standard deviation of a linear function with gradient `a`.
    pub fn sigma(&self, a: &[(usize, f64)]) -> f64 {
        self.project(a).iter().map(|x| x * x).sum::<f64>().sqrt()
    }

    /// (U Uᵀ)_ii: the share of meter i's variance its reconciled value keeps.
    pub fn leverage(&self, i: usize) -> f64 {
        self.u.row(i).iter().map(|x| x * x).sum::<f64>().min(1.0)
    }

    /// Variance of the scaled adjustment of meter i, 1 − (U Uᵀ)_ii.
    pub fn adjustment_variance(&self, i: usize) -> f64 {
        (1.0 - self.leverage(i)).max(0.0)
    }

    pub fn is_redundant(&self, i: usize) -> bool {
        self.adjustment_variance(i) > REDUNDANCY_TOLERANCE
    }

    /// Covariance of the σ-scaled adjustments, I − U Uᵀ (m × m): the seam for fault
    /// identification, whose bias signatures live in this space.
    pub fn scaled_adjustment_covariance(&self) -> DMatrix<f64> {
        let m = self.u.nrows();
        DMatrix::identity(m, m) - &self.u * self.u.transpose()
    }
}
