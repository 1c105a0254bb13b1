//! The sparse classification and covariance (covariance.rs, used from SPARSE_THRESHOLD states on)
//! against the dense projection (classify.rs) on generated networks of a few hundred states.

use reconcile::classify::{classify_dense, classify_sparse, Classification};
use reconcile::equations::{measurement, stream_fraction, stream_total, Layout};
use reconcile::solve::{solve, Measured, SolveOptions, SolveStatus};
use reconcile::start::initial_point;
use reconcile::Plant;
use testkit::network;

fn measured(
    plant: &Plant,
    values: &[reconcile::period::MeterValue],
    keep: impl Fn(usize) -> bool,
) -> Vec<Measured> {
    values
        .iter()
        .filter(|v| keep(v.meter))
        .map(|v| Measured {
            meter: v.meter,
            value: v.value,
            sigma: plant.meters[v.meter].sigma_for(v.value).unwrap(),
        })
        .collect()
}

/// Every function the report gives a σ for on a stream, a split fraction, an extent, a meter.
fn functions(plant: &Plant, layout: &Layout, z: &[f64]) -> Vec<(String, Vec<(usize, f64)>)> {
    let mut out = Vec::new();
    for s in 0..plant.streams.len() {
        out.push((format!("total {s}"), stream_total(plant, layout, s, z).1));
        for &c in &plant.streams[s].components {
            out.push((
                format!("x {s} {c}"),
                stream_fraction(plant, layout, s, c, z).1,
            ));
            let i = layout.flow(plant, s, c).unwrap();
            out.push((format!("n {s} {c}"), vec![(i, 1.0)]));
        }
    }
    for &(o, i) in &layout.splits {
        out.push((format!("split {o}"), vec![(i, 1.0)]));
    }
    for (k, meter) in plant.meters.iter().enumerate() {
        out.push((format!("meter {k}"), measurement(plant, layout, meter, z).1));
    }
    // A function across streams (as a loop figure is): the sum of two distant streams.
    let a = stream_total(plant, layout, 0, z).1;
    let b = stream_total(plant, layout, plant.streams.len() - 1, z).1;
    out.push(("two streams".into(), a.into_iter().chain(b).collect()));
    out
}

fn compare(
    dense: &Classification,
    sparse: &Classification,
    plant: &Plant,
    layout: &Layout,
    m: usize,
    z: &[f64],
) -> usize {
    assert_eq!(dense.redundancy, sparse.redundancy, "degree of redundancy");
    assert_eq!(
        dense.unobservable.ncols(),
        sparse.unobservable.ncols(),
        "unobservable directions"
    );
    for k in 0..m {
        assert_eq!(
            dense.is_redundant(k),
            sparse.is_redundant(k),
            "redundancy of meter {k}"
        );
        let (ld, ls) = (dense.leverage(k), sparse.leverage(k));
        // The reconciled σ is σ_i √leverage and the adjustment σ is σ_i √(1 − leverage).
        assert!(
            (ld.sqrt() - ls.sqrt()).abs() <= 1e-6 * ld.sqrt().max(1e-12),
            "leverage of meter {k}: {ld} vs {ls}"
        );
        if dense.is_redundant(k) {
            let (ad, as_) = (dense.adjustment_variance(k), sparse.adjustment_variance(k));
            assert!(
                (ad.sqrt() - as_.sqrt()).abs() <= 1e-6 * ad.sqrt(),
                "adjustment σ of meter {k}: {ad} vs {as_}"
            );
        }
    }
    let mut observable = 0;
    let mut worst: f64 = 0.0;
    for (name, grad) in functions(plant, layout, z) {
        let (od, os) = (dense.is_observable(&grad), sparse.is_observable(&grad));
        assert_eq!(od, os, "observability of {name}");
        if od {
            observable += 1;
            let (sd, ss) = (dense.sigma(&grad), sparse.sigma(&grad));
            worst = worst.max((sd - ss).abs() / sd.max(1e-300));
            assert!(
                (sd - ss).abs() <= 1e-6 * sd.max(1e-300),
                "σ of {name}: {sd} vs {ss} (relative {:e})",
                (sd - ss).abs() / sd
            );
        }
    }
    println!("largest relative difference of σ: {worst:e}");
    observable
}

