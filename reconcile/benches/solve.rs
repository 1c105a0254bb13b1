//! Benchmarks of the engine (docs/performance.md has the figures and the machine):
//!
//! - `vantle/reconcile_period`: one period of the Vantle Cross methanol loop
//!   (tests/data/vantle-methanol.toml, 15 streams × 6 components, 26 meters) with noisy
//!   readings: estimate, classification, every σ and the report.
//! - `vantle/with_gross_error`: the same period with a gross error of +8σ on the make-up gas
//!   flow meter VC3-FI-101 (redundant), so that fault identification runs too.
//! - `vantle/reconcile_period_prepared`: `vantle/reconcile_period` with the model revision
//!   prepared once and kept (`reconcile::Prepared`), as `loopbal reconcile` runs a file.
//! - `estimate/N`: generated networks of N streams × 8 components (testkit/src/network.rs):
//!   Layout::new + start::initial_point + solve::solve with the default options.
//! - `estimate_10_iterations/N`: the same, capped at 10 Gauss–Newton iterations (what a run
//!   costs when it converges in the usual 5–10).
//! - `classify/N`: classification and covariance at the solution as a period computes them
//!   (every variable free): the dense projection below `classify::SPARSE_THRESHOLD` states,
//!   the sparse KKT path from there on (all the networks here); `classify_dense/100` the dense
//!   path on the 100-stream network for comparison.
//! - `period/N`: the whole analysis of one period on the network of N streams with noisy
//!   readings: `reconcile_period` (estimate with its restarts, classification, every σ, the
//!   tests, identification when the global test fails, loop figures, the report).
//! - `deadline/vantle`, `deadline/500`: `vantle/reconcile_period` and `period/500` with a
//!   deadline an hour off (`reconcile_period_cancellable`), as the service runs a period: the
//!   cost of the clock reads at the checkpoints, beside the same cases without one (which read
//!   no clock) in the same run.
//! - `period_gross_error/N`: the same with a gross error of +GROSS_ERROR_NETWORK_SIGMAS σ on a
//!   flow meter past the middle of the chain (`testkit::network::middle_flow_meter`), so that
//!   the period fails the global test and identification runs (with the estimate's restarts).
//!
//! - `whatif/point`, `whatif/sweep_50`, `whatif/optimum`: what-if steady states from the
//!   reconciled Vantle period (the base case above): one point with the purge moved
//!   (`split:purge` = 0.06), a 50-point sweep of the purge with σ, and the purge's economic
//!   optimum at invented prices (golden section, about 40 points).
//!
//! Run with `cargo bench -p reconcile --bench solve`. `LOOPBAL_BENCH_PROBE=1` instead times each
//! case once and prints iterations and status, without criterion; `LOOPBAL_BENCH_PROBE=periods`
//! analyses the Vantle period under N noise seeds (`LOOPBAL_BENCH_PERIODS`, 500), alone and
//! with one kept `Prepared`, and counts the restarts and the states left on a bound.

use std::hint::black_box;
use std::time::{Duration, Instant};

use criterion::{criterion_group, BenchmarkId, Criterion};
use reconcile::classify::{classify, classify_dense};
use reconcile::equations::Layout;
use reconcile::faults::{identify_with, Method};
use reconcile::model::Plant;
use reconcile::period::MeterValue;
use reconcile::solve::{solve, Measured, Solution, SolveOptions};
use reconcile::start::initial_point;
use reconcile::{
    analyse_period_prepared, parse_plant, reconcile_period, reconcile_period_cancellable, Cancel,
    Prepared,
};
use testkit::network::{
    middle_flow_meter, network, with_gross_error as with_network_gross_error, Network,
};
use testkit::plants::VANTLE;
use testkit::{exact_values, noisy_values, period, vantle_true_state, VantleConditions};

/// Network sizes (streams) timed for the estimate, the classification and the whole period.
const ESTIMATE_SIZES: [usize; 4] = [100, 250, 500, 2000];
const CLASSIFY_SIZES: [usize; 4] = [100, 250, 500, 2000];
const PERIOD_SIZES: [usize; 2] = [500, 2000];
/// Size of the gross error of `period_gross_error/N`, in the meter's σ: large enough that both
/// networks fail the global test (ν = 304 and 1 210).
const GROSS_ERROR_NETWORK_SIGMAS: f64 = 30.0;
/// Seed of the readings' noise. With seed 0 the Vantle period converges (in 9 iterations).
const NOISE_SEED: u64 = 0;
const NETWORK_SEED: u64 = 7;

