//! Candidate new meters: each one added to the model with its exact reading and the period
//! estimated afresh; the candidate's worth must match that estimate's σ, tests and
//! detectable biases.

use reconcile::equations::Layout;
use reconcile::meter_value::{candidate_worths, candidates, Accuracies, CandidateWorth};
use reconcile::model::Quantity;
use reconcile::period::MeterValue;
use reconcile::{analyse_period, parse_plant, Plant, Report};
use testkit::plants::PURGE_DESIGN;
use testkit::{exact_values, period};

use crate::{figure_of, same_sigma, with_candidate, without};

/// A meter's entry in a report.
fn meter<'a>(report: &'a Report, tag: &str) -> &'a reconcile::report::MeterReport {
    report.meters.iter().find(|m| m.tag == tag).unwrap()
}

fn same_bias(a: Option<f64>, b: Option<f64>, what: &str) {
    match (a, b) {
        (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-6 * b, "{what}: {a} against {b} afresh"),
        (a, b) => assert_eq!(a, b, "{what}"),
    }
}

/// The candidate's testing answers against the fresh report `fresh` (with it) and `base`
/// (without): its own test, the meters it makes testable, every meter's detectable bias.
fn same_testing(plant: &Plant, w: &CandidateWorth, base: &Report, fresh: &Report, what: &str) {
    let own = fresh.meters.last().unwrap();
    assert_eq!(w.testable, own.testable, "{what}: its own test");
    let gained: Vec<&str> = base
        .meters
        .iter()
        .filter(|m| m.measured.is_some() && !m.testable && meter(fresh, &m.tag).testable)
        .map(|m| m.tag.as_str())
        .collect();
    let named: Vec<&str> = w
        .makes_testable
        .iter()
        .map(|&k| plant.meters[k].tag.as_str())
        .collect();
    assert_eq!(named, gained, "{what}: meters made testable");
    for m in base.meters.iter().filter(|m| m.measured.is_some()) {
        let listed = w
            .detectable_bias
            .iter()
            .find(|d| plant.meters[d.meter].tag == m.tag);
        let with_it = meter(fresh, &m.tag).detectable_bias;
        match listed {
            Some(d) => {
                same_bias(d.now, m.detectable_bias, &format!("{what}: {} now", m.tag));
                same_bias(d.with_it, with_it, &format!("{what}: {} with it", m.tag));
            }
            // Not listed: a change of 1 % at most.
            None => match (m.detectable_bias, with_it) {
                (Some(a), Some(b)) => assert!(
                    (a - b).abs() <= 0.01 * a * (1.0 + 1e-9),
                    "{what}: {} moved from {a} to {b} and is not listed",
                    m.tag
                ),
                (a, b) => assert_eq!(a, b, "{what}: {} not listed", m.tag),
            },
        }
    }
}

