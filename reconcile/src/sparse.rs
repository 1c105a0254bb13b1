//! Sparse assembly (triplets) and a sparse LU factorisation with a fill-reducing ordering.
//!
//! The factorisation is CSparse's left-looking LU with threshold partial pivoting and an
//! approximate-minimum-degree ordering of A + Aᵀ (Davis, *Direct Methods for Sparse Linear
//! Systems*, SIAM 2006), as implemented by the `rsparse` crate.

use nalgebra::DMatrix;
use rsparse::data::{Nmrc, Sprs, Symb};

/// A sparse matrix under assembly: (row, column, value) entries; duplicates add up.
#[derive(Debug, Clone, Default)]
pub struct Triplets {
    pub nrows: usize,
    pub ncols: usize,
    pub entries: Vec<(usize, usize, f64)>,
}

impl Triplets {
    pub fn new(nrows: usize, ncols: usize) -> Triplets {
        Triplets {
            nrows,
            ncols,
            entries: Vec::new(),
        }
    }

    pub fn push(&mut self, row: usize, col: usize, value: f64) {
        debug_assert!(row < self.nrows && col < self.ncols);
        self.entries.push((row, col, value));
    }

    pub fn to_dense(&self) -> DMatrix<f64> {
        let mut m = DMatrix::zeros(self.nrows, self.ncols);
        for &(r, c, v) in &self.entries {
            m[(r, c)] += v;
        }
        m
    }

    /// y = A x.
    pub fn mul_vec(&self, x: &[f64]) -> Vec<f64> {
        let mut y = vec![0.0; self.nrows];
        for &(r, c, v) in &self.entries {
            y[r] += v * x[c];
        }
        y
    }

    /// y = Aᵀ x.
    pub fn tr_mul_vec(&self, x: &[f64]) -> Vec<f64> {
        let mut y = vec![0.0; self.ncols];
        for &(r, c, v) in &self.entries {
            y[c] += v * x[r];
        }
        y
    }

    /// Compressed sparse columns with duplicates summed.
    fn to_csc(&self) -> Sprs<f64> {
        let mut entries = self.entries.clone();
        entries.sort_unstable_by_key(|&(r, c, _)| (c, r));
        let mut p = vec![0isize; self.ncols + 1];
        let mut i: Vec<usize> = Vec::with_capacity(entries.len());
        let mut x: Vec<f64> = Vec::with_capacity(entries.len());
        let mut last: Option<(usize, usize)> = None;
        for (r, c, v) in entries {
            if last == Some((r, c)) {
                *x.last_mut().expect("entry exists") += v;
                continue;
            }
            last = Some((r, c));
            i.push(r);
            x.push(v);
            p[c + 1] += 1;
        }
        for k in 0..self.ncols {
            p[k + 1] += p[k];
        }
        Sprs {
            nzmax: x.len(),
            m: self.nrows,
            n: self.ncols,
            p,
            i,
            x,
        }
    }
}

/// An LU factorisation P A Q = L U of a square sparse matrix, reusable for many right-hand sides.
pub struct SparseLu {
    n: usize,
    symbolic: Symb,
    numeric: Nmrc<f64>,
}

impl SparseLu {
    /// Factorise; `None` when the matrix is structurally or numerically singular.
    pub fn new(a: &Triplets) -> Option<SparseLu> {
        assert_eq!(a.nrows, a.ncols, "LU needs a square matrix");
        let csc = a.to_csc();
        // Order 1: minimum degree on A + Aᵀ, the right choice for a symmetric KKT pattern.
        let mut symbolic = rsparse::sqr(&csc, 1, false);
        // Threshold 0.1 prefers diagonal pivots (which keep the ordering's fill low) while
        // still refusing pivots much smaller than the column's largest entry.
        let numeric = rsparse::lu(&csc, &mut symbolic, 0.1).ok()?;
        let lu = SparseLu {
            n: a.nrows,
            symbolic,
            numeric,
        };
        // CSparse does not fail on tiny pivots: check U's diagonal ourselves.
        let u = &lu.numeric.u;
        let mut max_diag: f64 = 0.0;
        let mut min_diag = f64::INFINITY;
        for col in 0..lu.n {
            // The diagonal is the last entry of each column of U.
            let end = u.p[col + 1] as usize;
            let d = if end > 0 && u.i[end - 1] == col {
                u.x[end - 1].abs()
            } else {
                0.0
            };
            max_diag = max_diag.max(d);
            min_diag = min_diag.min(d);
        }
        (min_diag.is_finite() && min_diag > 1e-300 && min_diag > max_diag * 1e-15).then_some(lu)
    }

    pub fn solve(&self, b: &[f64]) -> Vec<f64> {
        let n = self.n;
        let mut x = vec![0.0; n];
        // x = P b
        match &self.numeric.pinv {
            Some(pinv) => {
                for k in 0..n {
                    x[pinv[k] as usize] = b[k];
                }
            }
            None => x.copy_from_slice(b),
        }
        rsparse::lsolve(&self.numeric.l, &mut x);
        rsparse::usolve(&self.numeric.u, &mut x);
        // b = Q x
        let mut out = vec![0.0; n];
        match &self.symbolic.q {
            Some(q) => {
                for k in 0..n {
                    out[q[k] as usize] = x[k];
                }
            }
            None => out.copy_from_slice(&x),
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lu_solves_a_kkt_system_like_dense_lu() {
        // A small symmetric indefinite system of KKT shape [[Q, Aᵀ], [A, 0]].
        let mut t = Triplets::new(5, 5);
        let q = [[4.0, 1.0, 0.0], [1.0, 3.0, 0.5], [0.0, 0.5, 2.0]];
        for (r, row) in q.iter().enumerate() {
            for (c, v) in row.iter().enumerate() {
                if *v != 0.0 {
                    t.push(r, c, *v);
                }
            }
        }
        for (r, row) in [[1.0, -1.0, 0.0], [0.0, 1.0, -1.0]].iter().enumerate() {
            for (c, v) in row.iter().enumerate() {
                if *v != 0.0 {
                    t.push(3 + r, c, *v);
                    t.push(c, 3 + r, *v);
                }
            }
        }
        // Duplicates add up.
        t.push(0, 0, 1.0);
        t.push(0, 0, -1.0);
        let b = [1.0, 2.0, 3.0, 0.5, -0.25];
        let x = SparseLu::new(&t).expect("non-singular").solve(&b);
        let dense = t
            .to_dense()
            .lu()
            .solve(&nalgebra::DVector::from_column_slice(&b))
            .unwrap();
        for k in 0..5 {
            assert!((x[k] - dense[k]).abs() < 1e-12, "{x:?} vs {dense}");
        }
    }

    #[test]
    fn singular_matrix_is_refused() {
        let mut t = Triplets::new(2, 2);
        t.push(0, 0, 1.0);
        t.push(0, 1, 2.0);
        t.push(1, 0, 2.0);
        t.push(1, 1, 4.0);
        assert!(SparseLu::new(&t).is_none());
    }
}