fn measured(plant: &Plant, values: &[reconcile::period::MeterValue]) -> Vec<Measured> {
    values
        .iter()
        .map(|v| Measured {
            meter: v.meter,
            value: v.value,
            sigma: plant.meters[v.meter]
                .sigma_for(v.value)
                .expect("positive σ"),
        })
        .collect()
}

/// The bench's readings of the Vantle loop: its true state under the default conditions, with
/// the fixed noise.
fn vantle_values(plant: &Plant) -> Vec<MeterValue> {
    let layout = Layout::new(plant);
    let z = vantle_true_state(plant, &layout, &VantleConditions::default());
    noisy_values(plant, &exact_values(plant, &layout, &z), NOISE_SEED)
}

/// The bench's readings of a generated network: its true state with the fixed noise.
fn network_values(net: &Network) -> Vec<MeterValue> {
    noisy_values(
        &net.plant,
        &exact_values(&net.plant, &net.layout, &net.z),
        NOISE_SEED,
    )
}

fn noisy_network(streams: usize) -> (Network, Vec<Measured>) {
    let net = network(streams, NETWORK_SEED);
    let values = network_values(&net);
    let m = measured(&net.plant, &values);
    (net, m)
}

fn estimate(plant: &Plant, measured: &[Measured], options: SolveOptions) -> (Layout, Solution) {
    let layout = Layout::new(plant);
    let start = initial_point(plant, &layout, measured);
    let solution = solve(plant, &layout, measured, start, options);
    (layout, solution)
}

fn capped() -> SolveOptions {
    SolveOptions {
        max_iterations: 10,
        ..SolveOptions::default()
    }
}

fn vantle(c: &mut Criterion) {
    let plant = parse_plant(VANTLE).expect("Vantle model is valid");
    let input = period(vantle_values(&plant));
    let report = reconcile_period(&plant, &input);
    eprintln!(
        "vantle: status {:?}, {} iterations, objective {:.2}, redundancy {}",
        report.status,
        report.iterations,
        report.objective.unwrap_or(f64::NAN),
        report.redundancy
    );
    let faulty = period(with_gross_error(&plant, vantle_values(&plant)));
    let faulty_report = reconcile_period(&plant, &faulty);
    eprintln!(
        "vantle/with_gross_error: status {:?}, objective {:.2}, faults {:?}",
        faulty_report.status,
        faulty_report.objective.unwrap_or(f64::NAN),
        faulty_report
            .faults
            .iter()
            .map(|f| f.candidates.clone())
            .collect::<Vec<_>>()
    );
    let mut group = c.benchmark_group("vantle");
    group.bench_function("reconcile_period", |b| {
        b.iter(|| reconcile_period(black_box(&plant), black_box(&input)))
    });
    group.bench_function("with_gross_error", |b| {
        b.iter(|| reconcile_period(black_box(&plant), black_box(&faulty)))
    });
    // The same period with the revision prepared once and kept, as `loopbal reconcile` and a
    // caller that keeps a `Prepared` per revision run it.
    let mut prepared = Prepared::new(&plant);
    group.bench_function("reconcile_period_prepared", |b| {
        b.iter(|| {
            analyse_period_prepared(
                black_box(&plant),
                &mut prepared,
                black_box(&input),
                &Cancel::never(),
            )
        })
    });
    group.finish();
}

/// Meter whose value gets the gross error in `vantle/with_gross_error`, and its size in σ.
const GROSS_ERROR_METER: &str = "VC3-FI-101";
const GROSS_ERROR_SIGMAS: f64 = 8.0;

fn with_gross_error(
    plant: &Plant,
    mut values: Vec<reconcile::period::MeterValue>,
) -> Vec<reconcile::period::MeterValue> {
    let v = values
        .iter_mut()
        .find(|v| plant.meters[v.meter].tag == GROSS_ERROR_METER)
        .expect("the Vantle loop has the make-up flow meter");
    let sigma = plant.meters[v.meter]
        .sigma_for(v.value)
        .expect("positive σ");
    v.value += GROSS_ERROR_SIGMAS * sigma;
    values
}

