//! A linear network whose σ with and without a meter is known in closed form.
//!
//! One balance node splits a feed f into two products a and b: f = a + b, one component. With
//! meters on all three, weights wᵢ = 1/σᵢ², the weighted least-squares estimate under one
//! constraint has the covariance P = Σ − Σ gᵀ g Σ / (g Σ gᵀ) with g = (1, −1, −1) and
//! Σ = diag(σ_f², σ_a², σ_b²) (the textbook projection; derived here):
//!
//! ```text
//! var(b̂) = σ_b² − σ_b⁴ / S = σ_b² (σ_f² + σ_a²) / S,   S = σ_f² + σ_a² + σ_b²
//! ```
//!
//! Without b's meter, b = f − a is not measured and var(b̂) = σ_f² + σ_a²; with a's meter gone
//! as well, a and b are undetermined.

use reconcile::meter_value::{
    best_additions, candidate_worths, candidates, meter_worths, Accuracies, WeightedFigure,
};
use reconcile::period::MeterValue;
use reconcile::{analyse_period, parse_plant, Plant, Report};
use testkit::{one_reading_each, period};

const SPLIT: &str = r#"
name = "one-node"
[[component]]
id = "W"
molar_mass = 18.015
[[unit]]
id = "n1"
kind = "node"
[[stream]]
id = "f"
from = "outside"
to = "n1"
[[stream]]
id = "a"
from = "n1"
to = "outside"
[[stream]]
id = "b"
from = "n1"
to = "outside"
[[meter]]
tag = "FI-F"
stream = "f"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
"#;

/// A molar flow meter in the model's TOML.
fn flow_meter(tag: &str, stream: &str, sigma: f64) -> String {
    format!(
        "[[meter]]\ntag = \"{tag}\"\nstream = \"{stream}\"\nquantity = \"molar_flow\"\n\
         uom = \"kmol/h\"\nsigma = {sigma}\n"
    )
}

const FLOWS: [f64; 3] = [100.0, 60.0, 40.0];
const SIGMA_F: f64 = 2.0;
const SIGMA_A: f64 = 1.5;
const SIGMA_B: f64 = 0.8;
/// The absolute accuracy candidates are given where the flows they would measure are unknown.
const SIGMA_NEW: f64 = 0.5;
const ABSOLUTE: Accuracies = Accuracies {
    flow_sigma_pct: 1.0,
    flow_sigma: Some(SIGMA_NEW),
    analyser_sigma: 0.2,
};

/// The node with a meter on f, and on a and b as asked.
fn plant(with_a: bool, with_b: bool) -> Plant {
    let mut model = SPLIT.to_string();
    if with_a {
        model.push_str(&flow_meter("FI-A", "a", SIGMA_A));
    }
    if with_b {
        model.push_str(&flow_meter("FI-B", "b", SIGMA_B));
    }
    parse_plant(&model).unwrap()
}

fn values(plant: &Plant) -> Vec<MeterValue> {
    one_reading_each(plant.meters.iter().map(|m| FLOWS[m.stream]))
}

fn sigma_of_b(report: &Report) -> Option<f64> {
    report
        .streams
        .iter()
        .find(|s| s.id == "b")
        .unwrap()
        .molar_flow_sigma
}

fn close(a: f64, b: f64, what: &str) {
    assert!((a - b).abs() <= 1e-6 * b.abs(), "{what}: {a} against {b}");
}

#[test]
fn a_meter_halved_and_lost_gives_the_closed_form() {
    let plant = plant(true, true);
    let a = analyse_period(&plant, &period(values(&plant)));
    let est = a.estimate.as_ref().unwrap();
    let (figure, worths) = meter_worths(&plant, est, "molar_flow", "b").unwrap();
    let var = |f: f64, a: f64, b: f64| b * b * (f * f + a * a) / (f * f + a * a + b * b);
    close(
        figure.sigma.unwrap(),
        var(SIGMA_F, SIGMA_A, SIGMA_B).sqrt(),
        "as it is",
    );
    let worth = |tag: &str| {
        worths
            .iter()
            .find(|w| plant.meters[w.meter].tag == tag)
            .unwrap()
    };
    let b = worth("FI-B");
    close(
        b.sigma_if_lost.unwrap(),
        (SIGMA_F.powi(2) + SIGMA_A.powi(2)).sqrt(),
        "FI-B lost",
    );
    close(
        b.sigma_if_halved.unwrap(),
        var(SIGMA_F, SIGMA_A, SIGMA_B / 2.0).sqrt(),
        "FI-B halved",
    );
    // var(b̂) is symmetric in σ_f and σ_a: halving either gives the same.
    let f = worth("FI-F");
    close(
        f.sigma_if_halved.unwrap(),
        var(SIGMA_F / 2.0, SIGMA_A, SIGMA_B).sqrt(),
        "FI-F halved",
    );
    // Without FI-F, b is measured alone and a + b estimates f: var(b̂) = σ_b².
    close(f.sigma_if_lost.unwrap(), SIGMA_B, "FI-F lost");
    assert!(f.unobservable_if_lost.is_empty() && f.untestable_if_lost.len() == 2);
}

