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
}

/// The symbolic part of a sparse LU, reusable while the pattern stays the same: the triplet
/// positions it was made for, where each triplet lands in the compressed columns, and the
/// fill-reducing ordering (AMD on A + Aᵀ). A Gauss–Newton iteration factorises many matrices of
/// one pattern, and the ordering costs as much as the numeric factorisation itself.
#[derive(Debug, Clone)]
pub struct Symbolic {
    /// (row, column) of every triplet, in push order.
    positions: Vec<(usize, usize)>,
    /// Index into the compressed values of each triplet (duplicates share one).
    slots: Vec<usize>,
    nrows: usize,
    ncols: usize,
    colptr: Vec<isize>,
    rowidx: Vec<usize>,
    symbolic: Symb,
}

impl Symbolic {
    fn matches(&self, a: &Triplets) -> bool {
        self.nrows == a.nrows
            && self.ncols == a.ncols
            && self.positions.len() == a.entries.len()
            && self
                .positions
                .iter()
                .zip(&a.entries)
                .all(|(&(r, c), &(r2, c2, _))| r == r2 && c == c2)
    }

    fn analyse(a: &Triplets) -> Symbolic {
        let mut order: Vec<usize> = (0..a.entries.len()).collect();
        order.sort_unstable_by_key(|&k| (a.entries[k].1, a.entries[k].0));
        let mut slots = vec![0; a.entries.len()];
        let mut colptr = vec![0isize; a.ncols + 1];
        let mut rowidx: Vec<usize> = Vec::with_capacity(a.entries.len());
        let mut last: Option<(usize, usize)> = None;
        for k in order {
            let (r, c, _) = a.entries[k];
            if last != Some((r, c)) {
                last = Some((r, c));
                rowidx.push(r);
                colptr[c + 1] += 1;
            }
            slots[k] = rowidx.len() - 1;
        }
        for k in 0..a.ncols {
            colptr[k + 1] += colptr[k];
        }
        let mut sym = Symbolic {
            positions: a.entries.iter().map(|&(r, c, _)| (r, c)).collect(),
            slots,
            nrows: a.nrows,
            ncols: a.ncols,
            colptr,
            rowidx,
            symbolic: Symb::new(),
        };
        // Order 1: minimum degree on A + Aᵀ, the right choice for a symmetric KKT pattern.
        sym.symbolic = rsparse::sqr(&sym.csc(a), 1, false);
        sym
    }

    /// The compressed columns of `a`, whose pattern this analysis was made for.
    fn csc(&self, a: &Triplets) -> Sprs<f64> {
        let mut x = vec![0.0; self.rowidx.len()];
        for (&slot, &(_, _, v)) in self.slots.iter().zip(&a.entries) {
            x[slot] += v;
        }
        Sprs {
            nzmax: x.len(),
            m: self.nrows,
            n: self.ncols,
            p: self.colptr.clone(),
            i: self.rowidx.clone(),
            x,
        }
    }
}

/// An LU factorisation P A Q = L U of a square sparse matrix, reusable for many right-hand sides.
pub struct SparseLu {
    n: usize,
    q: Option<Vec<isize>>,
    numeric: Nmrc<f64>,
}

impl SparseLu {
    /// Factorise; `None` when the matrix is structurally or numerically singular.
    pub fn new(a: &Triplets) -> Option<SparseLu> {
        SparseLu::with_symbolic(a, &mut None)
    }

    /// Factorise, reusing the symbolic analysis in `cache` when `a` has the same triplet
    /// positions (in the same order) as the matrix it was made for, else replacing it.
    pub fn with_symbolic(a: &Triplets, cache: &mut Option<Symbolic>) -> Option<SparseLu> {
        assert_eq!(a.nrows, a.ncols, "LU needs a square matrix");
        if !cache.as_ref().is_some_and(|c| c.matches(a)) {
            *cache = Some(Symbolic::analyse(a));
        }
        let sym = cache.as_mut().expect("just set");
        let csc = sym.csc(a);
        // Threshold 0.1 prefers diagonal pivots (which keep the ordering's fill low) while
        // still refusing pivots much smaller than the column's largest entry.
        let numeric = rsparse::lu(&csc, &mut sym.symbolic, 0.1).ok()?;
        let lu = SparseLu {
            n: a.nrows,
            q: sym.symbolic.q.clone(),
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
        match &self.q {
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
