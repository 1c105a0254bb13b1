//! Each meter's worth to the loop figures by rank-one updates of the reconciled covariance
//! (reconcile::meter_value), checked number for number against a fresh estimate with the
//! model changed: the meter's σ halved, or the meter's reading taken away. Noise-free data, so
//! the reconciled state is the same whatever the weights and the comparison is exact up to
//! rounding.
//!
//! Candidate new meters (reconcile::meter_value::candidates) are checked the same way: the
//! candidate added to the model with its exact reading.

mod best;
mod candidates;
mod closed_form;
mod detectability;
mod worth;

use reconcile::equations::{measurement, Layout};
use reconcile::meter_value::Candidate;
use reconcile::model::{Meter, Sigma};
use reconcile::period::MeterValue;
use reconcile::report::Figure;
use reconcile::Plant;

/// The plant with meter `k`'s σ halved, whatever its rule.
pub fn halved(plant: &Plant, k: usize) -> Plant {
    let mut p = plant.clone();
    p.meters[k].sigma = match p.meters[k].sigma {
        Sigma::Absolute(s) => Sigma::Absolute(s / 2.0),
        Sigma::PercentOfReading(s) => Sigma::PercentOfReading(s / 2.0),
        Sigma::PercentOfSpan(s) => Sigma::PercentOfSpan(s / 2.0),
    };
    p
}

/// The period's meter values but those of meter `k`: the meter lost.
pub fn without(values: &[MeterValue], k: usize) -> Vec<MeterValue> {
    values.iter().filter(|v| v.meter != k).cloned().collect()
}

/// The figure of `name` and `subject` in a report.
pub fn figure_of<'a>(report: &'a reconcile::Report, name: &str, subject: &str) -> &'a Figure {
    report
        .figures
        .iter()
        .find(|f| f.name == name && f.subject == subject)
        .unwrap_or_else(|| panic!("{name} {subject} in the report"))
}

/// Equal to 1e-7 of σ, with a floor of 1e-10 of the figure's size for figures whose σ is a
/// rounding error (a balance's closure, zero by construction).
pub fn same_sigma(rank_one: Option<f64>, fresh: &Figure, what: &str) {
    let floor = 1e-10 * fresh.value.map_or(1.0, |v| v.abs().max(1.0));
    match (rank_one, fresh.value.and(fresh.sigma)) {
        (Some(a), Some(b)) => assert!(
            (a - b).abs() <= 1e-7 * b.abs() + floor,
            "{what}: rank-one update {a}, fresh estimate {b}"
        ),
        (None, None) => {}
        (a, b) => panic!("{what}: rank-one update {a:?}, fresh estimate {b:?}"),
    }
}

/// The plant with `candidate` added as its last meter (tag `NEW-n`), and its exact
/// reading at the state `z` appended to `values`.
pub fn with_candidate(
    plant: &Plant,
    values: &[MeterValue],
    z: &[f64],
    candidate: &Candidate,
) -> (Plant, Vec<MeterValue>) {
    let mut p = plant.clone();
    p.meters.push(Meter {
        tag: format!("NEW-{}", p.meters.len()),
        stream: candidate.stream,
        quantity: candidate.quantity,
        component: candidate.component,
        basis: None,
        uom: candidate.uom,
        sigma: match candidate.sigma_pct {
            Some(pct) => Sigma::PercentOfReading(pct),
            None => Sigma::Absolute(candidate.sigma),
        },
        range: None,
    });
    let layout = Layout::new(&p);
    let meter = p.meters.last().unwrap();
    let mut values = values.to_vec();
    values.push(MeterValue {
        meter: p.meters.len() - 1,
        value: measurement(&p, &layout, meter, z).0,
        ..values[0]
    });
    (p, values)
}

/// The Vantle Cross loop at its true state: the plant, the state and every meter's exact
/// reading.
pub fn vantle_exact() -> (Plant, Vec<f64>, Vec<MeterValue>) {
    let plant = reconcile::parse_plant(testkit::plants::VANTLE).unwrap();
    let layout = Layout::new(&plant);
    let z = testkit::vantle_true_state(&plant, &layout, &testkit::VantleConditions::default());
    let values = testkit::exact_values(&plant, &layout, &z);
    (plant, z, values)
}
