//! Statistical calibration and fault identification on simulated data, with fixed seeds.

use reconcile::equations::Layout;
use reconcile::faults::identify;
use reconcile::period::MeterValue;
use reconcile::report::FaultKind;
use reconcile::solve::Measured;
use reconcile::{estimate, parse_plant, Estimate, Plant};
use testkit::plants::VANTLE;
use testkit::{exact_values, noisy_values, one_reading_each, vantle_true_state, VantleConditions};

fn measured(plant: &Plant, values: &[MeterValue]) -> Vec<Measured> {
    values
        .iter()
        .map(|v| Measured {
            meter: v.meter,
            value: v.value,
            sigma: plant.meters[v.meter].sigma_for(v.value).unwrap(),
        })
        .collect()
}

fn vantle() -> (Plant, Vec<MeterValue>) {
    let plant = parse_plant(VANTLE).unwrap();
    let layout = Layout::new(&plant);
    let z = vantle_true_state(&plant, &layout, &VantleConditions::default());
    let exact = exact_values(&plant, &layout, &z);
    (plant, exact)
}

/// With random errors only, the global test rejects in α of the trials and the normalised
/// adjustments are standard normal: the calibration check of the whole statistics chain
/// (docs/methods.md §4–§5; Narasimhan & Mah 1987).
#[test]
fn random_errors_only_calibrate_the_tests() {
    let (plant, exact) = vantle();
    let trials = 2000;
    let mut rejections = 0;
    let (mut objective_sum, mut dof_seen) = (0.0, 0);
    let mut sums: Vec<(f64, f64, usize)> = vec![(0.0, 0.0, 0); plant.meters.len()];
    for seed in 0..trials {
        let values = noisy_values(&plant, &exact, 1_000 + seed as u64);
        let est = estimate(&plant, measured(&plant, &values));
        assert_eq!(
            est.solution.status,
            reconcile::solve::SolveStatus::Converged,
            "trial {seed}"
        );
        let dof = est.classification.redundancy;
        objective_sum += est.solution.objective;
        dof_seen = dof;
        if !reconcile::stats::global_test(est.solution.objective, dof, plant.alpha).passed {
            rejections += 1;
        }
        for (k, m) in est.measured.iter().enumerate() {
            if est.classification.is_redundant(k) {
                let (h, _) = est.reconciled(&plant, k);
                let d =
                    (h - m.value) / (m.sigma * est.classification.adjustment_variance(k).sqrt());
                let s = &mut sums[m.meter];
                s.0 += d;
                s.1 += d * d;
                s.2 += 1;
            }
        }
    }
    // Rejection rate 5 % ± 1.5 %: the Monte Carlo standard error of a proportion of 0.05 over
    // 2,000 trials is sqrt(0.05 × 0.95 / 2000) = 0.49 %, so ±1.5 % is about 3 standard errors.
    let rate = rejections as f64 / trials as f64;
    println!(
        "rejections {rate}, mean objective {} for ν = {dof_seen}",
        objective_sum / trials as f64
    );
    for (mi, &(sum, sq, n)) in sums.iter().enumerate() {
        if n > 0 {
            let mean = sum / n as f64;
            println!(
                "{} mean {mean:.3} var {:.3}",
                plant.meters[mi].tag,
                sq / n as f64 - mean * mean
            );
        }
    }
    assert!((rate - 0.05).abs() <= 0.015, "global test rejected {rate}");
    // Each redundant meter's normalised adjustment: mean 0 (standard error 1/√2000 = 0.022)
    // and variance 1 (standard error √(2/2000) = 0.032), checked at 4 standard errors.
    let mut tested = 0;
    for (mi, &(sum, sq, n)) in sums.iter().enumerate() {
        if n == 0 {
            continue;
        }
        tested += 1;
        let mean = sum / n as f64;
        let var = sq / n as f64 - mean * mean;
        assert!(
            mean.abs() <= 4.0 * 0.0224,
            "meter {}: mean {mean}",
            plant.meters[mi].tag
        );
        assert!(
            (var - 1.0).abs() <= 4.0 * 0.0317,
            "meter {}: variance {var}",
            plant.meters[mi].tag
        );
    }
    assert!(tested >= 10, "{tested} redundant meters");
}

