//! Existing meters: σ halved and lost.

use reconcile::equations::Layout;
use reconcile::meter_value::meter_worths;
use reconcile::period::MeterValue;
use reconcile::report::Figure;
use reconcile::{analyse_period, parse_plant, Plant, ReportStatus};
use testkit::plants::{PURGE_DESIGN, VANTLE};
use testkit::{exact_values, period, vantle_true_state, VantleConditions};

use crate::{figure_of, halved, same_sigma, without};

/// Every loop figure and every meter of `plant` at the noise-free state `values`.
/// Answers how many (figure, meter) pairs were compared, and in how many the meter's loss
/// left the figure unobservable.
fn check_every_figure_and_meter(plant: &Plant, values: Vec<MeterValue>) -> (usize, usize) {
    let input = period(values.clone());
    let base = analyse_period(plant, &input);
    assert_eq!(
        base.report.status,
        ReportStatus::Solved,
        "{:?}",
        base.report.warnings
    );
    let est = base.estimate.as_ref().expect("an estimate");
    let (mut compared, mut lost_directions) = (0, 0);
    for figure in base.report.figures.iter().filter(|f| f.sigma.is_some()) {
        let (reconciled, worths) = meter_worths(plant, est, &figure.name, &figure.subject)
            .expect("the figure is among the loop figures");
        assert_eq!(&reconciled, figure, "the base figure is the report's");
        for w in &worths {
            let tag = &plant.meters[w.meter].tag;
            let what =
                |change: &str| format!("{} {} with {tag} {change}", figure.name, figure.subject);

            let fresh = analyse_period(&halved(plant, w.meter), &input).report;
            let f = figure_of(&fresh, &figure.name, &figure.subject);
            same_sigma(w.sigma_if_halved, f, &what("σ halved"));

            let rest = without(&values, w.meter);
            let fresh = analyse_period(plant, &period(rest)).report;
            let f = figure_of(&fresh, &figure.name, &figure.subject);
            same_sigma(w.sigma_if_lost, f, &what("lost"));
            // More data never widens σ, less never narrows it (to rounding, as above).
            let sigma = figure.sigma.unwrap();
            let floor = 1e-10 * figure.value.map_or(1.0, |v| v.abs().max(1.0));
            if let Some(s) = w.sigma_if_halved {
                assert!(
                    s <= sigma * (1.0 + 1e-9) + floor,
                    "{}: more data, more σ",
                    what("σ halved")
                );
            }
            if let Some(s) = w.sigma_if_lost {
                assert!(
                    s >= sigma * (1.0 - 1e-9) - floor,
                    "{}: less data, less σ",
                    what("lost")
                );
            }
            compared += 1;
            lost_directions += usize::from(w.sigma_if_lost.is_none());
        }
    }
    (compared, lost_directions)
}

#[test]
fn every_figure_of_the_vantle_loop_matches_a_fresh_estimate_for_every_meter() {
    let plant = parse_plant(VANTLE).unwrap();
    let layout = Layout::new(&plant);
    let z = vantle_true_state(&plant, &layout, &VantleConditions::default());
    let (compared, unobservable) =
        check_every_figure_and_meter(&plant, exact_values(&plant, &layout, &z));
    assert!(compared > 28 * 10, "{compared} comparisons");
    assert_eq!(
        unobservable, 0,
        "every meter of the Vantle loop is redundant"
    );
}

#[test]
fn a_non_redundant_meter_lost_leaves_the_figures_that_need_it_unobservable() {
    // The purge-design loop with one meter taken away, the first whose absence leaves another
    // meter non-redundant: losing that one too leaves some figures undetermined, as a fresh
    // estimate without it finds, while the others keep a σ.
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let layout = Layout::new(&plant);
    let z = reconcile::simulate::steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let all = exact_values(&plant, &layout, &z);
    let values = (0..plant.meters.len())
        .map(|k| without(&all, k))
        .find(|values| {
            let a = analyse_period(&plant, &period(values.clone()));
            a.report.status == ReportStatus::Solved
                && a.estimate.as_ref().is_some_and(|est| {
                    (0..est.measured.len()).any(|i| !est.classification.is_redundant(i))
                })
        })
        .expect("a meter set of the purge-design loop with a non-redundant meter");
    let (compared, lost_directions) = check_every_figure_and_meter(&plant, values.clone());
    // Not vacuous: some meter's loss leaves the figure unobservable, and some leaves another
    // meter untested (both checked above against the fresh estimates).
    let a = analyse_period(&plant, &period(values));
    let est = a.estimate.as_ref().unwrap();
    let f = &a.report.figures[0];
    let (_, worths) = meter_worths(&plant, est, &f.name, &f.subject).unwrap();
    assert!(
        worths.iter().any(|w| w.sigma_if_lost.is_none()),
        "{worths:?}"
    );
    assert!(
        worths.iter().any(|w| !w.untestable_if_lost.is_empty()),
        "{worths:?}"
    );
    assert!(compared > 0);
    assert!(
        lost_directions > 0,
        "losing the non-redundant meter leaves some figure unobservable"
    );
}

