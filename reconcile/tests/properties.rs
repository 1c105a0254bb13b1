//! Property tests over generated plants with a recycle: feeds, a mixer, an optional reactor with
//! an optional bypass, a separator, an optional cooler node and a purge splitter.

use chrono::{TimeZone, Utc};
use nalgebra::DMatrix;
use proptest::prelude::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use reconcile::equations::{constraints, measurement, stream_total, Layout};
use reconcile::model::Quantity;
use reconcile::period::{MeterValue, PeriodInput};
use reconcile::solve::Measured;
use reconcile::sparse::Triplets;
use reconcile::{estimate, parse_plant, reconcile_period, Plant, Report, ReportStatus};

/// A generated plant: its model text and true state.
struct Case {
    plant: Plant,
    layout: Layout,
    truth: Vec<f64>,
}

fn generate(seed: u64) -> Case {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let nc = rng.gen_range(2..=5);
    let react = nc >= 3 && rng.gen_bool(0.7);
    let bypass = react && rng.gen_bool(0.4);
    let cooler = rng.gen_bool(0.5);
    let second_feed = rng.gen_bool(0.4);
    let mut masses: Vec<f64> = (0..nc).map(|_| rng.gen_range(2.0..60.0)).collect();
    if react {
        masses[2] = masses[0] + masses[1]; // C0 + C1 → C2 conserves mass
    }
    // Components that leave with the liquid product, and their recoveries.
    let recovery: Vec<f64> = (0..nc)
        .map(|c| {
            if (react && c == 2) || rng.gen_bool(0.3) {
                rng.gen_range(0.5..1.0)
            } else {
                0.0
            }
        })
        .collect();
    let product_components: Vec<usize> = (0..nc).filter(|&c| recovery[c] > 0.0).collect();
    let has_product = !product_components.is_empty();

    let mut t = String::from("name = \"generated\"\n");
    for (c, mass) in masses.iter().enumerate() {
        t += &format!("[[component]]\nid = \"C{c}\"\nmolar_mass = {mass}\n");
    }
    let mut units = vec![
        ("mix", "mixer"),
        ("sep", "separator"),
        ("split", "splitter"),
    ];
    if react {
        units.push(("reac", "reactor"));
    }
    if bypass {
        units.push(("bysplit", "splitter"));
        units.push(("bymix", "mixer"));
    }
    if cooler {
        units.push(("cool", "node"));
    }
    for (id, kind) in &units {
        t += &format!("[[unit]]\nid = \"{id}\"\nkind = \"{kind}\"\n");
    }
    if react {
        t += "[[reaction]]\nid = \"r1\"\nunit = \"reac\"\nstoichiometry = { C0 = -1, C1 = -1, C2 = 1 }\nkey = \"C0\"\n";
    }
    let list = |v: &[usize]| {
        v.iter()
            .map(|c| format!("\"C{c}\""))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let feed_components: Vec<usize> = (0..nc).filter(|&c| !(react && c == 2)).collect();
    let mut streams: Vec<(String, String, String, Option<String>)> = Vec::new();
    let mut add = |id: &str, from: &str, to: &str, comps: Option<String>| {
        streams.push((id.into(), from.into(), to.into(), comps))
    };
    add("feed", "outside", "mix", Some(list(&feed_components)));
    if second_feed {
        add("feed2", "outside", "mix", Some(list(&feed_components)));
    }
    let sep_in = if react {
        if bypass {
            add("mixout", "mix", "bysplit", None);
            add("reacin", "bysplit", "reac", None);
            add("bypass", "bysplit", "bymix", None);
            add("reacout", "reac", "bymix", None);
            add("sepin", "bymix", "sep", None);
        } else {
            add("mixout", "mix", "reac", None);
            add("sepin", "reac", "sep", None);
        }
        "sepin"
    } else {
        add("sepin", "mix", "sep", None);
        "sepin"
    };
    let _ = sep_in;
    if has_product {
        add("product", "sep", "outside", Some(list(&product_components)));
    }
    if cooler {
        add("gas", "sep", "cool", None);
        add("coolout", "cool", "split", None);
    } else {
        add("gas", "sep", "split", None);
    }
    add("purge", "split", "outside", None);
    add("recycle", "split", "mix", None);
    for (id, from, to, comps) in &streams {
        t += &format!("[[stream]]\nid = \"{id}\"\nfrom = \"{from}\"\nto = \"{to}\"\n");
        if let Some(c) = comps {
            t += &format!("components = [{c}]\n");
        }
    }

    // True state by successive substitution around the recycle.
    let feed: Vec<f64> = (0..nc)
        .map(|c| {
            if feed_components.contains(&c) {
                rng.gen_range(5.0..200.0)
            } else {
                0.0
            }
        })
        .collect();
    let feed2: Vec<f64> = feed.iter().map(|f| f * rng.gen_range(0.1..0.5)).collect();
    let conversion = rng.gen_range(0.1..0.6);
    let beta = rng.gen_range(0.1..0.5); // bypass fraction
    let phi = rng.gen_range(0.05..0.5); // purge fraction
    let mut recycle = vec![0.0; nc];
    let mut flows: std::collections::HashMap<&str, Vec<f64>> = Default::default();
    let mut xi = 0.0;
    for _ in 0..4000 {
        let mixout: Vec<f64> = (0..nc)
            .map(|c| feed[c] + if second_feed { feed2[c] } else { 0.0 } + recycle[c])
            .collect();
        let (reacin, bypass_flow) = if bypass {
            (
                mixout.iter().map(|f| (1.0 - beta) * f).collect::<Vec<_>>(),
                mixout.iter().map(|f| beta * f).collect::<Vec<_>>(),
            )
        } else {
            (mixout.clone(), vec![0.0; nc])
        };
        let mut reacout = reacin.clone();
        if react {
            xi = conversion * reacin[0].min(reacin[1]);
            reacout[0] -= xi;
            reacout[1] -= xi;
            reacout[2] += xi;
        }
        let sepin: Vec<f64> = (0..nc).map(|c| reacout[c] + bypass_flow[c]).collect();
        let product: Vec<f64> = (0..nc).map(|c| recovery[c] * sepin[c]).collect();
        let gas: Vec<f64> = (0..nc).map(|c| sepin[c] - product[c]).collect();
        recycle = gas.iter().map(|g| (1.0 - phi) * g).collect();
        flows = [
            ("feed", feed.clone()),
            ("feed2", feed2.clone()),
            ("mixout", mixout),
            ("reacin", reacin),
            ("bypass", bypass_flow),
            ("reacout", reacout),
            ("sepin", sepin),
            ("product", product),
            ("gas", gas.clone()),
            ("coolout", gas.clone()),
            ("purge", gas.iter().map(|g| phi * g).collect()),
            ("recycle", recycle.clone()),
        ]
        .into_iter()
        .collect();
    }

    // Meters: a total flow on most streams, analysers on some.
    let mut meters = String::new();
    for (k, (id, _, _, _)) in streams.iter().enumerate() {
        let total: f64 = flows[id.as_str()].iter().sum();
        if rng.gen_bool(0.7) {
            let (q, uom, f) = match rng.gen_range(0..5) {
                0 => ("molar_flow", "kmol/h", 1.0),
                1 => ("molar_flow", "mol/s", 1000.0 / 3600.0),
                2 => ("std_volume_flow", "Nm3/h", 22.413_969_54),
                3 => ("std_volume_flow", "Sm3/h", 23.645),
                _ => ("mass_flow", "t/h", 0.03),
            };
            meters += &format!("[[meter]]\ntag = \"F{k}\"\nstream = \"{id}\"\nquantity = \"{q}\"\nuom = \"{uom}\"\nsigma = {}\n", 0.02 * total * f + 1e-3);
        }
        let carried: Vec<usize> = if id == "product" {
            product_components.clone()
        } else if id.starts_with("feed") {
            feed_components.clone()
        } else {
            (0..nc).collect()
        };
        for &c in &carried {
            if rng.gen_bool(0.25) {
                let (q, uom, sigma) = match rng.gen_range(0..4) {
                    0 => ("mole_fraction", "%", 0.1),
                    1 => ("mole_fraction", "fraction", 0.002),
                    2 => ("mass_fraction", "ppm", 1000.0),
                    _ => (
                        "component_flow",
                        "kmol/h",
                        0.02 * flows[id.as_str()][c] + 1e-3,
                    ),
                };
                meters += &format!("[[meter]]\ntag = \"A{k}-{c}\"\nstream = \"{id}\"\nquantity = \"{q}\"\ncomponent = \"C{c}\"\nuom = \"{uom}\"\nsigma = {sigma}\n");
            }
        }
    }
    t += &meters;
    let plant = parse_plant(&t).unwrap_or_else(|e| panic!("generated model invalid: {e}\n{t}"));
    let layout = Layout::new(&plant);
    let mut truth = vec![0.0; layout.n];
    for (s, stream) in plant.streams.iter().enumerate() {
        for &c in &stream.components {
            truth[layout.flow(&plant, s, c).unwrap()] = flows[stream.id.as_str()][c];
        }
    }
    if react {
        truth[layout.extent(0)] = xi;
    }
    for u in plant
        .units
        .iter()
        .filter(|u| u.kind == reconcile::model::UnitKind::Splitter)
    {
        let o = u.outlets[0];
        let inlet: f64 = flows[plant.streams[u.inlets[0]].id.as_str()].iter().sum();
        let out: f64 = flows[plant.streams[o].id.as_str()].iter().sum();
        truth[layout.split(o).unwrap()] = out / inlet;
    }
    Case {
        plant,
        layout,
        truth,
    }
}

fn period(values: Vec<MeterValue>) -> PeriodInput {
    PeriodInput {
        start: Utc.with_ymd_and_hms(2026, 5, 1, 0, 0, 0).unwrap(),
        end: Utc.with_ymd_and_hms(2026, 5, 1, 1, 0, 0).unwrap(),
        values,
        left_out: Vec::new(),
    }
}

fn readings(case: &Case, noise: Option<&mut ChaCha8Rng>) -> Vec<MeterValue> {
    let mut noise = noise;
    (0..case.plant.meters.len())
        .map(|m| {
            let meter = &case.plant.meters[m];
            let mut value = measurement(&case.plant, &case.layout, meter, &case.truth).0;
            if let Some(rng) = noise.as_deref_mut() {
                value += Normal::new(0.0, meter.sigma_for(value).unwrap())
                    .unwrap()
                    .sample(rng);
            }
            MeterValue {
                meter: m,
                value,
                readings: 1,
                used_uncertain: false,
                spread: 0.0,
            }
        })
        .collect()
}

/// The stacked Jacobian [G; H] at z with its rows scaled to unit norm (which leaves its rank
/// unchanged, so that meters of very different sensitivity do not hide each other under a
/// relative threshold).
fn stacked_jacobian(case: &Case, z: &[f64]) -> DMatrix<f64> {
    let (plant, layout) = (&case.plant, &case.layout);
    let mut g = Triplets::new(layout.rows.len(), layout.n);
    constraints(plant, layout, z, Some(&mut g));
    let p = layout.rows.len();
    let mut stacked = DMatrix::zeros(p + plant.meters.len(), layout.n);
    stacked
        .view_mut((0, 0), (p, layout.n))
        .copy_from(&g.to_dense());
    for (k, meter) in plant.meters.iter().enumerate() {
        let (_, grad) = measurement(plant, layout, meter, z);
        for (i, v) in grad {
            stacked[(p + k, i)] = v;
        }
    }
    equilibrate(stacked)
}

fn equilibrate(mut m: DMatrix<f64>) -> DMatrix<f64> {
    for mut row in m.row_iter_mut() {
        let norm = row.norm();
        if norm > 0.0 {
            row /= norm;
        }
    }
    m
}

fn singular_values(m: &DMatrix<f64>) -> Vec<f64> {
    let sv = m.clone().svd(false, false).singular_values;
    let max = sv.max();
    sv.iter().map(|x| x / max).collect()
}

/// Numerically ambiguous observability: the stacked Jacobian has a singular value between
/// 1e-12 and 1e-7 of its largest. Such a direction is determined only with a σ many orders of
/// magnitude beyond the flows; whether to call it observable is a matter of threshold, so the
/// property below is checked on clear-cut plants only.
fn ambiguous(case: &Case, z: &[f64]) -> bool {
    singular_values(&stacked_jacobian(case, z))
        .iter()
        .any(|&s| s > 1e-12 && s < 1e-7)
}

/// Is the total flow of stream s observable? Checked independently of the engine's projection:
/// adding the row of the functional to the stacked Jacobian [G; J] must not raise its rank.
fn flow_observable_by_rank(case: &Case, s: usize, z: &[f64]) -> bool {
    let stacked = stacked_jacobian(case, z);
    let rank = |m: &DMatrix<f64>| singular_values(m).iter().filter(|&&x| x > 1e-9).count();
    let before = rank(&stacked);
    let (_, grad) = stream_total(&case.plant, &case.layout, s, z);
    let rows = stacked.nrows();
    let mut extended = stacked.insert_rows(rows, 1, 0.0);
    for (i, v) in grad {
        extended[(rows, i)] = v;
    }
    rank(&equilibrate(extended)) == before
}

fn check_noise_free(case: &Case, report: &Report) {
    assert!(
        matches!(
            report.status,
            ReportStatus::Solved | ReportStatus::Unobservable
        ),
        "status {:?}: {:?}",
        report.status,
        report.warnings
    );
    let scale = case.truth.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    let diag = report.diagnostics.as_ref().unwrap();
    assert!(
        diag.constraint_residual <= 1e-9 * scale,
        "balances hold: {}",
        diag.constraint_residual
    );
    // The iteration stops on relative tolerances; 1e-4 σ is zero for any engineering purpose.
    for m in &report.meters {
        let (adj, sigma) = (m.adjustment.unwrap(), m.sigma.unwrap());
        assert!(
            adj.abs() <= 1e-4 * sigma,
            "meter {} adjusted by {adj} (σ {sigma})",
            m.tag
        );
    }
    // Fraction meters make the measurement equations nonlinear, and then several exact
    // solutions can reproduce the same readings: the truth is only required where the
    // readings are flows, which the balances and splitter rows pin down uniquely.
    let has_fractions = case
        .plant
        .meters
        .iter()
        .any(|m| matches!(m.quantity, Quantity::MoleFraction | Quantity::MassFraction));
    let est = estimate_of(case, &readings(case, None));
    for (s, entry) in report.streams.iter().enumerate() {
        let truth: f64 = case
            .layout
            .stream_flows(&case.plant, s)
            .map(|i| case.truth[i])
            .sum();
        match (entry.molar_flow, entry.molar_flow_sigma) {
            (Some(f), Some(sd)) if !has_fractions => assert!(
                (f - truth).abs() <= 1e-3 * sd + 1e-7 * scale,
                "stream {}: {f} vs true {truth} (σ {sd})",
                entry.id
            ),
            (Some(_), Some(_)) => {}
            _ => assert!(!entry.observable),
        }
        // Observability agrees with an independent rank computation at the estimate.
        assert_eq!(
            entry.observable,
            flow_observable_by_rank(case, s, &est.solution.z),
            "observability of stream {}",
            entry.id
        );
    }
    if !has_fractions {
        for e in &report.extents {
            if let Some(v) = e.value {
                assert!((v - case.truth[case.layout.extent(0)]).abs() <= 1e-6 * scale);
            }
        }
    }
}

fn estimate_of(case: &Case, values: &[MeterValue]) -> reconcile::Estimate {
    let measured = values
        .iter()
        .map(|v| Measured {
            meter: v.meter,
            value: v.value,
            sigma: case.plant.meters[v.meter].sigma_for(v.value).unwrap(),
        })
        .collect();
    estimate(&case.plant, measured)
}

/// A stream with almost no flow at the estimate has no defined composition: fraction meters
/// on it make the problem degenerate, and the linearised statements do not apply there.
fn degenerate(case: &Case, est: &reconcile::Estimate) -> bool {
    let z = &est.solution.z;
    let scale = z.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    (0..case.plant.streams.len())
        .any(|s| stream_total(&case.plant, &case.layout, s, z).0 < 1e-6 * scale)
}

proptest! {
    // A fixed seed keeps CI deterministic; set PROPTEST_RNG_SEED (or change it here) to explore.
    #![proptest_config(ProptestConfig {
        cases: 128,
        rng_seed: proptest::test_runner::RngSeed::Fixed(20261202),
        failure_persistence: None,
        .. ProptestConfig::default()
    })]

    /// Noise-free measurements reconcile to themselves; balances hold; numbers are the truth
    /// and unobservable quantities are null.
    #[test]
    fn noise_free_data_reconcile_to_themselves(seed in any::<u64>()) {
        let case = generate(seed);
        let est = estimate_of(&case, &readings(&case, None));
        prop_assume!(!degenerate(&case, &est) && !ambiguous(&case, &est.solution.z));
        let report = reconcile_period(&case.plant, &period(readings(&case, None)));
        check_noise_free(&case, &report);
    }

    /// With noise, non-redundant meters keep their value: the estimate matches them exactly.
    #[test]
    fn non_redundant_meters_are_not_adjusted(seed in any::<u64>()) {
        let case = generate(seed);
        let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x5eed);
        let values = readings(&case, Some(&mut rng));
        let measured: Vec<Measured> = values.iter().map(|v| Measured {
            meter: v.meter, value: v.value, sigma: case.plant.meters[v.meter].sigma_for(v.value).unwrap(),
        }).collect();
        let est = estimate(&case.plant, measured.clone());
        prop_assume!(est.solution.status == reconcile::solve::SolveStatus::Converged);
        // An active bound (a flow the noise pushes below zero) may move any meter; the
        // property is about the unbounded estimate.
        prop_assume!(!est.solution.at_bound.iter().any(|&b| b));
        prop_assume!(!degenerate(&case, &est) && !ambiguous(&case, &est.solution.z));
        let scale = case.truth.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
        prop_assert!(est.solution.constraint_residual <= 1e-9 * scale);
        for (k, m) in measured.iter().enumerate() {
            if !est.classification.is_redundant(k) {
                let (h, _) = est.reconciled(&case.plant, k);
                prop_assert!((h - m.value).abs() <= 1e-3 * m.sigma, "meter {} moved by {} (σ {}, adjustment variance {:e})", case.plant.meters[m.meter].tag, h - m.value, m.sigma, est.classification.adjustment_variance(k));
            }
        }
    }

    /// The solver never panics, whatever the readings: wild values, zeros, negatives.
    #[test]
    fn never_panics_on_wild_readings(seed in any::<u64>(), wild in proptest::collection::vec(prop_oneof![
        Just(0.0), Just(-1.0), Just(1e12), Just(1e-12), -1e6..1e6f64], 1..40)) {
        let case = generate(seed);
        let values: Vec<MeterValue> = (0..case.plant.meters.len()).zip(wild.iter().cycle())
            .map(|(m, &v)| MeterValue { meter: m, value: v, readings: 1, used_uncertain: false, spread: 0.0 })
            .collect();
        let report = reconcile_period(&case.plant, &period(values));
        prop_assert_eq!(report.meters.len(), case.plant.meters.len());
    }
}

