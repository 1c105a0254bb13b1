//! The meters measured in a period and the objective's terms (docs/methods.md §2): the
//! σ-scaled residuals r = (y − h(z))/σ and their Jacobian J.

use crate::equations::{measurement, measurement_value, Layout};
use crate::model::Plant;
use crate::sparse::Triplets;

/// A meter measured in the period being reconciled: its value and σ in the meter's uom.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    pub meter: usize,
    pub value: f64,
    pub sigma: f64,
}

/// σ-scaled residuals r and Jacobian J of the measurements at z, and the objective ‖r‖².
pub fn scaled_measurements(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
) -> (Vec<f64>, Triplets) {
    let mut r = Vec::with_capacity(measured.len());
    let mut j = Triplets::new(measured.len(), layout.n);
    for (i, m) in measured.iter().enumerate() {
        let (h, grad) = measurement(plant, layout, &plant.meters[m.meter], z);
        r.push((m.value - h) / m.sigma);
        for (col, d) in grad {
            j.push(i, col, d / m.sigma);
        }
    }
    (r, j)
}

/// σ-scaled residuals r alone, for the line search's merit: no Jacobian is built.
pub fn scaled_residuals(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    z: &[f64],
) -> Vec<f64> {
    measured
        .iter()
        .map(|m| (m.value - measurement_value(plant, layout, &plant.meters[m.meter], z)) / m.sigma)
        .collect()
}
