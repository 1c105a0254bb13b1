//! Classification and covariance of large networks from one sparse LDLᵀ of the KKT matrix at
//! the solution (docs/methods.md §3), where the dense projection of classify.rs (O(n³)) is too slow.
//!
//! With J the σ-scaled measurement Jacobian, G the constraint Jacobian and H = JᵀJ, the
//! covariance of the estimate is the (1,1) block of the inverse of
//!
//! ```text
//! K = [ H + Gᵀ W G   Gᵀ ]
//!     [ G            0  ]
//! ```
//!
//! for any positive semidefinite W: on G x = 0 the added term vanishes, so the block is the same
//! P = N (Nᵀ H N)⁻¹ Nᵀ as in the projection method (the augmented-Lagrangian form of the KKT
//! matrix; Nocedal & Wright, *Numerical Optimization*, 2nd ed., §16.1 and §17.3). The term makes
//! the (1,1) block positive definite wherever the state is observable, so the LDLᵀ needs no
//! regularisation when every constraint row is eliminated after the states it touches (its pivot
//! is then −G H⁻¹ Gᵀ restricted, clearly negative): the fill-reducing ordering (AMD) is adjusted
//! to that rule.
//!
//! - **Observability, dependent rows.** A pivot that vanishes (relative to the equilibrated
//!   matrix) marks a direction the data do not determine: it is replaced by ±1, which is the
//!   same as adding 1 to that diagonal entry of K from the start (a pseudo-measurement of that
//!   state, or a soft constraint row). The null space of K is spanned by K̃⁻¹ e_k over those
//!   pivots k (K̃ the matrix with the replacements); the state parts are the unobservable
//!   directions. A pseudo-measurement of an otherwise undetermined direction is not redundant,
//!   so the variance of every observable function is unchanged by it.
//! - **Covariances.** The entries of K̃⁻¹ on the pattern of L (the "sparse inverse subset")
//!   come from the Takahashi recurrence Z = D⁻¹ L⁻¹ + (I − Lᵀ) Z, column by column from the
//!   last (Takahashi, Fagan & Chen 1973; Erisman & Tinney, *Comm. ACM* 18, 1975), at about the
//!   cost of the factorisation. The pattern is widened with explicit zeros so that every pair of
//!   states of one stream (and the split fractions of one splitter) is in it: the σ of every
//!   stream quantity and meter is then read from Z. Other functions take one solve.
//! - **Redundancy.** The hat matrix of the scaled measurements is J P Jᵀ; meter i is redundant
//!   iff 1 − (J P Jᵀ)_ii > 0, and ν = m − (n − rank G − k) with k unobservable directions.
//! - **Identification** (faults/sparse.rs) without the m × m adjustment covariance: W v in one
//!   solve, a leak's signature f_d = J x_d from K̃⁻¹ [0; d] (with W f_d = f_d), the products of
//!   one vector with every leak signature in one solve, and ‖f_d‖² from the selected inverse's
//!   entries among d's rows.

use std::cell::RefCell;

use clarabel::algebra::CscMatrix;
use clarabel::qdldl::{QDLDLFactorisation, QDLDLSettingsBuilder};
use nalgebra::DMatrix;

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::sparse::Triplets;

/// Columns of the selected inverse between two looks at the deadline: some milliseconds on
/// a large network.
const COLUMNS_PER_CHECK: usize = 1024;

/// A pivot of the equilibrated matrix below this (in magnitude, with the block's sign) counts
/// as zero: the direction is undetermined (a state) or the row dependent (a constraint).
const PIVOT_TOLERANCE: f64 = 1e-12;
/// Value a vanishing pivot is replaced with (equilibrated units).
const PIN: f64 = 1.0;
/// Singular value (of unit-norm null vectors' state parts) below which a candidate
/// unobservable direction is rounding.
const BASIS_TOLERANCE: f64 = 1e-6;
const EQUILIBRATION_SWEEPS: usize = 6;