/// Five hundred generated plants, noise-free: every estimate converges, closes the balances
/// and reproduces the readings (objective ≈ 0). Degenerate estimates (a stream with no flow)
/// are counted and must stay rare.
#[test]
fn generated_plants_reconcile_noise_free_data() {
    let (mut not_conv, mut local, mut degenerate_n, mut ok) = (0, 0, 0, 0);
    for seed in 0..500u64 {
        let case = generate(seed);
        let est = estimate_of(&case, &readings(&case, None));
        if degenerate(&case, &est) {
            degenerate_n += 1;
            continue;
        }
        if est.solution.status != reconcile::solve::SolveStatus::Converged {
            not_conv += 1;
            continue;
        }
        if est.solution.objective > 1e-8 {
            local += 1;
            continue;
        }
        ok += 1;
    }
    assert_eq!(
        (not_conv, local),
        (0, 0),
        "{ok} ok, {degenerate_n} degenerate"
    );
    assert!(degenerate_n <= 5, "{degenerate_n} degenerate of 500");
}

/// A generated plant (seed 1496256546480271980, with noise) where the iteration used to stop
/// while a non-redundant meter was still 0.06 σ from its reading: the step with the constraint
/// curvature did not descend there, the line search stalled and the objective stopped
/// changing. The solver now ends only where the plain Gauss–Newton step is below 1e-7 σ.
#[test]
fn non_redundant_meter_on_a_known_hard_plant() {
    let seed = 1_496_256_546_480_271_980_u64;
    let case = generate(seed);
    let mut rng = ChaCha8Rng::seed_from_u64(seed ^ 0x5eed);
    let est = estimate_of(&case, &readings(&case, Some(&mut rng)));
    for (k, m) in est.measured.iter().enumerate() {
        if !est.classification.is_redundant(k) {
            let (h, _) = est.reconciled(&case.plant, k);
            assert!(
                (h - m.value).abs() <= 1e-4 * m.sigma,
                "{} moved by {}",
                case.plant.meters[m.meter].tag,
                h - m.value
            );
        }
    }
}