fn networks(c: &mut Criterion) {
    let mut group = c.benchmark_group("estimate");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(4));
    for &size in &ESTIMATE_SIZES {
        let (net, m) = noisy_network(size);
        let (_, s) = estimate(&net.plant, &m, SolveOptions::default());
        eprintln!(
            "estimate/{size}: {} streams, {} states, {} equations, {} meters: {:?} in {} iterations",
            net.plant.streams.len(),
            net.layout.n,
            net.layout.rows.len(),
            m.len(),
            s.status,
            s.iterations
        );
        group.bench_with_input(BenchmarkId::from_parameter(size), &size, |b, _| {
            b.iter(|| {
                estimate(
                    black_box(&net.plant),
                    black_box(&m),
                    SolveOptions::default(),
                )
            })
        });
    }
    group.finish();

    let mut group = c.benchmark_group("estimate_10_iterations");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3));
    for &size in &ESTIMATE_SIZES {
        let (net, m) = noisy_network(size);
        group.bench_with_input(BenchmarkId::from_parameter(size), &size, |b, _| {
            b.iter(|| estimate(black_box(&net.plant), black_box(&m), capped()))
        });
    }
    group.finish();

    let mut group = c.benchmark_group("classify");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(5));
    for &size in &CLASSIFY_SIZES {
        let (net, m) = noisy_network(size);
        let (layout, s) = estimate(&net.plant, &m, capped());
        let free = vec![false; layout.n];
        group.bench_with_input(BenchmarkId::from_parameter(size), &size, |b, _| {
            b.iter(|| classify(black_box(&net.plant), &layout, &m, &s.z, &free))
        });
    }
    group.finish();

    let mut group = c.benchmark_group("classify_dense");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(5));
    let (net, m) = noisy_network(100);
    let (layout, s) = estimate(&net.plant, &m, capped());
    let free = vec![false; layout.n];
    group.bench_function(BenchmarkId::from_parameter(100), |b| {
        b.iter(|| classify_dense(black_box(&net.plant), &layout, &m, &s.z, &free))
    });
    group.finish();

    let mut group = c.benchmark_group("period");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(8));
    for &size in &PERIOD_SIZES {
        let net = network(size, NETWORK_SEED);
        let input = period(network_values(&net));
        let report = reconcile_period(&net.plant, &input);
        eprintln!(
            "period/{size}: status {:?}, {} iterations, redundancy {}, global test passed {:?}, {} faults",
            report.status,
            report.iterations,
            report.redundancy,
            report.global_test.map(|g| g.passed),
            report.faults.len()
        );
        group.bench_with_input(BenchmarkId::from_parameter(size), &size, |b, _| {
            b.iter(|| reconcile_period(black_box(&net.plant), black_box(&input)))
        });
    }
    group.finish();

    let mut group = c.benchmark_group("period_gross_error");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(8));
    for &size in &PERIOD_SIZES {
        let net = network(size, NETWORK_SEED);
        let k = middle_flow_meter(&net.plant, 0);
        let input = period(with_network_gross_error(
            &net.plant,
            network_values(&net),
            k,
            GROSS_ERROR_NETWORK_SIGMAS,
        ));
        let t = Instant::now();
        let report = reconcile_period(&net.plant, &input);
        let once = t.elapsed();
        let tag = &net.plant.meters[k].tag;
        eprintln!(
            "period_gross_error/{size}: {once:?} once, status {:?}, global test passed {:?}, faults {:?}",
            report.status,
            report.global_test.map(|g| g.passed),
            report.faults.iter().map(|f| &f.candidates).collect::<Vec<_>>()
        );
        // A period that passes or names another meter first times something else: no figure.
        assert!(
            report
                .faults
                .first()
                .is_some_and(|f| f.candidates.contains(tag)),
            "period_gross_error/{size}: the first fault group names {tag}"
        );
        group.bench_with_input(BenchmarkId::from_parameter(size), &size, |b, _| {
            b.iter(|| reconcile_period(black_box(&net.plant), black_box(&input)))
        });
    }
    group.finish();
}