/// The factorisation and the selected inverse, in the pivot order.
#[derive(Debug, Clone)]
pub struct SparseCovariance {
    n: usize,
    /// Equilibration S (original order): K̃ = S⁻¹ A S⁻¹ with A the factorised matrix.
    scale: Vec<f64>,
    /// perm[k]: original index of pivot k; iperm the inverse.
    perm: Vec<usize>,
    iperm: Vec<usize>,
    /// L (unit lower, strictly lower part) by columns, rows sorted, and D⁻¹.
    colptr: Vec<usize>,
    rowval: Vec<usize>,
    lval: Vec<f64>,
    dinv: Vec<f64>,
    /// Z = A⁻¹ on the pattern of L (aligned with `rowval`) and its diagonal.
    zval: Vec<f64>,
    zdiag: Vec<f64>,
    /// Rows of J (σ-scaled), for leverages and adjustment covariances.
    j_rows: Vec<Vec<(usize, f64)>>,
    /// Vanishing pivots among the states (unobservable directions) and the constraints
    /// (dependent rows).
    pub unobservable_pivots: usize,
    pub dependent_rows: usize,
    /// The pivots replaced by ±PIN, for the leak signatures' norms (`signature_norm`).
    pins: Vec<Pin>,
    /// P b for the last few gradients b with a support too wide for the selected inverse
    /// (a loop figure's fresh-feed total recurs in every splitter's recycle ratio).
    solved: RefCell<Vec<Solved>>,
}

/// A replaced pivot: its index in K̃ (original order), the entry the replacement added to K̃'s
/// diagonal there (±PIN / s², the pivot it replaced being below PIVOT_TOLERANCE), and the
/// constraint part of K̃⁻¹ e at that index.
#[derive(Debug, Clone)]
struct Pin {
    index: usize,
    added: f64,
    constraint_part: Vec<f64>,
}

/// A cached solve: the gradient b (indices and the bits of its values) and P b.
type Solved = (Vec<(usize, u64)>, Vec<f64>);

/// Gradients with more entries than this take a solve (and the cache) directly: their pairs
/// are mostly outside the pattern, and looking them up costs more than the solve.
const PATTERN_SUPPORT: usize = 64;
/// Solutions kept in the cache.
const CACHED_SOLVES: usize = 16;

/// The result of `SparseCovariance::factorise`: the covariance and the orthonormal unobservable
/// directions (n × k, dense: k is small).
pub struct SparseClassification {
    pub covariance: SparseCovariance,
    pub unobservable: DMatrix<f64>,
    /// ν = m − rank(J N).
    pub redundancy: usize,
}

impl SparseCovariance {
    /// Factorise the KKT matrix for constraint Jacobian `gj` (p × n) and σ-scaled measurement
    /// Jacobian `j` (m × n), with every pair within each group of `blocks` in the pattern.
    /// `None` when the factorisation fails (the caller uses the dense path).
    pub fn factorise(
        gj: &Triplets,
        j: &Triplets,
        blocks: &[Vec<usize>],
    ) -> Option<SparseClassification> {
        uncancelled(Self::factorise_cancellable(gj, j, blocks, &Cancel::never()))
    }