/// One bias on a random redundant meter, sized so that its expected measurement-test
/// statistic is 6: the overall power OP (true meter inside the reported group) is at least
/// 0.9 and the average number of type I errors AVTI at most 0.1 (both as defined by
/// Narasimhan & Mah 1987).
#[test]
fn one_bias_is_found_with_high_power_and_few_false_alarms() {
    let (plant, exact) = vantle();
    let reference: Estimate = estimate(&plant, measured(&plant, &exact));
    let redundant: Vec<usize> = (0..reference.measured.len())
        .filter(|&k| reference.classification.is_redundant(k))
        .collect();
    let trials = 400;
    let (mut found, mut wrong, mut members, mut groups) = (0, 0, 0, 0);
    for trial in 0..trials {
        let k = redundant[trial % redundant.len()];
        let meter = reference.measured[k].meter;
        let sigma = reference.measured[k].sigma;
        // E[d] = δ √W_ii / σ = 6.
        let bias = 6.0 * sigma / reference.classification.adjustment_variance(k).sqrt();
        let mut values = noisy_values(&plant, &exact, 50_000 + trial as u64);
        values[meter].value += bias;
        let est = estimate(&plant, measured(&plant, &values));
        let id = identify(&plant, &est);
        let tag = &plant.meters[meter].tag;
        for fault in &id.faults {
            groups += 1;
            members += fault.candidates.len();
            if fault.candidates.contains(tag) {
                found += 1;
            } else {
                wrong += 1;
            }
        }
    }
    let op = found as f64 / trials as f64;
    let avti = wrong as f64 / trials as f64;
    let mean_group = members as f64 / groups as f64;
    println!("OP {op}, AVTI {avti}, mean group size {mean_group}");
    assert!(op >= 0.9, "OP {op}");
    assert!(avti <= 0.1, "AVTI {avti}");
    // The groups stay small: the power is not bought by naming many candidates.
    assert!(mean_group <= 2.5, "mean group size {mean_group}");
}

/// A small loop where argon is read only by an analyser on the fresh feed and one on the
/// purge (as component flows), and the fresh feed's total flow is read twice in series.
fn small_loop(purge_metered: bool) -> String {
    // With the purge metered, the rest of the plant constrains the fresh feed (at steady state
    // all that is fed leaves with the purge); without it, nothing else reads the feed's total.
    let purge_meter = if purge_metered {
        "[[meter]]\ntag = \"FI-2\"\nstream = \"purge\"\nquantity = \"molar_flow\"\nuom = \"kmol/h\"\nsigma = 1.0\n"
    } else {
        ""
    };
    format!(
        r#"
name = "small-loop"
[[component]]
id = "A"
molar_mass = 28.0
[[component]]
id = "Ar"
molar_mass = 39.95
inert = true
[[unit]]
id = "mix"
kind = "mixer"
[[unit]]
id = "split"
kind = "splitter"
[[stream]]
id = "feed"
from = "outside"
to = "mix"
[[stream]]
id = "mix-out"
from = "mix"
to = "split"
[[stream]]
id = "purge"
from = "split"
to = "outside"
[[stream]]
id = "recycle"
from = "split"
to = "mix"
[[meter]]
tag = "FI-1"
stream = "feed"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "FI-1B"
stream = "feed"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "FI-3"
stream = "recycle"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 3.0
[[meter]]
tag = "AI-1"
stream = "feed"
quantity = "component_flow"
component = "Ar"
uom = "kmol/h"
sigma = 0.02
[[meter]]
tag = "AI-2"
stream = "purge"
quantity = "component_flow"
component = "Ar"
uom = "kmol/h"
sigma = 0.02
{purge_meter}"#
    )
}

/// Exact readings of the small loop: feed 100 kmol/h with 1 kmol/h argon, purge fraction 0.2,
/// recycle four times the purge.
fn small_loop_values(plant: &Plant) -> Vec<MeterValue> {
    let (feed, argon) = (100.0, 1.0);
    let purge = feed; // at steady state everything fed leaves with the purge
    let recycle = 4.0 * purge;
    one_reading_each(plant.meters.iter().map(|m| match m.tag.as_str() {
        "FI-1" | "FI-1B" => feed,
        "FI-2" => purge,
        "FI-3" => recycle,
        _ => argon,
    }))
}

fn identify_with(model: &str, bias: (&str, f64), seed: u64) -> Vec<reconcile::report::Fault> {
    let plant = parse_plant(model).unwrap();
    let exact = small_loop_values(&plant);
    let mut values = noisy_values(&plant, &exact, seed);
    let k = plant.meter_index(bias.0).unwrap();
    values[k].value += bias.1;
    let est = estimate(&plant, measured(&plant, &values));
    identify(&plant, &est).faults
}

/// The only two analysers of an inert, on the fresh feed and on the purge, are tied by the
/// inert balance alone: a bias in either is always reported as one group of both.
#[test]
fn the_only_two_inert_analysers_are_one_group() {
    let model = small_loop(true);
    for seed in 0..50 {
        for tag in ["AI-1", "AI-2"] {
            let faults = identify_with(&model, (tag, 0.2), seed);
            let group = faults
                .iter()
                .find(|f| f.candidates.iter().any(|c| c == tag))
                .unwrap_or_else(|| panic!("{tag} not found (seed {seed}): {faults:?}"));
            let mut candidates = group.candidates.clone();
            candidates.sort();
            assert_eq!(candidates, ["AI-1", "AI-2"], "seed {seed}");
        }
    }
}