/// Time every case once, for sizes too slow for criterion's repeated samples.
fn probe() {
    // The Vantle period split into its parts, each the mean of 200 runs.
    let plant = parse_plant(VANTLE).expect("Vantle model is valid");
    let values = vantle_values(&plant);
    let m = measured(&plant, &values);
    let input = period(values);
    let runs = 200;
    let t = Instant::now();
    for _ in 0..runs {
        black_box(estimate(&plant, &m, SolveOptions::default()));
    }
    let t_est = t.elapsed() / runs;
    let (layout, s) = estimate(&plant, &m, SolveOptions::default());
    let t = Instant::now();
    for _ in 0..runs {
        black_box(classify(&plant, &layout, &m, &s.z, &s.at_bound));
    }
    let t_cls = t.elapsed() / runs;
    let t = Instant::now();
    for _ in 0..runs {
        black_box(reconcile_period(&plant, &input));
    }
    let t_all = t.elapsed() / runs;
    let faulty = period(with_gross_error(&plant, input.values.clone()));
    let t = Instant::now();
    for _ in 0..runs {
        black_box(reconcile_period(&plant, &faulty));
    }
    let t_fault = t.elapsed() / runs;
    println!("vantle: estimate {t_est:?} ({} iterations), classify {t_cls:?}, reconcile_period {t_all:?}, with gross error {t_fault:?}", s.iterations);
    let sizes: Vec<usize> = std::env::var("LOOPBAL_BENCH_PROBE_SIZES")
        .ok()
        .map(|s| s.split(',').filter_map(|x| x.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![100, 250, 500]);
    for size in sizes {
        let (net, m) = noisy_network(size);
        let t = Instant::now();
        let (layout, s) = estimate(&net.plant, &m, SolveOptions::default());
        let t_est = t.elapsed();
        let t = Instant::now();
        let _ = estimate(&net.plant, &m, capped());
        let t_cap = t.elapsed();
        let t = Instant::now();
        let c = classify(&net.plant, &layout, &m, &s.z, &vec![false; layout.n]);
        let t_cls = t.elapsed();
        let input = period(network_values(&net));
        let t = Instant::now();
        let report = reconcile_period(&net.plant, &input);
        let t_period = t.elapsed();
        println!(
            "{size} streams ({} states, {} equations, {} meters): estimate {:?} ({:?}, {} iterations), 10 iterations {:?}, classify {:?} ({} path, redundancy {}, {} unobservable directions), whole period {:?} ({:?}, global test {}, {} faults, {} restarts)",
            net.layout.n,
            net.layout.rows.len(),
            m.len(),
            t_est,
            s.status,
            s.iterations,
            t_cap,
            t_cls,
            if c.sparse.is_some() { "sparse" } else { "dense" },
            c.redundancy,
            c.unobservable.ncols(),
            t_period,
            report.status,
            report.global_test.map_or("none".into(), |g| if g.passed { "passed".to_string() } else { "failed".to_string() }),
            report.faults.len(),
            report.diagnostics.as_ref().map_or(0, |d| d.restarts),
        );
        // The same with the gross error of `period_gross_error/N`: the estimate with its
        // restarts, then identification by each method on it (the dense one only below 1 000
        // streams: it takes a solve per meter and per unit).
        let k = middle_flow_meter(&net.plant, 0);
        let faulty = with_network_gross_error(
            &net.plant,
            input.values.clone(),
            k,
            GROSS_ERROR_NETWORK_SIGMAS,
        );
        let t = Instant::now();
        let est = reconcile::estimate(&net.plant, measured(&net.plant, &faulty));
        let t_est = t.elapsed();
        let identify = |method| {
            let t = Instant::now();
            let found = identify_with(
                &net.plant,
                &est.layout,
                &est.measured,
                &est.solution.z,
                &est.classification,
                method,
            );
            (t.elapsed(), found.faults.len())
        };
        let factorised = identify(Method::Factorised);
        let dense = (size < 1000).then(|| identify(Method::Dense));
        let t = Instant::now();
        let report = reconcile_period(&net.plant, &period(faulty));
        let t_period = t.elapsed();
        println!(
            "{size} streams, gross error on {}: estimate {t_est:?} ({} restarts), identification {:?} factorised, {:?} dense, whole period {t_period:?} ({} faults)",
            net.plant.meters[k].tag,
            est.restarts,
            factorised,
            dense,
            report.faults.len(),
        );
    }
}

fn whatif(c: &mut Criterion) {
    use reconcile::whatif::{self, Economics, Request, Sweep};
    let plant = parse_plant(VANTLE).expect("Vantle model is valid");
    let input = period(vantle_values(&plant));
    let analysis = reconcile::analyse_period(&plant, &input);
    let point = Request {
        set: vec![("split:purge".into(), 0.06)],
        ..Request::default()
    };
    let sweep = Request {
        sweep: Some(Sweep::parse("split:purge=0.02..0.12:50").expect("a sweep")),
        ..Request::default()
    };
    let optimum = Request {
        economics: Some(Economics {
            product_price: [("CH3OH".to_string(), 10.0)].into(),
            loss_value: [("H2".to_string(), 1.0), ("CO".to_string(), 2.0)].into(),
            recycle_cost: 0.05,
            inlet_limit: None,
            range: [0.005, 0.3],
        }),
        ..Request::default()
    };
    for (name, request) in [
        ("point", &point),
        ("sweep_50", &sweep),
        ("optimum", &optimum),
    ] {
        let w = whatif::what_if(&plant, &analysis, request).expect("a what-if of the Vantle loop");
        let solved = w
            .points
            .iter()
            .filter(|p| p.status == whatif::PointStatus::Solved)
            .count();
        eprintln!(
            "whatif/{name}: {solved} of {} points solved, optimum {:?}",
            w.points.len(),
            w.optimum
                .as_ref()
                .map(|o| (o.value, o.margin, o.margin_sigma))
        );
    }
    let mut group = c.benchmark_group("whatif");
    for (name, request) in [("point", point), ("sweep_50", sweep), ("optimum", optimum)] {
        group.bench_function(name, |b| {
            b.iter(|| whatif::what_if(black_box(&plant), black_box(&analysis), &request))
        });
    }
    group.finish();
}

/// The period cases with a deadline far off, each beside the same case without one.
fn deadline(c: &mut Criterion) {
    let plant = parse_plant(VANTLE).expect("Vantle model is valid");
    let vantle = period(vantle_values(&plant));
    let net = network(500, NETWORK_SEED);
    let large = period(network_values(&net));
    let far = || Cancel::after(Duration::from_secs(3600));
    let mut group = c.benchmark_group("deadline");
    group.bench_function("vantle_without", |b| {
        b.iter(|| reconcile_period(black_box(&plant), black_box(&vantle)))
    });
    group.bench_function("vantle", |b| {
        b.iter(|| reconcile_period_cancellable(black_box(&plant), black_box(&vantle), &far()))
    });
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(8));
    group.bench_function("500_without", |b| {
        b.iter(|| reconcile_period(black_box(&net.plant), black_box(&large)))
    });
    group.bench_function("500", |b| {
        b.iter(|| reconcile_period_cancellable(black_box(&net.plant), black_box(&large), &far()))
    });
    group.finish();
}

