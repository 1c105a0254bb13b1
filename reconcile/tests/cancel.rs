//! A deadline on the analysis of a period (reconcile::Cancel): on a generated network large
//! enough to take a while, a deadline already past stops the analysis at once, a deadline in
//! the middle stops it within a checkpoint (in the solve, or in identification's solves when
//! the period fails the global test), and no deadline, or one far off, gives exactly the plain
//! entry points' report.

use std::time::{Duration, Instant};

use reconcile::period::MeterValue;
use reconcile::{
    analyse_period_cancellable, reconcile_period, reconcile_period_cancellable, Cancel, Cancelled,
    PeriodInput, Plant,
};
use testkit::network::{network, Network};
use testkit::{exact_values, noisy_values, period};

/// The 500-stream network of the engine's benchmark (4,140 states, 732 meters; the sparse
/// path), about 0.1 s a period when optimised.
const STREAMS: usize = 500;
const SEED: u64 = 7;

fn noisy(net: &Network) -> Vec<MeterValue> {
    noisy_values(
        &net.plant,
        &exact_values(&net.plant, &net.layout, &net.z),
        0,
    )
}

/// The period with +10σ on a flow meter in the middle of the chain: it fails the global test,
/// so identification runs and builds the adjustment covariance, one solve per meter.
fn with_gross_error(plant: &Plant, mut values: Vec<MeterValue>) -> PeriodInput {
    let k = (0..plant.meters.len())
        .find(|&k| {
            plant.meters[k].component.is_none() && plant.meters[k].stream > plant.streams.len() / 2
        })
        .expect("a flow meter in the second half");
    let v = values
        .iter_mut()
        .find(|v| v.meter == k)
        .expect("every meter has a value");
    v.value += 10.0 * plant.meters[k].sigma_for(v.value).expect("positive σ");
    period(values)
}

fn timed<T>(f: impl FnOnce() -> T) -> (T, Duration) {
    let began = Instant::now();
    let out = f();
    (out, began.elapsed())
}

fn json(report: &reconcile::Report) -> serde_json::Value {
    serde_json::to_value(report).expect("a report serialises")
}

#[test]
fn no_deadline_or_a_far_one_gives_the_plain_report() {
    let net = network(STREAMS, SEED);
    let input = period(noisy(&net));
    let plain = reconcile_period(&net.plant, &input);
    assert_eq!(plain.status, reconcile::ReportStatus::Solved);
    let never = reconcile_period_cancellable(&net.plant, &input, &Cancel::never()).unwrap();
    let far = reconcile_period_cancellable(
        &net.plant,
        &input,
        &Cancel::after(Duration::from_secs(3600)),
    )
    .unwrap();
    assert_eq!(json(&never), json(&plain));
    assert_eq!(json(&far), json(&plain));

    // The same with identification at work, and the estimate kept.
    let faulty = with_gross_error(&net.plant, noisy(&net));
    let plain = reconcile::analyse_period(&net.plant, &faulty);
    assert!(!plain.report.faults.is_empty(), "the gross error is found");
    let never = analyse_period_cancellable(&net.plant, &faulty, &Cancel::never()).unwrap();
    assert_eq!(json(&never.report), json(&plain.report));
    let (a, b) = (plain.estimate.unwrap(), never.estimate.unwrap());
    assert_eq!(a.solution.z, b.solution.z);
    assert_eq!(
        a.adjustment_correlations(0.2),
        b.adjustment_correlations_cancellable(0.2, &Cancel::never())
            .unwrap()
    );
}

#[test]
fn a_deadline_already_past_stops_the_analysis_at_once() {
    let net = network(STREAMS, SEED);
    let input = period(noisy(&net));
    let (_, whole) = timed(|| reconcile_period(&net.plant, &input));
    let (outcome, took) =
        timed(|| reconcile_period_cancellable(&net.plant, &input, &Cancel::at(Instant::now())));
    assert_eq!(outcome.map(|r| r.status), Err(Cancelled));
    // Only the layout and the starting point come before the first checkpoint.
    println!("whole period {whole:?}; with a past deadline {took:?}");
    assert!(
        took < whole / 4,
        "stopped after {took:?}, the whole period takes {whole:?}"
    );
}

#[test]
fn a_deadline_in_the_middle_stops_within_a_checkpoint() {
    let net = network(STREAMS, SEED);
    for (case, input) in [
        ("passes the global test", period(noisy(&net))),
        (
            "fails the global test",
            with_gross_error(&net.plant, noisy(&net)),
        ),
    ] {
        let (report, whole) = timed(|| reconcile_period(&net.plant, &input));
        // Identification runs only on the faulty period.
        assert_eq!(report.faults.is_empty(), case == "passes the global test");
        for share in [0.3, 0.7] {
            let limit = whole.mul_f64(share);
            let began = Instant::now();
            let outcome =
                reconcile_period_cancellable(&net.plant, &input, &Cancel::at(began + limit));
            let took = began.elapsed();
            println!("{case}: whole {whole:?}, deadline at {limit:?}, stopped after {took:?}");
            // A period that beat its own earlier time finishes with the plain report.
            match outcome {
                Err(Cancelled) => assert!(
                    took >= limit && took - limit < whole / 4,
                    "{case}: the deadline at {limit:?} stopped it after {took:?} (whole {whole:?})"
                ),
                Ok(r) => assert_eq!(json(&r), json(&report), "{case}"),
            }
        }
    }
}