/// Two meters in series on the fresh feed: where nothing else reads the feed they cannot be
/// told apart; where the rest of the plant constrains the feed, they are told apart.
#[test]
fn meters_in_series_are_told_apart_only_when_the_plant_constrains_them() {
    let unconstrained = small_loop(false);
    let constrained = small_loop(true);
    let mut apart = 0;
    for seed in 0..50 {
        let faults = identify_with(&unconstrained, ("FI-1", 12.0), seed);
        let group = faults
            .iter()
            .find(|f| f.candidates.iter().any(|c| c == "FI-1"))
            .expect("found");
        assert!(
            group.candidates.iter().any(|c| c == "FI-1B"),
            "seed {seed}: {:?}",
            group.candidates
        );

        let faults = identify_with(&constrained, ("FI-1", 12.0), seed);
        let group = faults
            .iter()
            .find(|f| f.candidates.iter().any(|c| c == "FI-1"))
            .expect("found");
        if !group.candidates.iter().any(|c| c == "FI-1B") {
            apart += 1;
        }
        assert!(faults.iter().all(|f| f.kind != FaultKind::Leak));
    }
    assert_eq!(apart, 50, "told apart in {apart} of 50");
}

/// A single-component network of balance nodes, every stream metered. Node n4 has only
/// internal streams; node n2 also sends a stream out of the plant.
const LEAK_NETWORK: &str = r#"
name = "leak-network"
[[component]]
id = "W"
molar_mass = 18.015
[[unit]]
id = "n1"
kind = "node"
[[unit]]
id = "n2"
kind = "node"
[[unit]]
id = "n3"
kind = "node"
[[unit]]
id = "n4"
kind = "node"
[[stream]]
id = "s1"
from = "outside"
to = "n1"
[[stream]]
id = "s2"
from = "n1"
to = "n2"
[[stream]]
id = "s3"
from = "n1"
to = "n4"
[[stream]]
id = "s4"
from = "n4"
to = "n3"
[[stream]]
id = "s5"
from = "n2"
to = "n3"
[[stream]]
id = "s6"
from = "n2"
to = "outside"
[[stream]]
id = "s7"
from = "n3"
to = "outside"
"#;

fn leak_network() -> Plant {
    let mut model = LEAK_NETWORK.to_string();
    for (k, s) in ["s1", "s2", "s3", "s4", "s5", "s6", "s7"]
        .iter()
        .enumerate()
    {
        model += &format!("[[meter]]\ntag = \"F{}\"\nstream = \"{s}\"\nquantity = \"molar_flow\"\nuom = \"kmol/h\"\nsigma = 1.0\n", k + 1);
    }
    parse_plant(&model).unwrap()
}

/// True flows with `lost` kmol/h leaking at node `at` (n4 or n2), and noisy readings.
fn leak_values(plant: &Plant, at: &str, lost: f64, seed: u64) -> Vec<MeterValue> {
    // s1 = 200 splits 120 / 80 at n1; n2 sends 50 out by s6 and the rest to n3.
    let (s1, s2, s3, s6) = (200.0, 120.0, 80.0, 50.0);
    let (n2_loss, n4_loss) = if at == "n2" { (lost, 0.0) } else { (0.0, lost) };
    let s5 = s2 - s6 - n2_loss;
    let s4 = s3 - n4_loss;
    let s7 = s4 + s5;
    let exact = one_reading_each([s1, s2, s3, s4, s5, s6, s7]);
    noisy_values(plant, &exact, seed)
}

/// A leak at a node that only internal streams touch is identified as a leak there, with its
/// size, not smeared over the meters around it.
#[test]
fn a_leak_the_meters_can_see_is_named_as_a_leak() {
    let plant = leak_network();
    let trials = 100;
    let mut named = 0;
    for seed in 0..trials {
        let values = leak_values(&plant, "n4", 8.0, 900 + seed);
        let est = estimate(&plant, measured(&plant, &values));
        let faults = identify(&plant, &est).faults;
        let leak = faults
            .iter()
            .find(|f| f.candidates.iter().any(|c| c == "n4"));
        if let Some(f) = leak {
            if f.kind == FaultKind::Leak && faults.len() == 1 {
                named += 1;
                let member = f.members.iter().find(|m| m.id == "n4").unwrap();
                assert!(
                    (member.magnitude - 8.0).abs() <= 4.0 * member.magnitude_sigma,
                    "{member:?}"
                );
            }
        }
    }
    // The leak's expected statistic is large (8 kmol/h against σ ≈ 1.3): it should be named,
    // alone, in nearly every trial.
    assert!(named >= 90, "named alone as a leak in {named} of {trials}");
}

/// A leak at a node with a stream out of the plant looks exactly like a bias of that stream's
/// meter: the report gives both as one group.
#[test]
fn a_leak_equivalent_to_a_meter_bias_is_reported_as_a_group() {
    let plant = leak_network();
    for seed in 0..50 {
        let values = leak_values(&plant, "n2", 8.0, 2_000 + seed);
        let est = estimate(&plant, measured(&plant, &values));
        let faults = identify(&plant, &est).faults;
        let f = faults
            .iter()
            .find(|f| f.candidates.iter().any(|c| c == "n2"))
            .unwrap_or_else(|| panic!("seed {seed}: {faults:?}"));
        assert!(
            f.candidates.iter().any(|c| c == "F6"),
            "seed {seed}: {:?}",
            f.candidates
        );
        assert!(f.members.iter().all(|m| m.id != "F6" || m.equivalent));
        assert_eq!(f.kind, FaultKind::MeterBiasOrLeak);
    }
}