fn case(streams: usize, keep: impl Fn(&Plant, usize) -> bool) -> (usize, usize) {
    let net = network::network(streams, 7);
    let values = testkit::noisy_values(
        &net.plant,
        &testkit::exact_values(&net.plant, &net.layout, &net.z),
        0,
    );
    let m = measured(&net.plant, &values, |k| keep(&net.plant, k));
    let layout = Layout::new(&net.plant);
    let start = initial_point(&net.plant, &layout, &m);
    let s = solve(&net.plant, &layout, &m, start, SolveOptions::default());
    assert_eq!(s.status, SolveStatus::Converged);
    let dense = classify_dense(&net.plant, &layout, &m, &s.z, &vec![false; layout.n]);
    let sparse = classify_sparse(&net.plant, &layout, &m, &s.z).expect("sparse factorisation");
    let observable = compare(&dense, &sparse, &net.plant, &layout, m.len(), &s.z);
    (observable, dense.unobservable.ncols())
}

/// Every meter of a network of 60 streams (about 500 states): all observable.
#[test]
fn sparse_path_agrees_with_the_dense_one() {
    let (observable, unobservable) = case(60, |_, _| true);
    println!("{observable} functions observable, {unobservable} unobservable directions");
    assert_eq!(unobservable, 0);
}

/// The same network without its analysers on feeds: the feeds' compositions, and with them
/// much of the network's, are unobservable.
#[test]
fn sparse_path_agrees_on_unobservable_states() {
    let (observable, unobservable) = case(60, |plant, k| {
        let meter = &plant.meters[k];
        !(meter.component.is_some() && plant.streams[meter.stream].from.is_none() && k % 2 == 0)
    });
    println!("{observable} functions observable, {unobservable} unobservable directions");
    assert!(unobservable > 0);
}

/// A gross error on a network above SPARSE_THRESHOLD: identification on the sparse path (W from
/// one solve per meter, leak signatures from the KKT factorisation) names the same groups with
/// the same statistics and magnitudes as on the dense one.
#[test]
fn identification_agrees_between_paths() {
    let net = network::network(80, 7);
    let plant = &net.plant;
    let mut values =
        testkit::noisy_values(plant, &testkit::exact_values(plant, &net.layout, &net.z), 3);
    // +10σ on a flow meter in the middle of the chain.
    let k = (0..plant.meters.len())
        .find(|&k| {
            plant.meters[k].component.is_none() && plant.meters[k].stream > plant.streams.len() / 2
        })
        .unwrap();
    values[k].value += 10.0 * plant.meters[k].sigma_for(values[k].value).unwrap();
    let sparse = reconcile::estimate(plant, measured(plant, &values, |_| true));
    assert!(sparse.layout.n >= reconcile::classify::SPARSE_THRESHOLD);
    assert!(sparse.classification.sparse.is_some(), "sparse path taken");
    assert_eq!(sparse.solution.status, SolveStatus::Converged);
    let dense = reconcile::Estimate {
        classification: classify_dense(
            plant,
            &sparse.layout,
            &sparse.measured,
            &sparse.solution.z,
            &vec![false; sparse.layout.n],
        ),
        ..sparse.clone()
    };
    let (a, b) = (
        reconcile::faults::identify(plant, &sparse),
        reconcile::faults::identify(plant, &dense),
    );
    assert!(!a.faults.is_empty(), "the gross error is found");
    assert!(
        a.faults[0].candidates.contains(&plant.meters[k].tag),
        "{:?} names {}",
        a.faults[0].candidates,
        plant.meters[k].tag
    );
    assert_eq!(a.faults.len(), b.faults.len());
    for (x, y) in a.faults.iter().zip(&b.faults) {
        assert_eq!(x.candidates, y.candidates);
        assert!((x.statistic - y.statistic).abs() <= 1e-6 * y.statistic);
        assert!((x.magnitude - y.magnitude).abs() <= 1e-6 * y.magnitude.abs());
        assert!((x.magnitude_sigma - y.magnitude_sigma).abs() <= 1e-6 * y.magnitude_sigma);
    }
    println!(
        "{:?}",
        a.faults.iter().map(|f| &f.candidates).collect::<Vec<_>>()
    );
}
