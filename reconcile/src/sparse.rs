//! Sparse assembly (triplets) and sparse factorisations with a fill-reducing ordering.
//!
//! - LDLᵀ without pivoting for symmetric quasi-definite matrices (Vanderbei, *SIAM J. Optim.*
//!   5, 1995): QDLDL with an approximate-minimum-degree ordering, as implemented by the
//!   `clarabel` crate. The pattern's ordering and elimination tree are kept, and a matrix of the
//!   same pattern is only refactorised numerically.
//! - LU with threshold partial pivoting: CSparse's left-looking LU with an approximate minimum
//!   degree ordering of A + Aᵀ (Davis, *Direct Methods for Sparse Linear Systems*, SIAM 2006),
//!   as implemented by the `rsparse` crate; the general-purpose fallback.

use clarabel::algebra::CscMatrix;
use clarabel::qdldl::{QDLDLFactorisation, QDLDLSettingsBuilder};
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

/// The symbolic part of the sparse factorisations, reusable while the pattern stays the same:
/// the triplet positions it was made for, where each triplet lands in the compressed columns,
/// and, made when first needed, the LU's fill-reducing ordering (AMD on A + Aᵀ) and the LDLᵀ
/// (ordering, elimination tree and the numeric factor, refactorised in place). A Gauss–Newton
/// iteration factorises many matrices of one pattern, and the ordering costs as much as the
/// numeric factorisation itself.
#[derive(Debug)]
pub struct Symbolic {
    /// (row, column) of every triplet, in push order.
    positions: Vec<(usize, usize)>,
    /// Index into the compressed values of each triplet (duplicates share one).
    slots: Vec<usize>,
    nrows: usize,
    ncols: usize,
    colptr: Vec<isize>,
    rowidx: Vec<usize>,
    /// The LU's ordering and symbolic analysis, once an LU was asked for.
    lu: Option<Symb>,
    ldl: LdlState,
}

/// The static regularisation of the equilibrated quasi-definite matrix in `factor_ldl`, and the
/// equilibration's sweeps.
const LDL_REGULARISATION: f64 = 1e-8;
const LDL_EQUILIBRATION_SWEEPS: usize = 4;

#[derive(Debug)]
enum LdlState {
    Untried,
    /// The pattern has no LDLᵀ (not symmetric, or a diagonal entry missing).
    Unavailable,
    Ready(Box<Ldl>),
}