    /// [`SparseCovariance::factorise`], given up once `cancel` has passed: checked between its
    /// stages (assembly and equilibration, ordering, the numeric factorisation, the selected
    /// inverse, each null vector), each some tens of milliseconds on a large network.
    pub fn factorise_cancellable(
        gj: &Triplets,
        j: &Triplets,
        blocks: &[Vec<usize>],
        cancel: &Cancel,
    ) -> Result<Option<SparseClassification>, Cancelled> {
        // A stage that fails gives `Ok(None)` (the caller takes the dense path); the deadline
        // gives `Err`.
        let n = gj.ncols;
        let p = gj.nrows;
        let m = j.nrows;
        let size = n + p;
        let mut j_rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); m];
        for &(r, c, v) in &j.entries {
            j_rows[r].push((c, v));
        }
        let mut g_rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); p];
        for &(r, c, v) in &gj.entries {
            g_rows[r].push((c, v));
        }
        for row in g_rows.iter_mut().chain(j_rows.iter_mut()) {
            row.sort_unstable_by_key(|&(c, _)| c);
            merge_duplicates(row);
        }

        // K without the augmentation, upper triangle, for the equilibration.
        let mut upper: Vec<(usize, usize, f64)> = Vec::new();
        for row in &j_rows {
            for &(a, va) in row {
                for &(b, vb) in row {
                    if a <= b {
                        upper.push((a, b, va * vb));
                    }
                }
            }
        }
        for (r, row) in g_rows.iter().enumerate() {
            for &(c, v) in row {
                upper.push((c, n + r, v));
            }
        }
        for i in 0..size {
            upper.push((i, i, 0.0));
        }
        let scale = ruiz(size, &upper);
        cancel.check()?;

        // The augmentation Gᵀ W G with W = S_y², in equilibrated units: (S G S)ᵀ (S G S).
        let mut aug = Vec::new();
        for (r, row) in g_rows.iter().enumerate() {
            let sr = scale[n + r];
            for &(a, va) in row {
                for &(b, vb) in row {
                    if a <= b {
                        aug.push((a, b, (sr * va * scale[a]) * (sr * vb * scale[b])));
                    }
                }
            }
        }
        let mut entries: Vec<(usize, usize, f64)> = upper
            .into_iter()
            .map(|(a, b, v)| (a, b, scale[a] * v * scale[b]))
            .chain(aug)
            .collect();
        for block in blocks {
            for &a in block {
                for &b in block {
                    if a < b {
                        entries.push((a, b, 0.0));
                    }
                }
            }
        }
        let a_upper = compress_upper(size, entries);

        // Ordering: AMD on the pattern, then every constraint row moved after the last state
        // it touches.
        let signs: Vec<i8> = (0..size).map(|i| if i < n { 1 } else { -1 }).collect();
        cancel.check()?;
        let Ok(logical) = QDLDLSettingsBuilder::default()
            .logical(true)
            .Dsigns(signs.clone())
            .build()
        else {
            return Ok(None);
        };
        let Ok(ordering) = QDLDLFactorisation::new(&a_upper, Some(logical)) else {
            return Ok(None);
        };
        let amd = ordering.perm;
        let mut position = vec![0usize; size];
        for (k, &v) in amd.iter().enumerate() {
            position[v] = k;
        }
        let mut key: Vec<(usize, usize, usize)> = (0..size)
            .map(|v| {
                if v < n {
                    (position[v], 0, v)
                } else {
                    let last = g_rows[v - n]
                        .iter()
                        .map(|&(c, _)| position[c])
                        .max()
                        .unwrap_or(0);
                    if last > position[v] {
                        (last, 1, v)
                    } else {
                        (position[v], 0, v)
                    }
                }
            })
            .collect();
        key.sort_unstable();
        let perm: Vec<usize> = key.iter().map(|&(_, _, v)| v).collect();
        let Ok(settings) = QDLDLSettingsBuilder::default()
            .perm(perm)
            .Dsigns(signs.clone())
            .regularize_enable(true)
            .regularize_eps(PIVOT_TOLERANCE)
            .regularize_delta(PIN)
            .build()
        else {
            return Ok(None);
        };
        cancel.check()?;
        let Ok(factor) = QDLDLFactorisation::new(&a_upper, Some(settings)) else {
            return Ok(None);
        };
        cancel.check()?;
        let perm = factor.perm.clone();
        let mut iperm = vec![0usize; size];
        for (k, &v) in perm.iter().enumerate() {
            iperm[v] = k;
        }
        let d = factor.D.clone();
        if d.iter().any(|x| !x.is_finite()) {
            return Ok(None);
        }
        // Pivots replaced by ±PIN (QDLDL sets them to exactly that).
        let pinned: Vec<usize> = (0..size)
            .filter(|&k| d[k] == f64::from(signs[perm[k]]) * PIN)
            .collect();
        let l = &factor.L;
        // Rows sorted within each column (QDLDL fills them in elimination order).
        let mut colptr = l.colptr.clone();
        let mut rowval = Vec::with_capacity(l.rowval.len());
        let mut lval = Vec::with_capacity(l.rowval.len());
        colptr[0] = 0;
        for c in 0..size {
            let mut col: Vec<(usize, f64)> = (l.colptr[c]..l.colptr[c + 1])
                .map(|k| (l.rowval[k], l.nzval[k]))
                .collect();
            col.sort_unstable_by_key(|&(r, _)| r);
            for (r, v) in col {
                rowval.push(r);
                lval.push(v);
            }
            colptr[c + 1] = rowval.len();
        }
        let mut cov = SparseCovariance {
            n,
            scale,
            perm,
            iperm,
            colptr,
            rowval,
            lval,
            dinv: factor.Dinv.clone(),
            zval: Vec::new(),
            zdiag: Vec::new(),
            j_rows,
            unobservable_pivots: 0,
            dependent_rows: 0,
            pins: Vec::new(),
            solved: RefCell::new(Vec::new()),
        };
        cov.selected_inverse(cancel)?;

        // Null space of K: K̃⁻¹ e_k over the replaced pivots; the state parts span the
        // unobservable directions.
        // Each null vector is normalised as a whole (states and multipliers): a dependent row's
        // has a state part of rounding size only, which the basis then drops.
        let mut candidates = DMatrix::zeros(n, pinned.len());
        for (col, &k) in pinned.iter().enumerate() {
            cancel.check()?;
            let mut e = vec![0.0; size];
            e[cov.perm[k]] = 1.0;
            let x = cov.solve(&e);
            let index = cov.perm[k];
            cov.pins.push(Pin {
                index,
                added: f64::from(signs[index]) * PIN / (cov.scale[index] * cov.scale[index]),
                constraint_part: x[n..].to_vec(),
            });
            let norm = x.iter().map(|v| v * v).sum::<f64>().sqrt();
            if norm > 0.0 && norm.is_finite() {
                for i in 0..n {
                    candidates[(i, col)] = x[i] / norm;
                }
            }
        }
        let unobservable = orthonormal_basis(candidates);
        let k = unobservable.ncols();
        let dependent = pinned.len().saturating_sub(k);
        cov.unobservable_pivots = pinned.iter().filter(|&&k| cov.perm[k] < n).count();
        cov.dependent_rows = dependent;
        let rank_g = p - dependent;
        let rank_jn = (n - rank_g).saturating_sub(k);
        Ok(Some(SparseClassification {
            covariance: cov,
            unobservable,
            redundancy: m.saturating_sub(rank_jn),
        }))
    }

    /// Z = A⁻¹ on the pattern of L: Z_ij = −Σ_{k>j} Z_ik L_kj (i > j) and
    /// Z_jj = 1/d_j − Σ_{k>j} L_kj Z_kj, from the last column to the first. For every k in
    /// the pattern of column j, the pattern of column k holds every row of column j below k
    /// (the rows of a column of L form a clique of the filled graph), so every Z_ik needed is
    /// already there.
    /// Given up once `cancel` has passed, checked every [`COLUMNS_PER_CHECK`] columns.
    fn selected_inverse(&mut self, cancel: &Cancel) -> Result<(), Cancelled> {
        let size = self.dinv.len();
        let mut zval = vec![0.0; self.rowval.len()];
        let mut zdiag = vec![0.0; size];
        let mut local = vec![usize::MAX; size];
        let mut acc: Vec<f64> = Vec::new();
        for j in (0..size).rev() {
            if j % COLUMNS_PER_CHECK == 0 {
                cancel.check()?;
            }
            let (start, end) = (self.colptr[j], self.colptr[j + 1]);
            for q in start..end {
                local[self.rowval[q]] = q - start;
            }
            acc.clear();
            acc.resize(end - start, 0.0);
            for q in start..end {
                let k = self.rowval[q];
                let lkj = self.lval[q];
                // i = k: Z_kk L_kj.
                acc[q - start] -= zdiag[k] * lkj;
                // i ≠ k: the pairs (r, k) with r > k, both in column j's pattern.
                for t in self.colptr[k]..self.colptr[k + 1] {
                    let r = self.rowval[t];
                    let lr = local[r];
                    if lr != usize::MAX {
                        let zrk = zval[t];
                        acc[lr] -= zrk * lkj;
                        acc[q - start] -= zrk * self.lval[start + lr];
                    }
                }
            }
            let mut diag = self.dinv[j];
            for q in start..end {
                zval[q] = acc[q - start];
                diag -= self.lval[q] * acc[q - start];
                local[self.rowval[q]] = usize::MAX;
            }
            zdiag[j] = diag;
        }
        self.zval = zval;
        self.zdiag = zdiag;
        Ok(())
    }

    /// K̃⁻¹ b in the original order (K̃ = S⁻¹ A S⁻¹, so K̃⁻¹ b = S A⁻¹ S b).
    pub fn solve(&self, b: &[f64]) -> Vec<f64> {
        let size = self.dinv.len();
        let mut x: Vec<f64> = (0..size)
            .map(|k| b[self.perm[k]] * self.scale[self.perm[k]])
            .collect();
        for c in 0..size {
            let xc = x[c];
            if xc != 0.0 {
                for q in self.colptr[c]..self.colptr[c + 1] {
                    x[self.rowval[q]] -= self.lval[q] * xc;
                }
            }
        }
        for (xc, d) in x.iter_mut().zip(&self.dinv) {
            *xc *= d;
        }
        for c in (0..size).rev() {
            let mut s = x[c];
            for q in self.colptr[c]..self.colptr[c + 1] {
                s -= self.lval[q] * x[self.rowval[q]];
            }
            x[c] = s;
        }
        let mut out = vec![0.0; size];
        for k in 0..size {
            let v = self.perm[k];
            out[v] = x[k] * self.scale[v];
        }
        out
    }

    /// P a as a dense vector on the state (one solve).
    pub fn apply(&self, a: &[(usize, f64)]) -> Vec<f64> {
        let mut rhs = vec![0.0; self.dinv.len()];
        for &(i, v) in a {
            rhs[i] += v;
        }
        let mut x = self.solve(&rhs);
        x.truncate(self.n);
        x
    }

    /// P_ab from the selected inverse, `None` when the pair is outside the pattern.
    fn entry(&self, a: usize, b: usize) -> Option<f64> {
        let (pa, pb) = (self.iperm[a], self.iperm[b]);
        let z = if pa == pb {
            self.zdiag[pa]
        } else {
            let (row, col) = if pa > pb { (pa, pb) } else { (pb, pa) };
            let rows = &self.rowval[self.colptr[col]..self.colptr[col + 1]];
            let k = rows.binary_search(&row).ok()?;
            self.zval[self.colptr[col] + k]
        };
        Some(self.scale[a] * z * self.scale[b])
    }

    /// aᵀ P a for a sparse gradient `a` of a function of the state.
    pub fn variance(&self, a: &[(usize, f64)]) -> f64 {
        self.covariance(a, a).max(0.0)
    }

    /// aᵀ P b: from the selected inverse when every pair is in its pattern, else from P b
    /// (one solve, cached).
    pub fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        if a.len() <= PATTERN_SUPPORT && b.len() <= PATTERN_SUPPORT {
            let mut total = 0.0;
            let mut complete = true;
            'pairs: for &(i, vi) in a {
                for &(k, vk) in b {
                    match self.entry(i, k) {
                        Some(p) => total += vi * p * vk,
                        None => {
                            complete = false;
                            break 'pairs;
                        }
                    }
                }
            }
            if complete {
                return total;
            }
        }
        // Solve for the wider of the two: it is the one that recurs.
        let (narrow, wide) = if a.len() < b.len() { (a, b) } else { (b, a) };
        let key: Vec<(usize, u64)> = wide.iter().map(|&(i, v)| (i, v.to_bits())).collect();
        let mut cache = self.solved.borrow_mut();
        let position = match cache.iter().position(|(k, _)| *k == key) {
            Some(position) => position,
            None => {
                let mut rhs = vec![0.0; self.dinv.len()];
                for &(i, v) in wide {
                    rhs[i] += v;
                }
                let mut x = self.solve(&rhs);
                x.truncate(self.n);
                if cache.len() == CACHED_SOLVES {
                    cache.remove(0);
                }
                cache.push((key, x));
                cache.len() - 1
            }
        };
        let x = &cache[position].1;
        narrow.iter().map(|&(i, v)| v * x[i]).sum()
    }

    /// (J P Jᵀ)_ii.
    pub fn leverage(&self, i: usize) -> f64 {
        self.variance(&self.j_rows[i])
    }

    /// J P Jᵀ column by column (m solves).
    pub fn hat_matrix(&self) -> DMatrix<f64> {
        uncancelled(self.hat_matrix_cancellable(&Cancel::never()))
    }

    /// [`SparseCovariance::hat_matrix`], given up once `cancel` has passed (checked before
    /// each solve: thousands of them on a large network, seconds in all).
    pub fn hat_matrix_cancellable(&self, cancel: &Cancel) -> Result<DMatrix<f64>, Cancelled> {
        let m = self.j_rows.len();
        let size = self.dinv.len();
        let mut h = DMatrix::zeros(m, m);
        for i in 0..m {
            cancel.check()?;
            let mut b = vec![0.0; size];
            for &(c, v) in &self.j_rows[i] {
                b[c] += v;
            }
            let x = self.solve(&b);
            for (k, row) in self.j_rows.iter().enumerate() {
                h[(k, i)] = row.iter().map(|&(c, v)| v * x[c]).sum();
            }
        }
        Ok(h)
    }

    /// A solution x of G x = d: the state part of K̃⁻¹ [0; d].
    pub fn constraint_solution(&self, d: &[f64]) -> Vec<f64> {
        let mut b = vec![0.0; self.dinv.len()];
        b[self.n..].copy_from_slice(d);
        let mut x = self.solve(&b);
        x.truncate(self.n);
        x
    }

    /// J x for a state vector x (σ-scaled measurement space).
    fn j_times(&self, x: &[f64]) -> Vec<f64> {
        self.j_rows
            .iter()
            .map(|row| row.iter().map(|&(c, v)| v * x[c]).sum())
            .collect()
    }

    /// W v = v − J P Jᵀ v, the covariance of the σ-scaled adjustments applied to v (one solve).
    pub fn adjustment(&self, v: &[f64]) -> Vec<f64> {
        let mut b = vec![0.0; self.dinv.len()];
        for (row, &vi) in self.j_rows.iter().zip(v) {
            if vi != 0.0 {
                for &(c, jv) in row {
                    b[c] += jv * vi;
                }
            }
        }
        let x = self.solve(&b);
        v.iter().zip(self.j_times(&x)).map(|(a, b)| a - b).collect()
    }

    /// The signature f_d = J x_d of a constraint right-hand side d, with x_d the state part of
    /// K̃⁻¹ [0; d] (`constraint_solution`; one solve).
    ///
    /// From the first block row of K̃ [x; y] = [0; d], H x = −Gᵀ(W G x + y) − E x (E: the
    /// pivots replaced on unobservable states, whose K̃⁻¹ columns J maps to 0), so J P Jᵀ f_d
    /// = 0 (P Gᵀ = 0): W f_d = f_d, and a leak's GLR needs no projection.
    pub fn constraint_signature(&self, d: &[f64]) -> Vec<f64> {
        self.j_times(&self.constraint_solution(d))
    }

    /// y, the constraint part of K̃⁻¹ [Jᵀ v; 0] (one solve): for every d, f_dᵀ v = dᵀ y with
    /// f_d the signature of `constraint_signature` (K̃ is symmetric). One solve gives the
    /// product of v with the signature of every leak.
    pub fn signature_products(&self, v: &[f64]) -> Vec<f64> {
        let mut b = vec![0.0; self.dinv.len()];
        for (row, &vi) in self.j_rows.iter().zip(v) {
            if vi != 0.0 {
                for &(c, jv) in row {
                    b[c] += jv * vi;
                }
            }
        }
        let x = self.solve(&b);
        x[self.n..].to_vec()
    }

    /// ‖f_d‖² for the signature f_d = J x_d of a constraint right-hand side d given by its
    /// entries (row, value), without a solve when every pair of d's rows is in the selected
    /// inverse's pattern. Also the size of the terms it is the difference of (0 after a
    /// solve): a value far below them is rounding.
    ///
    /// With [x; y] = K̃⁻¹ [0; d], K̃ = [H + Gᵀ W G + E_s, Gᵀ; G, −E_c] (W = S_y² the
    /// augmentation, E_s and E_c the replaced pivots' additions on states and rows):
    /// H x = −Gᵀ W g − E_s x − Gᵀ y with g = G x = d + E_c y, so
    /// ‖J x‖² = xᵀ H x = −gᵀ W g − xᵀ E_s x − dᵀ y − yᵀ E_c y. Here dᵀ y = dᵀ Y d with Y the
    /// constraint block of K̃⁻¹ (selected entries), and x, y at the replaced pivots are the
    /// stored K̃⁻¹ columns there times d (K̃ symmetric). It is the minimum of ‖J z‖² over
    /// G z = d: the value of that equality-constrained least-squares problem from its KKT
    /// inverse (Nocedal & Wright, *Numerical Optimization*, 2nd ed., §16.1).
    pub fn signature_norm(&self, d: &[(usize, f64)]) -> (f64, f64) {
        let n = self.n;
        let mut dyd = 0.0;
        for &(a, va) in d {
            for &(b, vb) in d {
                match self.entry(n + a, n + b) {
                    Some(y) => dyd += va * y * vb,
                    None => {
                        let mut dense = vec![0.0; self.dinv.len() - n];
                        for &(row, v) in d {
                            dense[row] += v;
                        }
                        let norm = self
                            .constraint_signature(&dense)
                            .iter()
                            .map(|f| f * f)
                            .sum();
                        return (norm, 0.0);
                    }
                }
            }
        }
        // g = d + E_c y on d's rows and the replaced rows; x and y at the replaced pivots.
        let mut g: Vec<(usize, f64)> = d.to_vec();
        let mut pinned = 0.0;
        for pin in &self.pins {
            let at: f64 = d.iter().map(|&(row, v)| v * pin.constraint_part[row]).sum();
            if pin.index < n {
                pinned += pin.added * at * at;
            } else {
                // −E_c is the addition on a row's diagonal (added < 0).
                let e_c = -pin.added;
                pinned += e_c * at * at;
                g.push((pin.index - n, e_c * at));
            }
        }
        g.sort_unstable_by_key(|&(row, _)| row);
        merge_duplicates(&mut g);
        let gwg: f64 = g
            .iter()
            .map(|&(row, v)| {
                let s = self.scale[n + row];
                s * s * v * v
            })
            .sum();
        (-gwg - pinned - dyd, gwg + pinned + dyd.abs())
    }
}

