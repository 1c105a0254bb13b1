//! The estimate's uncertainty with new meters added, exactly, by low-rank updates of the
//! reconciled covariance.
//!
//! In the directions the model allows, the covariance P is the generalised inverse of the
//! information M = Σ wᵢ jᵢ jᵢᵀ of the meters. A new meter with gradient g and σ adds c cᵀ,
//! c = g/σ. Two cases (Meyer, "Generalized inversion of modified matrices", SIAM J. Appl.
//! Math. 24, 1973, for the symmetric rank-one case):
//!
//! - c lies in the range of M (the new meter measures something already determined): the
//!   Sherman–Morrison formula, P' = P − (P c)(P c)ᵀ / (1 + cᵀPc);
//! - c has a part u = U Uᵀ c along the unobservable directions U: the meter determines the
//!   direction u and
//!
//!   ```text
//!   P' = P − ((P c) uᵀ + u (P c)ᵀ) / uᵀu + (1 + cᵀPc) u uᵀ / (uᵀu)²
//!   ```
//!
//!   and the unobservable directions lose u.
//!
//! After t additions P_t = P − W C Wᵀ with W a few dense columns (each P c or u) and C a small
//! symmetric matrix, so a covariance costs the base one plus a few sparse dot products. Each
//! addition costs one product P c with the base covariance (one solve on the sparse path).

use nalgebra::{DMatrix, DVector};

use crate::classify::Classification;
use crate::uncertainty::Uncertainty;

/// A new meter's gradient counts as having an unobservable part when ‖Uᵀc‖ exceeds this share
/// of ‖c‖: the classification's own observability tolerance.
const NEW_DIRECTION: f64 = 1e-7;

/// The reconciled covariance with meters added.
#[derive(Clone)]
pub struct Augmented<'a> {
    base: &'a Classification,
    /// Unobservable directions now, orthonormal columns (n × k).
    unobservable: DMatrix<f64>,
    /// The columns of W.
    w: Vec<Column>,
    /// C, symmetric, as many rows as W has columns.
    c: DMatrix<f64>,
}

/// A column of W: the first addition's P c kept as c (its products aᵀPc are the base's
/// covariances, with no solve for P c unless a second addition needs it), or dense.
#[derive(Clone)]
enum Column {
    Implicit(Vec<(usize, f64)>),
    Dense(Vec<f64>),
}

fn dot_sparse(a: &[(usize, f64)], x: &[f64]) -> f64 {
    a.iter().map(|&(i, v)| v * x[i]).sum()
}

impl<'a> Augmented<'a> {
    /// The reconciled covariance as it is.
    pub fn new(base: &'a Classification) -> Self {
        Augmented {
            base,
            unobservable: base.unobservable.clone(),
            w: Vec::new(),
            c: DMatrix::zeros(0, 0),
        }
    }

    /// How many directions of the state the data leave undetermined.
    pub fn unobservable_directions(&self) -> usize {
        self.unobservable.ncols()
    }

    /// Wᵀa.
    fn wt(&self, a: &[(usize, f64)]) -> DVector<f64> {
        DVector::from_iterator(
            self.w.len(),
            self.w.iter().map(|col| match col {
                Column::Implicit(c) => self.base_covariance(a, c),
                Column::Dense(x) => dot_sparse(a, x),
            }),
        )
    }

    fn dense(&self, col: &Column) -> Vec<f64> {
        match col {
            Column::Implicit(c) => self.base.apply(&self.observable_part(c)),
            Column::Dense(x) => x.clone(),
        }
    }

