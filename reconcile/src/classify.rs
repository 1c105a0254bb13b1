//! Classification and covariance at the solution (docs/methods.md §3), on the linearised system.
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
//! This is the dense path, meant for loops of up to a few hundred states. From
//! SPARSE_THRESHOLD states on, `classify` takes the sparse path of covariance.rs (the same
//! quantities from one sparse LDLᵀ of the KKT matrix).

use nalgebra::DMatrix;

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::covariance::SparseCovariance;
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
/// From this many states on (and with no variable held at a bound), classification takes the
/// sparse path: the dense one grows as n³ (0.16 s at 823 states, 3.6 s at 2 074).
pub const SPARSE_THRESHOLD: usize = 600;

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
    /// On the sparse path: the covariance from the KKT factorisation, and then `l` and `u`
    /// are empty (n × 0, m × 0).
    pub sparse: Option<SparseCovariance>,
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
    // A matrix holding NaN or ∞ (a solve diverged on absurd readings, a σ so small its inverse
    // overflows) has no SVD, and nalgebra's iteration never ends on one. It is taken as carrying
    // no information, all singular values zero: nothing is called observable or redundant.
    let padded = if padded.iter().all(|x| x.is_finite()) {
        padded
    } else {
        DMatrix::zeros(padded.nrows(), padded.ncols())
    };
    let svd = padded.svd(true, true);
    let u = svd.u.expect("requested");
    let v_t = svd.v_t.expect("requested");
    let mut order: Vec<usize> = (0..svd.singular_values.len()).collect();
    order.sort_by(|&i, &j| svd.singular_values[j].total_cmp(&svd.singular_values[i]));
    let s: Vec<f64> = order.iter().map(|&i| svd.singular_values[i]).collect();
    let v = DMatrix::from_fn(cols, order.len(), |r, k| v_t[(order[k], r)]);
    let u = DMatrix::from_fn(u.nrows().min(rows.max(1)), order.len(), |r, k| {
        u[(r, order[k])]
    });
    let mut s_full = s;
    s_full.resize(cols, 0.0);
    // V may have fewer columns than `cols` only when rows ≥ cols is false, which padding avoids.
    (u, s_full, v)
}

/// The singular values of `a`, in no particular order, as `full_svd` finds them (the same
/// padding of a wide matrix, all zero for a matrix holding NaN or ∞) without forming the
/// singular vectors: nalgebra's iteration updates the values alike with or without them, so
/// they are the same numbers, at about half the cost.
fn singular_values(a: &DMatrix<f64>) -> Vec<f64> {
    if !a.iter().all(|x| x.is_finite()) {
        return vec![0.0; a.ncols()];
    }
    let (rows, cols) = a.shape();
    let svd = if rows < cols {
        let mut p = DMatrix::zeros(cols, cols);
        p.view_mut((0, 0), (rows, cols)).copy_from(a);
        p.svd(false, false)
    } else {
        a.clone().svd(false, false)
    };
    svd.singular_values.iter().copied().collect()
}

/// A diagonal of R this much smaller than the largest counts as a possible rank deficiency,
/// and the SVD decides instead. Conservative: the SVD's own threshold is RANK_TOLERANCE.
const QR_RANK_GUARD: f64 = 1e-7;

/// Orthonormal basis of the null space of a p × n matrix G with p ≤ n and full row rank, from
/// the Householder QR Gᵀ = Q R (Golub & Van Loan, *Matrix Computations*, 4th ed., §5.2): the
/// last n − p columns of Q. They are formed as the rows of [0 I] Qᵀ = [0 I] H_p … H_1, applying
/// each reflection from the right to an (n − p) × n block, which costs O((n − p) n p) instead of
/// forming all of Q. `None` when G is rank-deficient or nearly so.
fn nullspace_by_qr(g: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let (p, n) = g.shape();
    if p > n {
        return None;
    }
    let mut a = g.transpose(); // n × p, column-major: each column of Gᵀ is contiguous
    let mut reflections: Vec<(Vec<f64>, f64)> = Vec::with_capacity(p);
    let mut diag_max: f64 = 0.0;
    let mut diag_min = f64::INFINITY;
    for k in 0..p {
        let v_start: Vec<f64> = a.column(k).rows(k, n - k).iter().copied().collect();
        let norm = v_start.iter().map(|t| t * t).sum::<f64>().sqrt();
        if !norm.is_finite() {
            return None;
        }
        // Reflect x onto −sign(x₀)‖x‖ e₁ to avoid cancellation.
        let alpha = if v_start[0] >= 0.0 { -norm } else { norm };
        let mut v = v_start;
        v[0] -= alpha;
        let vv: f64 = v.iter().map(|t| t * t).sum();
        let beta = if vv > 0.0 { 2.0 / vv } else { 0.0 };
        for j in k + 1..p {
            let col = &mut a.column_mut(j);
            let tail = &mut col.as_mut_slice()[k..];
            let s: f64 = beta * v.iter().zip(tail.iter()).map(|(x, y)| x * y).sum::<f64>();
            if s != 0.0 {
                for (c, vi) in tail.iter_mut().zip(&v) {
                    *c -= s * vi;
                }
            }
        }
        diag_max = diag_max.max(norm);
        diag_min = diag_min.min(norm);
        reflections.push((v, beta));
    }
    if p > 0
        && diag_min.partial_cmp(&(QR_RANK_GUARD * diag_max)) != Some(std::cmp::Ordering::Greater)
    {
        return None;
    }
    let q = n - p;
    // W = [0 I] (q × n), then W ← W H_k for k = p−1 … 0, with H_k = I − β v vᵀ on columns k…n.
    let mut w = DMatrix::zeros(q, n);
    for i in 0..q {
        w[(i, p + i)] = 1.0;
    }
    let mut wv = vec![0.0; q];
    for (k, (v, beta)) in reflections.iter().enumerate().rev() {
        if *beta == 0.0 {
            continue;
        }
        wv.iter_mut().for_each(|t| *t = 0.0);
        for (off, &vi) in v.iter().enumerate() {
            if vi != 0.0 {
                for (acc, &x) in wv.iter_mut().zip(w.column(k + off).iter()) {
                    *acc += x * vi;
                }
            }
        }
        for (off, &vi) in v.iter().enumerate() {
            let f = beta * vi;
            if f != 0.0 {
                for (x, &acc) in w.column_mut(k + off).iter_mut().zip(&wv) {
                    *x -= f * acc;
                }
            }
        }
    }
    Some(w.transpose())
}

