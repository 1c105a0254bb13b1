//! A detectability change checked by simulation: the candidate that lowers some meter's
//! smallest detectable bias the most is added, and that meter is given a bias of exactly the
//! new smallest detectable size in 1,000 simulated periods. With the candidate the measurement
//! test must flag it in the stated share (90 %), without it in the smaller share the old
//! detectable bias predicts; both within four binomial standard deviations.

use reconcile::faults::REPORTED_POWER;
use reconcile::meter_value::{candidate_worths, candidates, Accuracies};
use reconcile::model::Sigma;
use reconcile::stats::normal_quantile;
use reconcile::{analyse_period, Plant};
use statrs::distribution::{ContinuousCDF, Normal};
use testkit::{noisy_values, period};

use crate::with_candidate;

const PERIODS: u64 = 1_000;

/// P(|N(μ, 1)| > c): the measurement test's power against a mean shift μ.
fn power(mu: f64, c: f64) -> f64 {
    let n = Normal::new(0.0, 1.0).unwrap();
    n.cdf(mu - c) + n.cdf(-mu - c)
}

/// Share of the periods in which meter `tag` fails the measurement test with `bias` added
/// to its reading; `drop` (a meter index) is left out of the period, the plant's last meter.
fn flagged(
    plant: &Plant,
    full: &Plant,
    exact: &[reconcile::period::MeterValue],
    k: usize,
    bias: f64,
    drop: Option<usize>,
) -> f64 {
    let tag = &full.meters[k].tag;
    let hits = (0..PERIODS)
        .filter(|&seed| {
            let mut values = noisy_values(full, exact, 7_000 + seed);
            values[k].value += bias;
            if let Some(d) = drop {
                values.retain(|v| v.meter != d);
            }
            let report = analyse_period(plant, &period(values)).report;
            report
                .meters
                .iter()
                .find(|m| &m.tag == tag)
                .unwrap()
                .measurement_test_failed
        })
        .count();
    hits as f64 / PERIODS as f64
}

#[test]
fn the_new_smallest_detectable_bias_is_detected_at_the_stated_power() {
    let (plant, z, values) = crate::vantle_exact();
    let base = analyse_period(&plant, &period(values.clone()));
    let est = base.estimate.as_ref().unwrap();
    let cands = candidates(&plant, est, &Accuracies::default());
    let f = &base.report.figures[0];
    let worths = candidate_worths(&plant, est, &f.name, &f.subject, &cands).unwrap();
    // The largest fall of a detectable bias, on a meter of absolute σ (whose σ does not move
    // with the bias added to its reading).
    let (w, d) = worths
        .iter()
        .flat_map(|w| w.detectable_bias.iter().map(move |d| (w, d)))
        .filter(|(_, d)| matches!(plant.meters[d.meter].sigma, Sigma::Absolute(_)))
        .filter(|(_, d)| d.now.is_some() && d.with_it.is_some())
        .max_by(|(_, a), (_, b)| {
            let fall = |d: &&reconcile::meter_value::DetectableBias| {
                1.0 - d.with_it.unwrap() / d.now.unwrap()
            };
            fall(a).total_cmp(&fall(b))
        })
        .expect("some candidate lowers a detectable bias");
    let (now, with_it) = (d.now.unwrap(), d.with_it.unwrap());
    assert!(with_it < 0.9 * now, "a material change: {now} → {with_it}");

    let (full, exact) = with_candidate(&plant, &values, &z, &cands[w.candidate]);
    let critical_now = base.report.measurement_test.as_ref().unwrap().critical;
    let fresh = analyse_period(&full, &period(exact.clone())).report;
    let critical_with = fresh.measurement_test.as_ref().unwrap().critical;
    let z_power = normal_quantile(REPORTED_POWER);
    let expected_with = power(critical_with + z_power, critical_with);
    let expected_now = power((critical_now + z_power) * with_it / now, critical_now);
    let new_meter = full.meters.len() - 1;

    let share_with = flagged(&full, &full, &exact, d.meter, with_it, None);
    let share_now = flagged(&plant, &full, &exact, d.meter, with_it, Some(new_meter));
    let sd = |p: f64| (p * (1.0 - p) / PERIODS as f64).sqrt();
    assert!(
        (share_with - expected_with).abs() <= 4.0 * sd(expected_with),
        "with the candidate: flagged in {share_with}, expected {expected_with}"
    );
    assert!(
        (share_now - expected_now).abs() <= 4.0 * sd(expected_now),
        "without it: flagged in {share_now}, expected {expected_now}"
    );
    assert!(
        expected_with >= REPORTED_POWER - 1e-9 && expected_now < REPORTED_POWER - 0.1,
        "{} {now} → {with_it}: expected {expected_with} with, {expected_now} without",
        full.meters[d.meter].tag
    );
}