#[test]
fn a_flow_meter_lost_names_the_flows_it_leaves_unobservable() {
    // Among the purge-design loop's meter sets with one meter taken away, one where losing a
    // second meter leaves a stream flow, an extent or a split undetermined; the names are the
    // fresh estimate's.
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let layout = Layout::new(&plant);
    let z = reconcile::simulate::steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let all = exact_values(&plant, &layout, &z);
    let mut named = 0;
    for k in 0..plant.meters.len() {
        let values: Vec<_> = without(&all, k);
        let a = analyse_period(&plant, &period(values.clone()));
        let (Some(est), Some(f)) = (a.estimate.as_ref(), a.report.figures.first()) else {
            continue;
        };
        let (_, worths) = meter_worths(&plant, est, &f.name, &f.subject).unwrap();
        for w in worths.iter().filter(|w| !w.unobservable_if_lost.is_empty()) {
            let rest = without(&values, w.meter);
            let fresh = analyse_period(&plant, &period(rest)).report;
            let newly: Vec<&String> = fresh
                .unobservable
                .iter()
                .filter(|q| !a.report.unobservable.contains(q))
                .collect();
            assert_eq!(w.unobservable_if_lost.iter().collect::<Vec<_>>(), newly);
            named += 1;
        }
    }
    assert!(
        named > 0,
        "some loss leaves a flow, extent or split unobservable"
    );
}

#[test]
fn a_stream_flow_and_a_split_fraction_as_figures_match_fresh_estimates() {
    // Figures of the state itself on the purge-design loop: each stream's molar flow and the
    // purge split, against the σ a fresh estimate reports for them, for every meter.
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let layout = Layout::new(&plant);
    let z = reconcile::simulate::steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let values = exact_values(&plant, &layout, &z);
    let input = period(values.clone());
    let base = analyse_period(&plant, &input);
    let est = base.estimate.as_ref().unwrap();
    let mut compared = 0;
    for stream in &plant.streams {
        let (flow, worths) = meter_worths(&plant, est, "molar_flow", &stream.id).unwrap();
        let reported = base
            .report
            .streams
            .iter()
            .find(|s| s.id == stream.id)
            .unwrap();
        assert_eq!(flow.sigma, reported.molar_flow_sigma, "{}", stream.id);
        for w in &worths {
            let rest = without(&values, w.meter);
            let fresh = analyse_period(&plant, &period(rest)).report;
            let s = fresh.streams.iter().find(|s| s.id == stream.id).unwrap();
            let as_figure = Figure {
                name: "molar_flow".into(),
                subject: stream.id.clone(),
                uom: "kmol/h".into(),
                value: s.molar_flow,
                sigma: s.molar_flow_sigma,
            };
            same_sigma(
                w.sigma_if_lost,
                &as_figure,
                &format!(
                    "flow of {} without {}",
                    stream.id, plant.meters[w.meter].tag
                ),
            );
            compared += 1;
        }
    }
    let splits: Vec<_> = base
        .report
        .split_fractions
        .iter()
        .filter(|s| s.value.is_some())
        .collect();
    let (purge, _) = meter_worths(&plant, est, "split_fraction", &splits[0].stream).unwrap();
    assert_eq!(purge.sigma, splits[0].sigma);
    assert!(compared >= plant.streams.len() * 8, "{compared}");
    assert!(meter_worths(&plant, est, "molar_flow", "no-such-stream").is_none());
    assert!(meter_worths(&plant, est, "component_flow", "purge:Ar").is_some());
}
