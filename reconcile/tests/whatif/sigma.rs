//! σ of a what-if: the delta method against finite differences and a Monte Carlo of the base case, ranges and sweeps.

use super::*;

/// (c) σ by the delta method against central finite differences of the what-if through the
/// base case: perturbing each meter value by h and reconciling again gives dfigure/dy; then
/// Var = Σ_i (df/dy_i σ_i)² (the meters are independent). The estimate's map y → z is the
/// linearised WLS solution, so the two agree to the finite difference's truncation error.
#[test]
fn sigma_by_the_delta_method_matches_finite_differences_through_the_base_case() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let base_values = values(&plant, &z, None);
    let request = set(&[("split:purge", 0.10)]);
    let pick = |w: &WhatIf| {
        [
            figure(w, 0, "inert_fraction_reactor_inlet", "conv:Ar"),
            figure(w, 0, "product_made", "NH3"),
            figure(w, 0, "purge_flow", "purge"),
            figure(w, 0, "recycle_ratio", "split"),
        ]
    };
    let w0 = whatif::what_if(&plant, &analyse(&plant, base_values.clone()), &request).unwrap();
    let delta: Vec<f64> = pick(&w0).iter().map(|f| f.1).collect();
    let mut var = [0.0; 4];
    for (k, v) in base_values.iter().enumerate() {
        let sigma = plant.meters[k].sigma_for(v.value).unwrap();
        let h = 1e-3 * sigma;
        let mut up = base_values.clone();
        up[k].value += h;
        let mut down = base_values.clone();
        down[k].value -= h;
        let fu = pick(&whatif::what_if(&plant, &analyse(&plant, up), &request).unwrap());
        let fd = pick(&whatif::what_if(&plant, &analyse(&plant, down), &request).unwrap());
        for j in 0..4 {
            let d = (fu[j].0 - fd[j].0) / (2.0 * h);
            var[j] += (d * sigma).powi(2);
        }
    }
    for j in 0..4 {
        close(&format!("σ of figure {j}"), delta[j], var[j].sqrt(), 1e-4);
    }
}

/// (c) σ against a Monte Carlo of the base case: 500 noisy draws of the meter values, each
/// reconciled and carried to the new purge. The sample standard deviation of N = 500 draws has
/// a relative standard error of about 1/√(2(N − 1)) = 3.2 %, so 10 % is about three standard
/// errors (and the delta method's linearisation adds little at these noise levels).
#[test]
fn sigma_by_the_delta_method_matches_a_monte_carlo_of_the_base_case() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let request = set(&[("split:purge", 0.10)]);
    let names = [
        ("inert_fraction_reactor_inlet", "conv:Ar"),
        ("product_made", "NH3"),
        ("purge_flow", "purge"),
        ("reactant_lost_in_purge", "purge:H2"),
    ];
    let w0 = whatif::what_if(&plant, &analyse(&plant, values(&plant, &z, None)), &request).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    const DRAWS: usize = 500;
    let mut samples = vec![Vec::with_capacity(DRAWS); names.len()];
    for _ in 0..DRAWS {
        let a = analyse(&plant, values(&plant, &z, Some(&mut rng)));
        let w = whatif::what_if(&plant, &a, &request).unwrap();
        for (j, (n, s)) in names.iter().enumerate() {
            samples[j].push(figure(&w, 0, n, s).0);
        }
    }
    for (j, (n, s)) in names.iter().enumerate() {
        let x = &samples[j];
        let mean = x.iter().sum::<f64>() / DRAWS as f64;
        let sd = (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (DRAWS - 1) as f64).sqrt();
        let delta = figure(&w0, 0, n, s).1;
        eprintln!("{n} {s}: delta method σ {delta:.6e}, Monte Carlo {sd:.6e}, mean {mean:.6}");
        assert!(
            (delta / sd - 1.0).abs() < 0.10,
            "{n} {s}: delta method σ {delta} against Monte Carlo {sd}"
        );
    }
}

/// A sweep gives one point per value, ends included, continuing from point to point.
#[test]
fn a_sweep_gives_a_curve_with_sigma() {
    let (plant, a) = design();
    let request = Request {
        sweep: Some(Sweep::parse("split:purge=0.02..0.2:10").unwrap()),
        ..Request::default()
    };
    let w = whatif::what_if(&plant, &a, &request).unwrap();
    assert_eq!(w.points.len(), 10);
    let mut last_y = f64::INFINITY;
    for (k, p) in w.points.iter().enumerate() {
        let phi = p.settings["split:purge"];
        let (y, s) = figure(&w, k, "inert_fraction_reactor_inlet", "conv:Ar");
        close("y", y, hand(phi, 0.5, 375.0).5, 1e-8);
        assert!(y < last_y && s > 0.0);
        last_y = y;
    }
    close("last", w.points[9].settings["split:purge"], 0.2, 0.0);
}

/// A range of periods: each period's calibrated values combined by their covariance. A range
/// of one period is that period; over three noisy periods of one steady state the combined σ
/// is about 1/√3 of one period's, and it matches a Monte Carlo of the three periods' readings
/// (500 draws: the sample σ's relative standard error is 1/√(2 · 499) = 3.2 %, so 10 % is about
/// three standard errors).
#[test]
fn a_range_of_periods_combines_their_values_by_covariance() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let request = set(&[("split:purge", 0.10)]);
    let pick = |w: &WhatIf| figure(w, 0, "inert_fraction_reactor_inlet", "conv:Ar");

    let mut rng = ChaCha8Rng::seed_from_u64(31);
    let one = analyse(&plant, values(&plant, &z, Some(&mut rng)));
    let single = whatif::what_if(&plant, &one, &request).unwrap();
    let ranged = whatif::what_if_range(&plant, std::slice::from_ref(&one), &request).unwrap();
    close(
        "range of one: value",
        pick(&ranged).0,
        pick(&single).0,
        1e-12,
    );
    close("range of one: σ", pick(&ranged).1, pick(&single).1, 1e-9);
    assert_eq!(ranged.base.periods, Some(1));

    let exact = analyse(&plant, values(&plant, &z, None));
    let sigma_one = pick(&whatif::what_if(&plant, &exact, &request).unwrap()).1;
    let three: Vec<Analysis> = (0..3)
        .map(|_| analyse(&plant, values(&plant, &z, None)))
        .collect();
    let w = whatif::what_if_range(&plant, &three, &request).unwrap();
    assert_eq!(w.base.periods, Some(3));
    close(
        "σ over three periods",
        pick(&w).1,
        sigma_one / 3f64.sqrt(),
        1e-6,
    );

    const DRAWS: usize = 500;
    let mut x = Vec::with_capacity(DRAWS);
    for _ in 0..DRAWS {
        let periods: Vec<Analysis> = (0..3)
            .map(|_| analyse(&plant, values(&plant, &z, Some(&mut rng))))
            .collect();
        x.push(pick(&whatif::what_if_range(&plant, &periods, &request).unwrap()).0);
    }
    let mean = x.iter().sum::<f64>() / DRAWS as f64;
    let sd = (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (DRAWS - 1) as f64).sqrt();
    eprintln!(
        "range of 3: delta method σ {:.6e}, Monte Carlo {sd:.6e}",
        pick(&w).1
    );
    assert!(
        (pick(&w).1 / sd - 1.0).abs() < 0.10,
        "{} against {sd}",
        pick(&w).1
    );
}
