//! Identification from the sparse factorisation (faults/sparse.rs: a few solves per accepted
//! group) against the dense GLR (faults/dense.rs: W as an m × m matrix, one solve per meter and
//! per unit) on the generated networks of 250 and 500 streams with one and two gross errors:
//! the same fault groups (kinds, ids, order, equivalence), statistics and magnitudes.

use reconcile::classify::SPARSE_THRESHOLD;
use reconcile::equations::Row;
use reconcile::faults::{identify_with, Identification, Method};
use reconcile::solve::{Measured, SolveStatus};
use reconcile::{Estimate, Plant};
use testkit::network::{middle_flow_meter, network, with_gross_error};

/// Relative agreement asked of every statistic, magnitude and σ.
const TOLERANCE: f64 = 1e-8;

fn measured(plant: &Plant, values: &[reconcile::period::MeterValue]) -> Vec<Measured> {
    values
        .iter()
        .map(|v| Measured {
            meter: v.meter,
            value: v.value,
            sigma: plant.meters[v.meter].sigma_for(v.value).unwrap(),
        })
        .collect()
}

/// Where a gross error goes.
#[derive(Clone, Copy)]
enum Error {
    /// The nth flow meter past the middle of the chain.
    Middle(usize),
    /// The flow meter of the nth product stream past the middle (a stream out of the plant:
    /// its bias and a leak at its splitter may be equivalent).
    Product(usize),
}

fn product_flow_meter(plant: &Plant, nth: usize) -> usize {
    (0..plant.meters.len())
        .filter(|&k| {
            let meter = &plant.meters[k];
            meter.component.is_none()
                && meter.stream > plant.streams.len() / 2
                && plant.streams[meter.stream].to.is_none()
        })
        .nth(nth)
        .expect("a product flow meter")
}

/// The estimate of the network of `streams` streams with `errors` (the `nth` flow meter past the
/// middle, size in σ) added to seed-3 noise, keeping the meters `keep` accepts.
fn faulty_estimate(
    streams: usize,
    errors: &[(Error, f64)],
    keep: impl Fn(&Plant, usize) -> bool,
) -> (Plant, Estimate, Vec<String>) {
    let net = network(streams, 7);
    let plant = net.plant;
    let mut values = testkit::noisy_values(
        &plant,
        &testkit::exact_values(&plant, &net.layout, &net.z),
        3,
    );
    let mut tags = Vec::new();
    for &(error, sigmas) in errors {
        let k = match error {
            Error::Middle(nth) => middle_flow_meter(&plant, nth),
            Error::Product(nth) => product_flow_meter(&plant, nth),
        };
        values = with_gross_error(&plant, values, k, sigmas);
        tags.push(plant.meters[k].tag.clone());
    }
    values.retain(|v| keep(&plant, v.meter));
    let est = reconcile::estimate(&plant, measured(&plant, &values));
    assert!(est.layout.n >= SPARSE_THRESHOLD);
    assert!(est.classification.sparse.is_some(), "sparse path taken");
    assert_eq!(est.solution.status, SolveStatus::Converged);
    (plant, est, tags)
}

fn identify(plant: &Plant, est: &Estimate, method: Method) -> Identification {
    identify_with(
        plant,
        &est.layout,
        &est.measured,
        &est.solution.z,
        &est.classification,
        method,
    )
}

fn close(a: f64, b: f64, what: &str) -> f64 {
    let relative = (a - b).abs() / b.abs().max(1e-300);
    assert!(
        relative <= TOLERANCE,
        "{what}: {a} vs {b} (relative {relative:e})"
    );
    relative
}

/// Both methods on the estimate; asserts they agree and returns the factorised one's answer.
fn agree(plant: &Plant, est: &Estimate) -> Identification {
    let dense = identify(plant, est, Method::Dense);
    let sparse = identify(plant, est, Method::Factorised);
    assert_eq!(
        sparse.faults.len(),
        dense.faults.len(),
        "number of fault groups"
    );
    let mut worst: f64 = 0.0;
    for (x, y) in sparse.faults.iter().zip(&dense.faults) {
        assert_eq!(x.kind, y.kind);
        assert_eq!(x.candidates, y.candidates);
        worst = worst.max(close(x.statistic, y.statistic, "statistic"));
        worst = worst.max(close(x.magnitude, y.magnitude, "magnitude"));
        worst = worst.max(close(x.magnitude_sigma, y.magnitude_sigma, "σ"));
        assert_eq!(x.members.len(), y.members.len());
        for (a, b) in x.members.iter().zip(&y.members) {
            assert_eq!((a.kind, &a.id, a.equivalent), (b.kind, &b.id, b.equivalent));
            worst = worst.max(close(a.statistic, b.statistic, &a.id));
            worst = worst.max(close(a.magnitude, b.magnitude, &a.id));
            worst = worst.max(close(a.magnitude_sigma, b.magnitude_sigma, &a.id));
        }
    }
    assert_eq!(sparse.suspect_tags, dense.suspect_tags);
    assert_eq!(sparse.compensated_dof, dense.compensated_dof);
    worst = worst.max(close(
        sparse.compensated_objective,
        dense.compensated_objective,
        "compensated objective",
    ));
    println!(
        "{:?}; largest relative difference {worst:e}",
        sparse
            .faults
            .iter()
            .map(|f| (&f.candidates, f.statistic))
            .collect::<Vec<_>>()
    );
    sparse
}