criterion_group!(benches, vantle, networks, whatif, deadline);

/// `LOOPBAL_BENCH_PROBE=periods`: the Vantle period with the noise of seeds 1..=N
/// (`LOOPBAL_BENCH_PERIODS`, 500), each analysed once: the restarts run, the states left on a
/// bound, and the mean time, for profilers (callgrind, perf) as much as for the figures.
fn probe_periods() {
    let plant = parse_plant(VANTLE).expect("Vantle model is valid");
    let layout = Layout::new(&plant);
    let exact = exact_values(
        &plant,
        &layout,
        &vantle_true_state(&plant, &layout, &VantleConditions::default()),
    );
    let count: u64 = std::env::var("LOOPBAL_BENCH_PERIODS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(500);
    let inputs: Vec<_> = (1..=count)
        .map(|seed| period(noisy_values(&plant, &exact, seed)))
        .collect();
    let mut restarts = std::collections::BTreeMap::<usize, usize>::new();
    let mut on_bound = std::collections::BTreeMap::<String, usize>::new();
    // `LOOPBAL_BENCH_PREPARED_ONLY` leaves the periods alone out (for a profiler's count of
    // the kept path only).
    let t = Instant::now();
    if std::env::var_os("LOOPBAL_BENCH_PREPARED_ONLY").is_none() {
        for input in &inputs {
            black_box(reconcile_period(&plant, input));
        }
    }
    let alone = t.elapsed() / count as u32;
    let mut prepared = Prepared::new(&plant);
    let t = Instant::now();
    for input in &inputs {
        let report = analyse_period_prepared(&plant, &mut prepared, input, &Cancel::never())
            .expect("no deadline")
            .report;
        if let Some(d) = &report.diagnostics {
            *restarts.entry(d.restarts).or_default() += 1;
            for name in &d.at_bound {
                *on_bound.entry(name.clone()).or_default() += 1;
            }
        }
    }
    let per = t.elapsed() / count as u32;
    println!(
        "vantle, {count} periods: {alone:?} a period alone, {per:?} with the revision prepared once; periods by restarts {restarts:?}"
    );
    println!("states on a bound (periods): {on_bound:?}");
}

fn main() {
    if std::env::var("LOOPBAL_BENCH_PROBE").as_deref() == Ok("periods") {
        probe_periods();
        return;
    }
    if std::env::var_os("LOOPBAL_BENCH_PROBE").is_some() {
        probe();
        return;
    }
    benches();
    Criterion::default().configure_from_args().final_summary();
}
