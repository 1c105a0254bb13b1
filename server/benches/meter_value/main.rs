//! Meter value (docs/performance.md has the figures and the machine):
//!
//! - `meter_value/demo_loop`: every meter and every candidate valued for the purge fraction of
//!   the demo's methanol loop (server/src/demo/plant.toml) at a noisy hour of its steady state;
//! - `meter_value/demo_loop_best_3`: the same with the best three additions chosen;
//! - `meter_value/network_500`: every meter and every candidate for one stream's flow on the
//!   500-stream generated network (testkit/src/network.rs).
//!
//! Each case times the engine's `reconcile::meter_value::meter_value` on an estimate made
//! once (the estimate itself is the period run's, timed in the engine's bench). Run with
//! `cargo bench -p loopbal-server --bench meter_value`.

use std::hint::black_box;
use std::time::Duration;

use criterion::Criterion;
use loopbal_server::demo::scenario;
use reconcile::equations::Layout;
use reconcile::meter_value::{meter_value, Accuracies, Request, WeightedFigure};
use reconcile::{analyse_period, Analysis, Plant};
use testkit::{exact_values, noisy_values, period};

fn request(name: &str, subject: &str, add_best: Option<usize>) -> Request {
    Request {
        figures: vec![WeightedFigure {
            name: name.into(),
            subject: subject.into(),
            weight: 1.0,
        }],
        accuracies: Accuracies::default(),
        add_best,
    }
}

fn analysed(plant: &Plant, z: &[f64]) -> Analysis {
    let layout = Layout::new(plant);
    let input = period(noisy_values(plant, &exact_values(plant, &layout, z), 3));
    let analysis = analyse_period(plant, &input);
    assert!(
        analysis.report.status.is_usable(),
        "{:?}",
        analysis.report.status
    );
    analysis
}

fn main() {
    let mut c = Criterion::default()
        .configure_from_args()
        .measurement_time(Duration::from_secs(10));
    let demo = scenario::plant();
    let z = scenario::true_state(&demo).expect("the demo loop's steady state");
    let a = analysed(&demo, &z);
    let est = a.estimate.as_ref().expect("an estimate");
    let purge = request("purge_fraction", scenario::PURGE, None);
    let best3 = request("purge_fraction", scenario::PURGE, Some(3));
    let answer = meter_value(&demo, est, &best3).expect("the purge fraction valued");
    let best = answer.best.as_ref().unwrap();
    eprintln!(
        "demo loop: {} meters, {} candidates; best 3 by {} search over {} sets",
        answer.meters.len(),
        answer.candidates.len(),
        best.search,
        best.subsets_evaluated
    );

    let net = testkit::network::network(500, 7);
    let na = analysed(&net.plant, &net.z);
    let nest = na.estimate.as_ref().expect("an estimate");
    let stream = net.plant.streams[net.plant.streams.len() / 2].id.clone();
    let flow = request("molar_flow", &stream, None);
    let n = meter_value(&net.plant, nest, &flow).expect("a stream flow valued");
    eprintln!(
        "500-stream network: {} states, {} meters measured, {} candidates",
        nest.layout.n,
        n.meters.len(),
        n.candidates.len()
    );

    let mut group = c.benchmark_group("meter_value");
    group.bench_function("demo_loop", |b| {
        b.iter(|| meter_value(black_box(&demo), black_box(est), &purge))
    });
    group.bench_function("demo_loop_best_3", |b| {
        b.iter(|| meter_value(black_box(&demo), black_box(est), &best3))
    });
    group.sample_size(10);
    group.bench_function("network_500", |b| {
        b.iter(|| meter_value(black_box(&net.plant), black_box(nest), &flow))
    });
    group.finish();
    c.final_summary();
}
