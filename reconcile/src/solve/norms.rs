//! The vector norms the iteration measures its residuals and steps with.

pub(super) fn norm_inf(v: &[f64]) -> f64 {
    v.iter().fold(0.0, |a, x| a.max(x.abs()))
}

pub(super) fn norm_1(v: &[f64]) -> f64 {
    v.iter().map(|x| x.abs()).sum()
}