/// Every leak signature's ‖f‖² from the selected inverse against the one from a solve.
fn signature_norms_agree(plant: &Plant, est: &Estimate) {
    let cov = est.classification.sparse.as_ref().expect("sparse");
    let rows = est.layout.rows.len();
    let mut worst: f64 = 0.0;
    let mut solved = 0;
    for u in 0..plant.units.len() {
        let d: Vec<(usize, f64)> = est
            .layout
            .rows
            .iter()
            .enumerate()
            .filter(|(_, r)| matches!(r, Row::Balance { unit, .. } if *unit == u))
            .map(|(row, r)| match r {
                Row::Balance { component, .. } => (row, 0.1 + *component as f64 / 10.0),
                Row::Split { .. } => unreachable!(),
            })
            .collect();
        let mut dense = vec![0.0; rows];
        for &(row, v) in &d {
            dense[row] = v;
        }
        let direct: f64 = cov.constraint_signature(&dense).iter().map(|f| f * f).sum();
        let (norm, terms) = cov.signature_norm(&d);
        if terms == 0.0 {
            solved += 1;
        }
        worst = worst.max(close(norm, direct, &plant.units[u].id));
    }
    println!(
        "‖f‖² of the leak signatures: largest relative difference {worst:e}; {solved} of {} \
         units outside the pattern",
        plant.units.len()
    );
}

fn names_first(found: &Identification, tags: &[String]) {
    for tag in tags {
        assert!(
            found.faults.iter().any(|f| f.candidates.contains(tag)),
            "{tag} in {:?}",
            found.faults
        );
    }
}

#[test]
fn one_gross_error_250() {
    let (plant, est, tags) = faulty_estimate(250, &[(Error::Middle(0), 20.0)], |_, _| true);
    signature_norms_agree(&plant, &est);
    names_first(&agree(&plant, &est), &tags);
}

#[test]
fn two_gross_errors_250() {
    let (plant, est, tags) = faulty_estimate(
        250,
        &[(Error::Middle(0), 20.0), (Error::Middle(9), -25.0)],
        |_, _| true,
    );
    names_first(&agree(&plant, &est), &tags);
}

/// Without half the feed analysers: unobservable compositions, whose replaced pivots enter the
/// leak signatures' norms.
#[test]
fn gross_error_with_unobservable_states_250() {
    let (plant, est, tags) = faulty_estimate(250, &[(Error::Middle(0), 20.0)], |plant, k| {
        let meter = &plant.meters[k];
        !(meter.component.is_some() && plant.streams[meter.stream].from.is_none() && k % 2 == 0)
    });
    assert!(est.classification.unobservable.ncols() > 0);
    signature_norms_agree(&plant, &est);
    names_first(&agree(&plant, &est), &tags);
}

#[test]
fn one_gross_error_500() {
    let (plant, est, tags) = faulty_estimate(500, &[(Error::Middle(0), 30.0)], |_, _| true);
    signature_norms_agree(&plant, &est);
    names_first(&agree(&plant, &est), &tags);
}

#[test]
fn two_gross_errors_500() {
    let (plant, est, tags) = faulty_estimate(
        500,
        &[(Error::Middle(0), 30.0), (Error::Product(3), -80.0)],
        |_, _| true,
    );
    names_first(&agree(&plant, &est), &tags);
}

/// A gross error on a product stream's flow meter: a group with more than one member.
#[test]
fn gross_error_on_a_product_stream_250() {
    let (plant, est, tags) = faulty_estimate(250, &[(Error::Product(0), 80.0)], |_, _| true);
    let found = agree(&plant, &est);
    names_first(&found, &tags);
}