pub fn classify(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    at_bound: &[bool],
) -> Classification {
    uncancelled(classify_cancellable(
        plant,
        layout,
        measured,
        z,
        at_bound,
        &Cancel::never(),
    ))
}

/// [`classify`], given up once `cancel` has passed: on the sparse path, checked between the
/// stages of the factorisation (crate::covariance), each a good part of a large network's
/// classification; the dense path (small loops) runs whole.
pub fn classify_cancellable(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    at_bound: &[bool],
    cancel: &Cancel,
) -> Result<Classification, Cancelled> {
    cancel.check()?;
    if layout.n >= SPARSE_THRESHOLD && !at_bound.iter().any(|&b| b) {
        if let Some(c) = classify_sparse_cancellable(plant, layout, measured, z, cancel)? {
            return Ok(c);
        }
    }
    Ok(classify_dense(plant, layout, measured, z, at_bound))
}

/// The sparse path (covariance.rs), with every variable free; `None` when the factorisation
/// fails.
pub fn classify_sparse(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
) -> Option<Classification> {
    uncancelled(classify_sparse_cancellable(
        plant,
        layout,
        measured,
        z,
        &Cancel::never(),
    ))
}

/// [`classify_sparse`], given up once `cancel` has passed.
pub fn classify_sparse_cancellable(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    cancel: &Cancel,
) -> Result<Option<Classification>, Cancelled> {
    let mut gj = Triplets::new(layout.rows.len(), layout.n);
    constraints(plant, layout, z, Some(&mut gj));
    let (_, j) = scaled_measurements(plant, layout, measured, z);
    // The σ of every stream quantity and meter needs the covariances among one stream's
    // flows, and a split fraction those among its splitter's fractions.
    let mut blocks: Vec<Vec<usize>> = (0..plant.streams.len())
        .map(|s| layout.stream_flows(plant, s).collect())
        .collect();
    for u in &plant.units {
        let splits: Vec<usize> = u.outlets.iter().filter_map(|&o| layout.split(o)).collect();
        if splits.len() > 1 {
            blocks.push(splits);
        }
    }
    let Some(sparse) = SparseCovariance::factorise_cancellable(&gj, &j, &blocks, cancel)? else {
        return Ok(None);
    };
    Ok(Some(Classification {
        unobservable: sparse.unobservable,
        l: DMatrix::zeros(layout.n, 0),
        u: DMatrix::zeros(measured.len(), 0),
        redundancy: sparse.redundancy,
        sparse: Some(sparse.covariance),
    }))
}