#[test]
fn a_flow_meter_added_gives_the_closed_form_and_determines_what_was_not() {
    // Without FI-B: a candidate flow meter on b at 1 % of reading (σ = 0.4 kmol/h).
    let plant = plant(true, false);
    let a = analyse_period(&plant, &period(values(&plant)));
    let est = a.estimate.as_ref().unwrap();
    let cands = candidates(&plant, est, &Accuracies::default());
    assert_eq!(
        cands.len(),
        1,
        "only b has no flow meter, and one component has no analyser"
    );
    let sigma_c = 0.01 * FLOWS[2];
    close(cands[0].sigma, sigma_c, "1 % of reading");
    let worths = candidate_worths(&plant, est, "molar_flow", "b", &cands).unwrap();
    let s = SIGMA_F.powi(2) + SIGMA_A.powi(2);
    close(
        a.report.streams[2].molar_flow_sigma.unwrap(),
        s.sqrt(),
        "b by difference",
    );
    close(
        worths[0].sigma_if_added.unwrap(),
        (sigma_c * sigma_c * s / (s + sigma_c * sigma_c)).sqrt(),
        "b metered",
    );
    // Both old meters become testable: the node now has one degree of redundancy.
    assert_eq!(worths[0].makes_testable.len(), 2);
    assert!(worths[0].testable);

    // With no meter on a either, a and b are undetermined; a meter on a determines both, and
    // then var(b̂) = σ_f² + σ_c².
    let plant = plant_f_only();
    let a = analyse_period(&plant, &period(values(&plant)));
    let est = a.estimate.as_ref().unwrap();
    assert!(sigma_of_b(&a.report).is_none());
    // The split of f between a and b is unknown, so a percentage of a's flow is no accuracy:
    // the candidates are valued at an absolute one.
    assert!(
        candidates(&plant, est, &Accuracies::default()).is_empty()
            || est_flow(&plant, est, "a") > 0.0
    );
    let cands = candidates(&plant, est, &ABSOLUTE);
    assert_eq!(cands.len(), 2);
    let on_a = cands
        .iter()
        .position(|c| plant.streams[c.stream].id == "a")
        .unwrap();
    let worths = candidate_worths(&plant, est, "molar_flow", "b", &cands).unwrap();
    let w = &worths[on_a];
    let sigma_a = SIGMA_NEW;
    close(
        w.sigma_if_added.unwrap(),
        (SIGMA_F.powi(2) + sigma_a.powi(2)).sqrt(),
        "a metered",
    );
    assert_eq!(
        w.makes_observable,
        ["flow of stream \"a\"", "flow of stream \"b\""]
    );
    assert!(!w.testable, "one meter more than needed is none to spare");
}

fn plant_f_only() -> Plant {
    plant(false, false)
}

/// The estimate's flow of a stream (kmol/h).
fn est_flow(plant: &Plant, est: &reconcile::Estimate, stream: &str) -> f64 {
    let s = plant.stream_index(stream).unwrap();
    est.layout
        .stream_flows(plant, s)
        .map(|i| est.solution.z[i])
        .sum()
}

#[test]
fn two_meters_added_to_a_network_with_one_give_the_closed_form() {
    // Only FI-F: candidates on a and b, both chosen (one subset, exhaustive). Then every
    // stream is metered and var(b̂) is the closed form with σ_a = σ_b = 0.5 kmol/h.
    let plant = plant_f_only();
    let a = analyse_period(&plant, &period(values(&plant)));
    let est = a.estimate.as_ref().unwrap();
    let cands = candidates(&plant, est, &ABSOLUTE);
    assert_eq!(cands.len(), 2);
    let goal = vec![(
        WeightedFigure {
            name: "molar_flow".into(),
            subject: "b".into(),
            weight: 1.0,
        },
        reconcile::meter_value::meter_worths(&plant, est, "molar_flow", "b")
            .unwrap()
            .0,
    )];
    let best = best_additions(&plant, est, &cands, &goal, 2);
    assert_eq!(best.search, reconcile::meter_value::Search::Exhaustive);
    assert_eq!(best.evaluated, 1);
    let (sa, sb) = (SIGMA_NEW, SIGMA_NEW);
    let expected = sb * sb * (SIGMA_F.powi(2) + sa * sa) / (SIGMA_F.powi(2) + sa * sa + sb * sb);
    close(
        best.sigma_after[0].unwrap(),
        expected.sqrt(),
        "a and b metered",
    );
}