    /// The base covariance's generalised-inverse product: a and b with their parts along the
    /// base's unobservable directions removed (none when they are observable there).
    fn base_covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        let a = self.observable_part(a);
        let b = self.observable_part(b);
        self.base.covariance(&a, &b)
    }

    fn observable_part(&self, a: &[(usize, f64)]) -> Vec<(usize, f64)> {
        if self.base.is_observable(a) {
            return a.to_vec();
        }
        let mut x = vec![0.0; self.base.unobservable.nrows()];
        for &(i, v) in a {
            x[i] += v;
        }
        self.base.remove_unobservable(&mut x);
        x.into_iter()
            .enumerate()
            .filter(|&(_, v)| v != 0.0)
            .collect()
    }

    /// P_t a, dense.
    fn apply(&self, a: &[(usize, f64)]) -> Vec<f64> {
        let mut x = self.base.apply(&self.observable_part(a));
        if !self.w.is_empty() {
            let y = &self.c * self.wt(a);
            for (col, coef) in self.w.iter().zip(y.iter()) {
                let col = self.dense(col);
                x.iter_mut().zip(&col).for_each(|(xi, ci)| *xi -= coef * ci);
            }
        }
        x
    }

    /// aᵀ(P − P_t)b = (Wᵀa)ᵀ C (Wᵀb): how much the additions took off the covariance.
    pub fn change(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        if self.w.is_empty() {
            return 0.0;
        }
        self.wt(a).dot(&(&self.c * self.wt(b)))
    }

    /// Add a meter with gradient `g` (on the state, in its uom) and standard deviation
    /// `sigma`. Answers whether it determined a direction that was undetermined.
    pub fn add(&mut self, g: &[(usize, f64)], sigma: f64) -> bool {
        let c: Vec<(usize, f64)> = g.iter().map(|&(i, v)| (i, v / sigma)).collect();
        let (pc, cpc) = if self.w.is_empty() {
            let cpc = self.base_covariance(&c, &c);
            (Column::Implicit(c.clone()), cpc)
        } else {
            let pc = self.apply(&c);
            let cpc = dot_sparse(&c, &pc);
            (Column::Dense(pc), cpc)
        };
        let beta = 1.0 + cpc;
        let y: DVector<f64> = DVector::from_iterator(
            self.unobservable.ncols(),
            (0..self.unobservable.ncols()).map(|k| {
                c.iter()
                    .map(|&(i, v)| v * self.unobservable[(i, k)])
                    .sum::<f64>()
            }),
        );
        let norm_c = c.iter().map(|(_, v)| v * v).sum::<f64>().sqrt();
        if y.norm() <= NEW_DIRECTION * norm_c {
            self.push(vec![pc], DMatrix::from_element(1, 1, 1.0 / beta));
            return false;
        }
        let uu = y.norm_squared();
        let u = Column::Dense((&self.unobservable * &y).iter().copied().collect());
        let block = DMatrix::from_row_slice(2, 2, &[0.0, 1.0 / uu, 1.0 / uu, -beta / (uu * uu)]);
        self.push(vec![pc, u], block);
        self.unobservable = without_direction(&self.unobservable, &y);
        true
    }

    fn push(&mut self, columns: Vec<Column>, block: DMatrix<f64>) {
        let (q, r) = (self.w.len(), columns.len());
        let mut c = DMatrix::zeros(q + r, q + r);
        c.view_mut((0, 0), (q, q)).copy_from(&self.c);
        c.view_mut((q, q), (r, r)).copy_from(&block);
        self.c = c;
        self.w.extend(columns);
    }
}

/// U with the direction U y removed: U Q, Q an orthonormal basis of the complement of y in
/// the columns' space (a Householder reflection sending y to the first axis).
fn without_direction(u: &DMatrix<f64>, y: &DVector<f64>) -> DMatrix<f64> {
    let k = y.len();
    let yhat = y / y.norm();
    let mut v = yhat.clone();
    let sign = if yhat[0] >= 0.0 { 1.0 } else { -1.0 };
    v[0] += sign;
    let vv = v.norm_squared();
    let h = DMatrix::identity(k, k) - (&v * v.transpose()) * (2.0 / vv);
    u * h.columns(1, k - 1)
}

impl Uncertainty for Augmented<'_> {
    fn is_observable(&self, a: &[(usize, f64)]) -> bool {
        let norm = a.iter().map(|(_, v)| v * v).sum::<f64>().sqrt();
        (0..self.unobservable.ncols()).all(|k| {
            let p: f64 = a.iter().map(|&(i, v)| v * self.unobservable[(i, k)]).sum();
            p.abs() <= NEW_DIRECTION * norm
        })
    }

    fn covariance(&self, a: &[(usize, f64)], b: &[(usize, f64)]) -> f64 {
        self.base_covariance(a, b) - self.change(a, b)
    }

    fn by_parts(&self) -> bool {
        self.base.by_parts()
    }
}