/// The dense path: projection on the null space of G and an SVD of J N.
pub fn classify_dense(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
    at_bound: &[bool],
) -> Classification {
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

    // Null space of G: from a Householder QR of Gᵀ when G clearly has full row rank (the
    // usual case, and many times cheaper than the SVD), else the right singular vectors beyond
    // its numerical rank.
    let nullspace = if g.nrows() == 0 {
        DMatrix::identity(nf, nf)
    } else if let Some(basis) = nullspace_by_qr(&g) {
        basis
    } else {
        let (_, s, v) = full_svd(&g);
        let smax = s.first().copied().unwrap_or(0.0);
        let rank = s
            .iter()
            .filter(|&&x| x > RANK_TOLERANCE * smax.max(1e-300))
            .count();
        v.columns(rank, nf - rank).into_owned()
    };
    let q = nullspace.ncols();

    let (l_free, u, unobs_free, rank) = if q == 0 {
        (
            DMatrix::zeros(nf, 0),
            DMatrix::zeros(m, 0),
            DMatrix::zeros(nf, 0),
            0,
        )
    } else if m == 0 {
        (
            DMatrix::zeros(nf, 0),
            DMatrix::zeros(0, 0),
            nullspace.clone(),
            0,
        )
    } else {
        let b = &jf * &nullspace;
        let (u_full, s, v) = full_svd(&b);
        // The rank is decided on B with its rows scaled to unit norm, which leaves the rank
        // unchanged: one very sensitive meter (a fraction on a stream with almost no flow)
        // would otherwise push every other singular value under a threshold relative to its own.
        let mut equilibrated = b.clone();
        for mut row in equilibrated.row_iter_mut() {
            let norm = row.norm();
            if norm > 0.0 {
                row /= norm;
            }
        }
        let se = singular_values(&equilibrated);
        let se_max = se.iter().copied().fold(0.0, f64::max);
        let rank = se
            .iter()
            .filter(|&&x| x > RANK_TOLERANCE * se_max.max(1e-300))
            .count()
            .min(s.iter().filter(|&&x| x > 0.0).count());
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
        sparse: None,
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

    /// Lᵀa: the covariance of two functions is the dot product of their projections. Dense
    /// path only (empty on the sparse path, where `sigma` reads the covariance directly).
    pub fn project(&self, a: &[(usize, f64)]) -> Vec<f64> {
        (0..self.l.ncols())
            .map(|k| a.iter().map(|&(i, v)| v * self.l[(i, k)]).sum())
            .collect()
    }

    /// Covariance of two linear functions with gradients `a` and `b`.
    pub fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        if let Some(sparse) = &self.sparse {
            return sparse.covariance(a, b);
        }
        self.project(a)
            .iter()
            .zip(self.project(b))
            .map(|(x, y)| x * y)
            .sum()
    }

    /// P a as a dense vector on the state, with no part along an unobservable direction: the
    /// generalised inverse's product on both paths (the sparse path's pinned pivots add such a
    /// part, which is projected out).
    pub fn apply(&self, a: &[(usize, f64)]) -> Vec<f64> {
        let mut x = match &self.sparse {
            Some(sparse) => sparse.apply(a),
            None => {
                let y = nalgebra::DVector::from_vec(self.project(a));
                (&self.l * y).iter().copied().collect()
            }
        };
        self.remove_unobservable(&mut x);
        x
    }

    /// Take the part along the unobservable directions out of a dense vector on the state.
    pub fn remove_unobservable(&self, x: &mut [f64]) {
        for k in 0..self.unobservable.ncols() {
            let u = self.unobservable.column(k);
            let p: f64 = x.iter().zip(u.iter()).map(|(a, b)| a * b).sum();
            if p != 0.0 {
                x.iter_mut().zip(u.iter()).for_each(|(a, b)| *a -= p * b);
            }
        }
    }

    /// Standard deviation of a linear function with gradient `a`.
    pub fn sigma(&self, a: &[(usize, f64)]) -> f64 {
        if let Some(sparse) = &self.sparse {
            return sparse.variance(a).sqrt();
        }
        self.project(a).iter().map(|x| x * x).sum::<f64>().sqrt()
    }

    /// (U Uᵀ)_ii: the share of meter i's variance its reconciled value keeps.
    pub fn leverage(&self, i: usize) -> f64 {
        if let Some(sparse) = &self.sparse {
            return sparse.leverage(i).min(1.0);
        }
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
        uncancelled(self.scaled_adjustment_covariance_cancellable(&Cancel::never()))
    }

    /// [`Classification::scaled_adjustment_covariance`], given up once `cancel` has passed:
    /// on the sparse path it costs one solve per meter, and the deadline is checked before
    /// each.
    pub fn scaled_adjustment_covariance_cancellable(
        &self,
        cancel: &Cancel,
    ) -> Result<DMatrix<f64>, Cancelled> {
        if let Some(sparse) = &self.sparse {
            let h = sparse.hat_matrix_cancellable(cancel)?;
            return Ok(DMatrix::identity(h.nrows(), h.nrows()) - h);
        }
        let m = self.u.nrows();
        Ok(DMatrix::identity(m, m) - &self.u * self.u.transpose())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_matrix_with_nan_or_infinity_has_no_singular_value_and_the_svd_ends() {
        let mut a = DMatrix::from_row_slice(
            3,
            4,
            &[1.0, 2.0, 0.0, 1.0, 0.0, 1.0, 3.0, 0.5, 2.0, 0.0, 1.0, 1.0],
        );
        let (_, s, v) = full_svd(&a);
        assert_eq!(s.len(), 4);
        assert!(s[2] > 0.0, "a finite matrix keeps its rank: {s:?}");
        for bad in [f64::NAN, f64::INFINITY] {
            a[(1, 2)] = bad;
            let (u, s, v_bad) = full_svd(&a);
            assert_eq!(s, vec![0.0; 4]);
            assert_eq!(v_bad.shape(), v.shape());
            assert!(u.iter().chain(v_bad.iter()).all(|x| x.is_finite()));
        }
    }
}
