//! A recycle loop with a reactor, a separator and a purge splitter, where flows are metered on
//! some streams and compositions on others (tests/data/ombrask-loop.toml).

use reconcile::equations::Layout;
use reconcile::{parse_plant, reconcile_period, Plant, ReportStatus};

use testkit::plants::OMBRASK as MODEL;
use testkit::{exact_values, period};

/// The loop's true steady state by successive substitution around the recycle: 25 % single-pass
/// conversion of N2, all NH3 and 5 % of the CH4 leave with the liquid product, 5 % purge.
/// Returns the state vector in the model's layout.
pub fn true_state(
    plant: &Plant,
    layout: &Layout,
    makeup: [f64; 5],
    purge_fraction: f64,
) -> Vec<f64> {
    let nu = [-1.0, -3.0, 2.0, 0.0, 0.0];
    let mut recycle = [0.0; 5];
    let (mut feed, mut out, mut product, mut gas, mut xi) =
        ([0.0; 5], [0.0; 5], [0.0; 5], [0.0; 5], 0.0);
    for _ in 0..5000 {
        for c in 0..5 {
            feed[c] = makeup[c] + recycle[c];
        }
        xi = 0.25 * feed[0];
        for c in 0..5 {
            out[c] = feed[c] + nu[c] * xi;
        }
        product = [0.0, 0.0, out[2], 0.0, 0.05 * out[4]];
        for c in 0..5 {
            gas[c] = out[c] - product[c];
            recycle[c] = (1.0 - purge_fraction) * gas[c];
        }
    }
    let purge: Vec<f64> = gas.iter().map(|g| purge_fraction * g).collect();
    let flows: [(&str, Vec<f64>); 7] = [
        ("makeup", makeup.to_vec()),
        ("conv-feed", feed.to_vec()),
        ("conv-out", out.to_vec()),
        ("product", product.to_vec()),
        ("cold-gas", gas.to_vec()),
        ("purge", purge),
        ("recycle", recycle.to_vec()),
    ];
    let mut z = vec![0.0; layout.n];
    for (id, f) in flows {
        let s = plant.stream_index(id).unwrap();
        for &c in &plant.streams[s].components {
            z[layout.flow(plant, s, c).unwrap()] = f[c];
        }
    }
    z[layout.extent(0)] = xi;
    let purge_stream = plant.stream_index("purge").unwrap();
    z[layout.split(purge_stream).unwrap()] = purge_fraction;
    z
}

#[test]
fn noise_free_loop_reconciles_to_itself() {
    let plant = parse_plant(MODEL).unwrap();
    let layout = Layout::new(&plant);
    let z = true_state(&plant, &layout, [247.0, 740.0, 0.0, 3.0, 10.0], 0.05);
    let report = reconcile_period(&plant, &period(exact_values(&plant, &layout, &z)));
    println!("{}", serde_json::to_string_pretty(&report).unwrap());
    assert_eq!(report.status, ReportStatus::Solved, "{:?}", report.warnings);
    assert!(report.objective.unwrap() < 1e-12);
    for m in &report.meters {
        assert!(
            m.adjustment.unwrap().abs() <= 1e-7 * m.measured.unwrap().abs().max(1.0),
            "{}",
            m.tag
        );
    }
    // Splitter outlets have the inlet's composition.
    let comp = |id: &str| {
        report
            .streams
            .iter()
            .find(|s| s.id == id)
            .unwrap()
            .composition
            .clone()
    };
    let (gas, purge, recycle) = (comp("cold-gas"), comp("purge"), comp("recycle"));
    for (c, x) in &gas {
        let x = x.unwrap();
        assert!(
            (purge[c].unwrap() - x).abs() < 1e-12 && (recycle[c].unwrap() - x).abs() < 1e-12,
            "{c}"
        );
    }
    // Inert in equals inert out (argon leaves only with the purge).
    let flow = |s: &str, c: &str| {
        report
            .streams
            .iter()
            .find(|x| x.id == s)
            .unwrap()
            .component_flows[c]
            .unwrap()
    };
    assert!((flow("makeup", "Ar") - flow("purge", "Ar")).abs() < 1e-9);
}

/// Noisy hours of the same loop (Gaussian noise at each meter's σ, fixed seed): every hour
/// converges to a state that satisfies the balances.
#[test]

fn noisy_hours_converge() {
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};
    let plant = parse_plant(MODEL).unwrap();
    let layout = Layout::new(&plant);
    let z = true_state(&plant, &layout, [247.0, 740.0, 0.0, 3.0, 10.0], 0.05);
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
    let mut solved = 0;
    for _ in 0..40 {
        let mut values = exact_values(&plant, &layout, &z);
        for v in &mut values {
            let sigma = plant.meters[v.meter].sigma_for(v.value).unwrap();
            v.value += Normal::new(0.0, sigma).unwrap().sample(&mut rng);
        }
        let report = reconcile_period(&plant, &period(values));
        if report.status == ReportStatus::Solved {
            solved += 1;
            assert!(report.diagnostics.unwrap().constraint_residual < 1e-6);
        } else {
            eprintln!("{:?} {:?}", report.status, report.diagnostics);
        }
    }
    assert_eq!(solved, 40);
}