/// Every candidate of `plant` at the noise-free state `z`, against a fresh estimate with it,
/// for every figure with a σ; σ compared only when `compare_sigma`. Answers the number of
/// (figure, candidate) pairs compared.
fn check_every_candidate(
    plant: &Plant,
    z: &[f64],
    values: Vec<MeterValue>,
    compare_sigma: bool,
) -> usize {
    let base = analyse_period(plant, &period(values.clone()));
    assert!(base.report.status.is_usable());
    let est = base.estimate.as_ref().unwrap();
    let cands = candidates(plant, est, &Accuracies::default());
    assert!(!cands.is_empty());
    let fresh: Vec<Report> = cands
        .iter()
        .map(|c| {
            let (p, v) = with_candidate(plant, &values, z, c);
            let a = analyse_period(&p, &period(v));
            assert!(a.report.status.is_usable());
            a.report
        })
        .collect();
    let mut compared = 0;
    for figure in &base.report.figures {
        let worths = candidate_worths(plant, est, &figure.name, &figure.subject, &cands).unwrap();
        for (w, fresh) in worths.iter().zip(&fresh) {
            let c = &cands[w.candidate];
            let what = format!(
                "{} {} with {:?} on {} {:?}",
                figure.name, figure.subject, c.quantity, plant.streams[c.stream].id, c.component
            );
            if compare_sigma {
                same_sigma(
                    w.sigma_if_added,
                    figure_of(fresh, &figure.name, &figure.subject),
                    &what,
                );
            }
            let newly: Vec<&String> = base
                .report
                .unobservable
                .iter()
                .filter(|q| !fresh.unobservable.contains(q))
                .collect();
            assert_eq!(
                w.makes_observable.iter().collect::<Vec<_>>(),
                newly,
                "{what}"
            );
            same_testing(plant, w, &base.report, fresh, &what);
            // More data never widens σ.
            if let (Some(now), Some(after)) = (figure.sigma, w.sigma_if_added) {
                assert!(
                    after <= now * (1.0 + 1e-9) + 1e-12,
                    "{what}: {after} > {now}"
                );
            }
            compared += 1;
        }
    }
    compared
}

#[test]
fn every_candidate_on_the_vantle_loop_matches_a_fresh_estimate() {
    let (plant, z, values) = crate::vantle_exact();
    let a = analyse_period(&plant, &period(values.clone()));
    let cands = candidates(&plant, a.estimate.as_ref().unwrap(), &Accuracies::default());
    // Both kinds are offered.
    assert!(cands.iter().any(|c| c.quantity == Quantity::MolarFlow));
    assert!(cands.iter().any(|c| c.quantity == Quantity::MoleFraction));
    // None duplicates a meter the plant has.
    for c in &cands {
        assert!(!plant.meters.iter().any(|m| m.stream == c.stream
            && (m.component == c.component && c.component.is_some()
                || c.component.is_none()
                    && matches!(
                        m.quantity,
                        Quantity::MolarFlow | Quantity::MassFlow | Quantity::StdVolumeFlow
                    ))));
    }
    let compared = check_every_candidate(&plant, &z, values, true);
    assert!(compared > 10 * cands.len(), "{compared}");
}

#[test]
fn candidates_on_a_loop_with_untested_meters_name_what_they_make_testable_and_observable() {
    // The purge-design loop with one or two meters taken away: the first few sets where the
    // loop has an untested meter, and the first few where it has an unobservable quantity,
    // checked candidate by candidate against fresh estimates (the names, the tests and the
    // detectable biases; σ where the base case is fully observable, so that both estimates
    // sit at the same state).
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let layout = Layout::new(&plant);
    let z = reconcile::simulate::steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let all = exact_values(&plant, &layout, &z);
    let m = plant.meters.len();
    let (mut untested_sets, mut unobservable_sets) = (0, 0);
    let (mut gained_tests, mut gained_observable) = (0, 0);
    let pairs = (0..m).flat_map(|i| (i..m).map(move |j| (i, j)));
    for (i, j) in pairs {
        if untested_sets >= 3 && unobservable_sets >= 3 {
            break;
        }
        let values = without(&without(&all, i), j);
        let a = analyse_period(&plant, &period(values.clone()));
        let Some(est) = a.estimate.as_ref() else {
            continue;
        };
        let untested = a
            .report
            .meters
            .iter()
            .any(|m| m.measured.is_some() && !m.testable);
        let unobservable = !a.report.unobservable.is_empty();
        if !a.report.status.is_usable()
            || !(untested && untested_sets < 3 || unobservable && unobservable_sets < 3)
        {
            continue;
        }
        check_every_candidate(&plant, &z, values, !unobservable);
        let f = &a.report.figures[0];
        let cands = candidates(&plant, est, &Accuracies::default());
        let worths = candidate_worths(&plant, est, &f.name, &f.subject, &cands).unwrap();
        gained_tests += worths
            .iter()
            .filter(|w| !w.makes_testable.is_empty())
            .count();
        gained_observable += worths
            .iter()
            .filter(|w| !w.makes_observable.is_empty())
            .count();
        untested_sets += usize::from(untested);
        unobservable_sets += usize::from(unobservable);
    }
    assert!(
        untested_sets > 0 && unobservable_sets > 0,
        "{untested_sets} {unobservable_sets}"
    );
    assert!(gained_tests > 0, "some candidate makes a meter testable");
    assert!(
        gained_observable > 0,
        "some candidate makes a quantity observable"
    );
}