fn merge_duplicates(row: &mut Vec<(usize, f64)>) {
    let mut out: Vec<(usize, f64)> = Vec::with_capacity(row.len());
    for &(c, v) in row.iter() {
        match out.last_mut() {
            Some((lc, lv)) if *lc == c => *lv += v,
            _ => out.push((c, v)),
        }
    }
    *row = out;
}

/// Symmetric Ruiz equilibration of the symmetric matrix given by its upper triangle: a few
/// sweeps of s ← s / √(largest entry of S A S in each column).
fn ruiz(size: usize, upper: &[(usize, usize, f64)]) -> Vec<f64> {
    let mut s = vec![1.0; size];
    for _ in 0..EQUILIBRATION_SWEEPS {
        let mut largest = vec![0.0f64; size];
        for &(a, b, v) in upper {
            let x = (s[a] * v * s[b]).abs();
            largest[a] = largest[a].max(x);
            largest[b] = largest[b].max(x);
        }
        for i in 0..size {
            if largest[i] > 0.0 && largest[i].is_finite() {
                s[i] /= largest[i].sqrt();
            }
        }
    }
    s
}

/// The upper triangle (row ≤ column) as compressed columns, duplicates summed.
fn compress_upper(size: usize, mut entries: Vec<(usize, usize, f64)>) -> CscMatrix<f64> {
    entries.sort_unstable_by_key(|&(r, c, _)| (c, r));
    let mut colptr = vec![0usize; size + 1];
    let mut rowval = Vec::with_capacity(entries.len());
    let mut nzval: Vec<f64> = Vec::with_capacity(entries.len());
    let mut last = None;
    for (r, c, v) in entries {
        if last == Some((r, c)) {
            *nzval.last_mut().expect("pushed") += v;
        } else {
            last = Some((r, c));
            rowval.push(r);
            nzval.push(v);
            colptr[c + 1] += 1;
        }
    }
    for c in 0..size {
        colptr[c + 1] += colptr[c];
    }
    CscMatrix::new(size, size, colptr, rowval, nzval)
}

/// Orthonormal basis of the span of the columns (few, each of norm at most 1), from their SVD;
/// singular values below BASIS_TOLERANCE are rounding.
fn orthonormal_basis(candidates: DMatrix<f64>) -> DMatrix<f64> {
    let (rows, cols) = candidates.shape();
    if cols == 0 {
        return DMatrix::zeros(rows, 0);
    }
    let svd = candidates.svd(true, false);
    let u = svd.u.expect("requested");
    let keep: Vec<usize> = (0..svd.singular_values.len())
        .filter(|&k| svd.singular_values[k] > BASIS_TOLERANCE)
        .collect();
    DMatrix::from_fn(rows, keep.len(), |r, k| u[(r, keep[k])])
}