/// An LDLᵀ factorisation of the symmetric matrix of a `Symbolic`'s pattern.
#[derive(Debug)]
struct Ldl {
    /// For each compressed slot of the full matrix: its index among the upper triangle's
    /// values, or `usize::MAX` below the diagonal.
    upper: Vec<usize>,
    /// 0, 1, … for `update_values`, and the upper triangle's values (scaled, regularised).
    indices: Vec<usize>,
    values: Vec<f64>,
    /// The upper triangle's pattern, compressed by columns.
    colptr: Vec<usize>,
    rowval: Vec<usize>,
    /// The equilibration S.
    scale: Vec<f64>,
    factor: Option<QDLDLFactorisation<f64>>,
    /// Numeric factorisations so far: identifies the one currently held.
    generation: u64,
    /// Whether the held factorisation succeeded.
    valid: bool,
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
        Symbolic {
            positions: a.entries.iter().map(|&(r, c, _)| (r, c)).collect(),
            slots,
            nrows: a.nrows,
            ncols: a.ncols,
            colptr,
            rowidx,
            lu: None,
            ldl: LdlState::Untried,
        }
    }

    /// The analysis for `a` in `cache`, made anew unless the cached one has `a`'s pattern.
    pub fn for_matrix<'a>(cache: &'a mut Option<Symbolic>, a: &Triplets) -> &'a mut Symbolic {
        if !cache.as_ref().is_some_and(|c| c.matches(a)) {
            *cache = Some(Symbolic::analyse(a));
        }
        cache.as_mut().expect("just set")
    }

    /// The compressed values of `a`, whose pattern this analysis was made for.
    fn values(&self, a: &Triplets) -> Vec<f64> {
        let mut x = vec![0.0; self.rowidx.len()];
        for (&slot, &(_, _, v)) in self.slots.iter().zip(&a.entries) {
            x[slot] += v;
        }
        x
    }

    /// The compressed columns of `a`, whose pattern this analysis was made for.
    fn csc(&self, a: &Triplets) -> Sprs<f64> {
        let x = self.values(a);
        Sprs {
            nzmax: x.len(),
            m: self.nrows,
            n: self.ncols,
            p: self.colptr.clone(),
            i: self.rowidx.clone(),
            x,
        }
    }

    /// Factorise the symmetric matrix `a` (of this pattern), whose first `positive` rows are
    /// those of a positive (semi)definite block H and the others those of a negative one, as
    /// in a KKT matrix [[H, Aᵀ], [A, −E]]. What is factorised, without pivoting, is a nearby
    /// quasi-definite matrix: S A S (S diagonal, equilibrating the rows) plus the static
    /// regularisation ±`LDL_REGULARISATION` on the diagonal, signed like the block (a caller
    /// refines against `a`). Returns the factorisation's identity for `solve_ldl`, `None` when
    /// there is none.
    pub fn factor_ldl(&mut self, a: &Triplets, positive: usize) -> Option<u64> {
        if self.nrows != self.ncols {
            return None;
        }
        if matches!(self.ldl, LdlState::Untried) {
            self.ldl = match self.prepare_ldl() {
                Some(ldl) => LdlState::Ready(Box::new(ldl)),
                None => LdlState::Unavailable,
            };
        }
        let full = self.values(a);
        let LdlState::Ready(ldl) = &mut self.ldl else {
            return None;
        };
        let n = self.ncols;
        // Symmetric equilibration (Ruiz): a few sweeps of S ← S / √(largest entry of S A S in
        // each column).
        let scale = &mut ldl.scale;
        scale.iter_mut().for_each(|s| *s = 1.0);
        for _ in 0..LDL_EQUILIBRATION_SWEEPS {
            let mut largest = vec![0.0f64; n];
            for col in 0..n {
                for slot in self.colptr[col] as usize..self.colptr[col + 1] as usize {
                    let v = (full[slot] * scale[self.rowidx[slot]]).abs();
                    largest[col] = largest[col].max(v);
                }
            }
            for col in 0..n {
                let m = largest[col] * scale[col];
                if m > 0.0 && m.is_finite() {
                    scale[col] /= m.sqrt();
                }
            }
        }
        for col in 0..n {
            for slot in self.colptr[col] as usize..self.colptr[col + 1] as usize {
                let u = ldl.upper[slot];
                if u != usize::MAX {
                    let row = self.rowidx[slot];
                    let mut v = scale[row] * full[slot] * scale[col];
                    if row == col {
                        v += if row < positive {
                            LDL_REGULARISATION
                        } else {
                            -LDL_REGULARISATION
                        };
                    }
                    ldl.values[u] = v;
                }
            }
        }
        ldl.generation += 1;
        ldl.valid = if let Some(factor) = &mut ldl.factor {
            factor.update_values(&ldl.indices, &ldl.values);
            factor.refactor().is_ok()
        } else {
            let matrix = CscMatrix::new(
                n,
                n,
                ldl.colptr.clone(),
                ldl.rowval.clone(),
                ldl.values.clone(),
            );
            let signs: Vec<i8> = (0..n).map(|i| if i < positive { 1 } else { -1 }).collect();
            // QDLDL's default ordering: approximate minimum degree on the pattern.
            let settings = QDLDLSettingsBuilder::default()
                .Dsigns(signs)
                .build()
                .expect("valid settings");
            // A zero pivot leaves the factor unmade: it is made again, ordering included,
            // for the next matrix of this pattern.
            ldl.factor = QDLDLFactorisation::new(&matrix, Some(settings)).ok();
            ldl.factor.is_some()
        };
        ldl.valid.then_some(ldl.generation)
    }

    /// Where the upper triangle of this pattern's matrix lands in QDLDL's input; `None` when
    /// the pattern is not symmetric or lacks a diagonal entry.
    fn prepare_ldl(&self) -> Option<Ldl> {
        let n = self.ncols;
        let mut upper = vec![usize::MAX; self.rowidx.len()];
        let mut colptr = Vec::with_capacity(n + 1);
        let mut rowval = Vec::new();
        colptr.push(0);
        for col in 0..n {
            let mut diagonal = false;
            for slot in self.colptr[col] as usize..self.colptr[col + 1] as usize {
                let row = self.rowidx[slot];
                diagonal |= row == col;
                if row <= col {
                    upper[slot] = rowval.len();
                    rowval.push(row);
                }
            }
            if !diagonal {
                return None;
            }
            colptr.push(rowval.len());
        }
        // The pattern must be symmetric: as many entries above the diagonal as below.
        if 2 * rowval.len() != self.rowidx.len() + n {
            return None;
        }
        Some(Ldl {
            upper,
            indices: (0..rowval.len()).collect(),
            values: vec![0.0; rowval.len()],
            colptr,
            rowval,
            scale: vec![1.0; n],
            factor: None,
            generation: 0,
            valid: false,
        })
    }

    /// Solve A x = b in place with the LDLᵀ factorisation `id`; false (b untouched) when the
    /// factorisation held is no longer that one.
    pub fn solve_ldl(&mut self, id: u64, b: &mut [f64]) -> bool {
        match &mut self.ldl {
            LdlState::Ready(ldl) if ldl.valid && ldl.generation == id => {
                let Some(factor) = &mut ldl.factor else {
                    return false;
                };
                // A x = b ⇔ (S A S)(S⁻¹ x) = S b.
                b.iter_mut().zip(&ldl.scale).for_each(|(v, s)| *v *= s);
                factor.solve(b);
                b.iter_mut().zip(&ldl.scale).for_each(|(v, s)| *v *= s);
                true
            }
            _ => false,
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
        let sym = Symbolic::for_matrix(cache, a);
        let csc = sym.csc(a);
        // Order 1: minimum degree on A + Aᵀ, the right choice for a symmetric KKT pattern.
        let symbolic = sym.lu.get_or_insert_with(|| rsparse::sqr(&csc, 1, false));
        // Threshold 0.1 prefers diagonal pivots (which keep the ordering's fill low) while
        // still refusing pivots much smaller than the column's largest entry.
        let numeric = rsparse::lu(&csc, symbolic, 0.1).ok()?;
        let lu = SparseLu {
            n: a.nrows,
            q: symbolic.q.clone(),
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
    fn ldl_solves_a_quasi_definite_system_and_refactorises_in_place() {
        // [[H, Aᵀ], [A, −δI]] with H positive definite, assembled as a KKT matrix is.
        let kkt = |scale: f64| {
            let mut t = Triplets::new(5, 5);
            let q = [[4.0, 1.0, 0.0], [1.0, 3.0, 0.5], [0.0, 0.5, 2.0]];
            for (r, row) in q.iter().enumerate() {
                for (c, v) in row.iter().enumerate() {
                    t.push(r, c, scale * v);
                }
            }
            for (r, row) in [[1.0, -1.0, 0.0], [0.0, 1e4, -1.0]].iter().enumerate() {
                for (c, v) in row.iter().enumerate() {
                    t.push(3 + r, c, *v);
                    t.push(c, 3 + r, *v);
                }
                t.push(3 + r, 3 + r, -1e-10);
            }
            t
        };
        let b = [1.0, 2.0, 3.0, 0.5, -0.25];
        let mut cache = None;
        for scale in [1.0, 1e-3] {
            let t = kkt(scale);
            let sym = Symbolic::for_matrix(&mut cache, &t);
            let id = sym.factor_ldl(&t, 3).expect("quasi-definite");
            // Refinement against the matrix itself, as the solver does.
            let mut x = b.to_vec();
            assert!(sym.solve_ldl(id, &mut x));
            for _ in 0..5 {
                let ax = t.mul_vec(&x);
                let mut r: Vec<f64> = b.iter().zip(&ax).map(|(b, a)| b - a).collect();
                assert!(sym.solve_ldl(id, &mut r));
                x.iter_mut().zip(&r).for_each(|(x, d)| *x += d);
            }
            let dense = t
                .to_dense()
                .lu()
                .solve(&nalgebra::DVector::from_column_slice(&b))
                .unwrap();
            for k in 0..5 {
                assert!(
                    (x[k] - dense[k]).abs() < 1e-9 * (1.0 + dense[k].abs()),
                    "{x:?} vs {dense}"
                );
            }
            // A stale identity is refused.
            assert!(!sym.solve_ldl(id + 1, &mut x));
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