/// The σ of a stream's flow in a fresh estimate, classified on the dense path (the projection
/// method) whatever the network's size: the independent reference for the sparse path.
fn dense_flow_sigma(plant: &Plant, values: Vec<MeterValue>, stream: &str) -> Option<f64> {
    let a = analyse_period(plant, &period(values));
    let e = a.estimate.as_ref().unwrap();
    let c = reconcile::classify::classify_dense(
        plant,
        &e.layout,
        &e.measured,
        &e.solution.z,
        &vec![false; e.layout.n],
    );
    let s = plant.stream_index(stream).unwrap();
    let grad: Vec<(usize, f64)> = e.layout.stream_flows(plant, s).map(|i| (i, 1.0)).collect();
    c.is_observable(&grad).then(|| c.sigma(&grad))
}

#[test]
fn on_a_network_large_enough_for_the_sparse_path_meters_and_candidates_match_fresh_estimates() {
    // A generated network of 100 streams (over 600 states: the sparse factorisation), noise
    // free; a middle stream's flow as the figure; a dozen meters (σ halved, lost) and a dozen
    // candidates, by low-rank updates of the sparse covariance, against fresh estimates with
    // the model changed, classified on the dense path.
    let net = testkit::network::network(100, 11);
    let (plant, z) = (&net.plant, &net.z);
    let values = exact_values(plant, &net.layout, z);
    let base = analyse_period(plant, &period(values.clone()));
    let est = base.estimate.as_ref().unwrap();
    assert!(est.classification.sparse.is_some(), "the sparse path");
    let stream = plant.streams[plant.streams.len() / 2].id.clone();
    let reference = |sigma: Option<f64>| reconcile::report::Figure {
        name: "molar_flow".into(),
        subject: stream.clone(),
        uom: "kmol/h".into(),
        value: Some(1.0),
        sigma,
    };
    let (figure, worths) =
        reconcile::meter_value::meter_worths(plant, est, "molar_flow", &stream).unwrap();
    same_sigma(
        figure.sigma,
        &reference(dense_flow_sigma(plant, values.clone(), &stream)),
        "now",
    );
    let step = (worths.len() / 12).max(1);
    let mut compared = 0;
    for w in worths.iter().step_by(step) {
        let tag = &plant.meters[w.meter].tag;
        let halved = dense_flow_sigma(&crate::halved(plant, w.meter), values.clone(), &stream);
        same_sigma(
            w.sigma_if_halved,
            &reference(halved),
            &format!("{tag} halved"),
        );
        let lost = dense_flow_sigma(plant, without(&values, w.meter), &stream);
        same_sigma(w.sigma_if_lost, &reference(lost), &format!("{tag} lost"));
        compared += 2;
    }
    let cands = candidates(plant, est, &Accuracies::default());
    let worths = candidate_worths(plant, est, "molar_flow", &stream, &cands).unwrap();
    let step = (cands.len() / 12).max(1);
    for w in worths.iter().step_by(step) {
        let (p, v) = with_candidate(plant, &values, z, &cands[w.candidate]);
        let added = dense_flow_sigma(&p, v, &stream);
        same_sigma(
            w.sigma_if_added,
            &reference(added),
            &format!("candidate {}", w.candidate),
        );
        compared += 1;
    }
    assert!(compared >= 30, "{compared}");
}
