//! What-if steady states from a reconciled base case (reconcile::whatif), against the loop's
//! mass balance solved by hand, finite differences and a Monte Carlo of the base case.
//!
//! The purge-design loop (tests/data/purge-design.toml; the case and its closed-form balance
//! are derived in reconcile/tests/purge_design.rs; numbers chosen for the tests, not from a
//! publication): fresh feed F = 375 mol/s with y_I = 0.008 argon and N2:H2 = 1:3, single-pass
//! conversion X = 0.5 of N2, all the ammonia removed, a share φ of the separator gas purged.
//! With f_N = (1 − y_I) F / 4 and f_I = y_I F (mol/s):
//!
//! - N2 at the reactor inlet n_N = f_N / (1 − (1 − φ)(1 − X)), H2 there 3 n_N;
//! - argon leaves only by the purge: n_I = f_I / φ (the steady-state inert balance: inert in
//!   with the feed = inert out with the purge);
//! - extent ξ = X n_N, ammonia made 2ξ; separator gas G = 4 n_N (1 − X) + n_I; purge φ G,
//!   recycle (1 − φ) G; argon at the reactor inlet y = n_I / (4 n_N + n_I).

use chrono::{TimeZone, Utc};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use reconcile::equations::Layout;
use reconcile::period::{MeterValue, PeriodInput};
use reconcile::simulate::{exact_values, steady_state};
use reconcile::whatif::{
    self, optimum::margin_at, BaseCase, Economics, InletLimit, PointStatus, Request, Sweep, WhatIf,
    WhatIfError,
};
use reconcile::{analyse_period, parse_plant, Analysis, Plant, ReportStatus};
use testkit::plants::{PURGE_DESIGN, VANTLE};
use testkit::purge_design::{DESIGN, MOL_S};

/// The design case's closed-form balance at purge φ, conversion X and feed F (mol/s):
/// (n_N, n_I, extent, purge, recycle, y).
fn hand(phi: f64, x: f64, feed: f64) -> (f64, f64, f64, f64, f64, f64) {
    let f_n = (1.0 - DESIGN.inert_fraction) * feed / 4.0;
    let f_i = DESIGN.inert_fraction * feed;
    let n_n = f_n / (1.0 - (1.0 - phi) * (1.0 - x));
    let n_i = f_i / phi;
    let gas = 4.0 * n_n * (1.0 - x) + n_i;
    (
        n_n,
        n_i,
        x * n_n,
        phi * gas,
        (1.0 - phi) * gas,
        n_i / (4.0 * n_n + n_i),
    )
}

fn values(plant: &Plant, z: &[f64], noise: Option<&mut ChaCha8Rng>) -> Vec<MeterValue> {
    let exact = exact_values(plant, z);
    let mut rng = noise;
    exact
        .into_iter()
        .enumerate()
        .map(|(meter, v)| {
            let sigma = plant.meters[meter].sigma_for(v).unwrap_or(0.0);
            let e: f64 = match rng.as_deref_mut() {
                Some(r) => StandardNormal.sample(r),
                None => 0.0,
            };
            MeterValue {
                meter,
                value: v + sigma * e,
                readings: 1,
                used_uncertain: false,
                spread: 0.0,
            }
        })
        .collect()
}

fn analyse(plant: &Plant, values: Vec<MeterValue>) -> Analysis {
    analyse_period(
        plant,
        &PeriodInput {
            start: Utc.with_ymd_and_hms(2026, 4, 1, 0, 0, 0).unwrap(),
            end: Utc.with_ymd_and_hms(2026, 4, 1, 1, 0, 0).unwrap(),
            values,
        },
    )
}

fn design() -> (Plant, Analysis) {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let a = analyse(&plant, values(&plant, &z, None));
    assert_eq!(a.report.status, ReportStatus::Solved);
    (plant, a)
}

fn set(pairs: &[(&str, f64)]) -> Request {
    Request {
        set: pairs.iter().map(|(n, v)| (n.to_string(), *v)).collect(),
        ..Request::default()
    }
}

fn figure(w: &WhatIf, point: usize, name: &str, subject: &str) -> (f64, f64) {
    let f = w.points[point]
        .figures
        .iter()
        .find(|f| f.name == name && f.subject == subject)
        .unwrap_or_else(|| panic!("no figure {name} of {subject}"));
    (f.value.unwrap(), f.sigma.unwrap())
}

fn flow(w: &WhatIf, point: usize, stream: &str) -> (f64, f64) {
    let s = w.points[point]
        .streams
        .iter()
        .find(|s| s.id == stream)
        .unwrap();
    (s.molar_flow.unwrap(), s.molar_flow_sigma.unwrap())
}

#[track_caller]
fn close(what: &str, got: f64, want: f64, rel: f64) {
    assert!(
        // A value that is zero up to rounding (an inert balance's σ) is compared absolutely.
        (got - want).abs() <= rel * want.abs() + 1e-12,
        "{what}: {got} against {want} (relative {:e}, allowed {rel:e})",
        (got - want).abs() / want.abs()
    );
}

/// (a) With nothing set, the what-if is the base case: its flows and their σ, stream by
/// stream, on a noisy base of the purge-design loop and of the Vantle Cross loop (two
/// separators held at their component splits).
#[test]
fn nothing_set_reproduces_the_base_case_flows_and_sigmas() {
    let cases = [
        (parse_plant(PURGE_DESIGN).unwrap(), None),
        (parse_plant(VANTLE).unwrap(), Some(())),
    ];
    for (plant, vantle) in cases {
        let z = match vantle {
            None => steady_state(&plant, &DESIGN.specs()).unwrap(),
            Some(()) => testkit::vantle_true_state(
                &plant,
                &Layout::new(&plant),
                &testkit::VantleConditions::default(),
            ),
        };
        let mut rng = ChaCha8Rng::seed_from_u64(13);
        let a = analyse(&plant, values(&plant, &z, Some(&mut rng)));
        assert_eq!(a.report.status, ReportStatus::Solved, "{}", plant.name);
        let w = whatif::what_if(&plant, &a, &Request::default()).unwrap();
        assert_eq!(w.points.len(), 1);
        assert_eq!(w.points[0].status, PointStatus::Solved);
        assert!(!w.holds.is_empty() && w.caution.contains("licensed engineering practice"));
        for base in &a.report.streams {
            let (f, s) = flow(&w, 0, &base.id);
            close(&base.id, f, base.molar_flow.unwrap(), 1e-9);
            // The held values are local coordinates of the balances' manifold, so the delta
            // method through them gives back the base covariance.
            close(
                &format!("σ of {}", base.id),
                s,
                base.molar_flow_sigma.unwrap(),
                1e-6,
            );
        }
        for base in &a.report.figures {
            if let (Some(v), Some(s)) = (base.value, base.sigma) {
                if let Some(f) = w.points[0]
                    .figures
                    .iter()
                    .find(|f| f.name == base.name && f.subject == base.subject)
                {
                    close(&base.name, f.value.unwrap(), v, 1e-8);
                    close(&format!("σ of {}", base.name), f.sigma.unwrap(), s, 1e-5);
                }
            }
        }
    }
}

/// (b) Moving the purge, the feed and the conversion from the reconciled design case against
/// the closed-form balance (the module header), each to 1e-8 relative (the base reconciles the
/// exact values to within 1e-9).
#[test]
fn new_steady_states_match_the_hand_balance() {
    let (plant, a) = design();
    for (request, phi, x, feed) in [
        (set(&[("split:purge", 0.20)]), 0.20, 0.5, 375.0),
        (set(&[("split:purge", 0.10)]), 0.10, 0.5, 375.0),
        (set(&[("split:purge", 0.02)]), 0.02, 0.5, 375.0),
        (set(&[("conversion:synthesis", 0.35)]), 0.05, 0.35, 375.0),
        (set(&[("feed:feed", 400.0 * MOL_S)]), 0.05, 0.5, 400.0),
    ] {
        let w = whatif::what_if(&plant, &a, &request).unwrap();
        let (n_n, n_i, extent, purge, recycle, y) = hand(phi, x, feed);
        let what = format!("{:?}", request.set);
        close(
            &format!("{what} purge"),
            flow(&w, 0, "purge").0,
            purge * MOL_S,
            1e-8,
        );
        close(
            &format!("{what} recycle"),
            flow(&w, 0, "recycle").0,
            recycle * MOL_S,
            1e-8,
        );
        close(
            &format!("{what} conv-in"),
            flow(&w, 0, "conv-in").0,
            (4.0 * n_n + n_i) * MOL_S,
            1e-8,
        );
        close(
            &format!("{what} y"),
            figure(&w, 0, "inert_fraction_reactor_inlet", "conv:Ar").0,
            y,
            1e-8,
        );
        close(
            &format!("{what} NH3"),
            figure(&w, 0, "product_made", "NH3").0,
            2.0 * extent * MOL_S,
            1e-8,
        );
        // Mass closes: the inert balance in closed form, argon in = argon out with the purge.
        let (ar_in, _) = figure(&w, 0, "inert_in", "Ar");
        let (ar_out, _) = figure(&w, 0, "inert_out", "Ar");
        close(&format!("{what} argon in = out"), ar_out, ar_in, 1e-10);
    }
}

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

/// (d) Purge closed with argon fed: argon has no other outlet (the product carries only
/// ammonia), so there is no steady state, and the reason names argon.
#[test]
fn purge_closed_with_an_inert_fed_has_no_steady_state_naming_the_inert() {
    let (plant, a) = design();
    let w = whatif::what_if(&plant, &a, &set(&[("split:purge", 0.0)])).unwrap();
    let p = &w.points[0];
    assert_eq!(p.status, PointStatus::NoSteadyState);
    let reason = p.reason.as_deref().unwrap();
    assert!(
        reason.contains("\"Ar\" accumulates") && reason.contains("split:purge at 0"),
        "{reason}"
    );
    assert!(p.figures.is_empty() && p.streams.is_empty());
    let json = serde_json::to_value(&w).unwrap();
    assert_eq!(json["points"][0]["status"], "no_steady_state");
}

/// (e) A target argon fraction at the reactor inlet, reached by moving the purge: the figure
/// is the target, and the purge split found satisfies the hand balance y(φ) = target.
#[test]
fn an_inlet_fraction_target_is_reached_by_moving_the_purge() {
    let (plant, a) = design();
    for target in [0.03, 0.05, 0.12] {
        let w = whatif::what_if(&plant, &a, &set(&[("inlet_fraction:conv:Ar", target)])).unwrap();
        assert_eq!(w.points[0].status, PointStatus::Solved);
        close(
            "y",
            figure(&w, 0, "inert_fraction_reactor_inlet", "conv:Ar").0,
            target,
            1e-9,
        );
        let (phi, sigma) = figure(&w, 0, "purge_fraction", "purge");
        close("y(φ) by hand", hand(phi, 0.5, 375.0).5, target, 1e-8);
        assert!(
            sigma > 0.0,
            "the split found carries the base case's uncertainty"
        );
        assert!(
            w.holds.iter().all(|h| !h.contains("purge")),
            "{:?}",
            w.holds
        );
    }
    // Argon can never exceed what a zero purge would leave...nor fall below the feed's 0.8 %:
    // a target below the fresh feed's fraction needs a purge above 1.
    let err = whatif::what_if(&plant, &a, &set(&[("inlet_fraction:conv:Ar", 0.001)])).unwrap_err();
    assert!(matches!(err, WhatIfError::Unreachable { .. }), "{err}");
    assert!(err.to_string().contains("inlet_fraction:conv:Ar"), "{err}");
}

/// (f) The economic optimum lies where the margin's derivative changes sign: both neighbours
/// at ± 10⁻³ give a smaller margin; and with an argon limit below the optimum's argon, the
/// optimum sits on the limit.
#[test]
fn the_optimum_purge_is_where_the_margin_stops_rising() {
    let (plant, a) = design();
    let base = BaseCase {
        estimates: vec![whatif::base_estimate(&a).unwrap()],
    };
    let economics = Economics {
        product_price: [("NH3".to_string(), 10.0)].into(),
        loss_value: [("N2".to_string(), 4.0), ("H2".to_string(), 1.0)].into(),
        recycle_cost: 0.6,
        inlet_limit: None,
        range: [0.005, 0.6],
    };
    let request = Request {
        economics: Some(economics.clone()),
        ..Request::default()
    };
    let w = whatif::what_if(&plant, &a, &request).unwrap();
    let opt = w.optimum.clone().unwrap();
    eprintln!(
        "optimum split:purge = {} margin {} ± {}",
        opt.value, opt.margin, opt.margin_sigma
    );
    assert!(opt.bound.is_none(), "{opt:?}");
    let m = |phi: f64| {
        margin_at(
            &plant,
            &base,
            &[],
            None,
            Default::default(),
            &economics,
            phi,
        )
        .unwrap()
    };
    let (left, mid, right) = (m(opt.value - 1e-3), m(opt.value), m(opt.value + 1e-3));
    assert!(
        mid > left && mid > right,
        "{left} {mid} {right} at {}",
        opt.value
    );
    close("margin", opt.margin, mid, 1e-9);
    assert!(opt.margin_sigma > 0.0 && opt.holds.iter().any(|h| h.contains("conversion")));

    // The hand balance's margin at the optimum (mol/s → kmol/h), as a check of the margin.
    let (_, _, extent, purge, recycle, _) = hand(opt.value, 0.5, 375.0);
    let (n_n, ..) = hand(opt.value, 0.5, 375.0);
    let gas_n2 = n_n * 0.5;
    let lost_n2 = opt.value * gas_n2;
    let lost_h2 = 3.0 * lost_n2;
    let by_hand = MOL_S * (10.0 * 2.0 * extent - 4.0 * lost_n2 - 1.0 * lost_h2 - 0.6 * recycle);
    close("margin by hand", opt.margin, by_hand, 1e-8);
    assert!(purge > 0.0);

    let y_at_opt = figure(
        &WhatIf {
            points: vec![opt.point.clone()],
            ..w.clone()
        },
        0,
        "inert_fraction_reactor_inlet",
        "conv:Ar",
    )
    .0;
    let limited = Economics {
        inlet_limit: Some(InletLimit {
            unit: "conv".into(),
            component: "Ar".into(),
            max: 0.5 * y_at_opt,
        }),
        ..economics
    };
    let w = whatif::what_if(
        &plant,
        &a,
        &Request {
            economics: Some(limited),
            ..Request::default()
        },
    )
    .unwrap();
    let opt = w.optimum.unwrap();
    assert!(
        opt.bound.as_deref().unwrap_or("").contains("limit"),
        "{opt:?}"
    );
    close(
        "y on the limit",
        hand(opt.value, 0.5, 375.0).5,
        0.5 * y_at_opt,
        1e-6,
    );
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

/// Bad input is refused, naming the item.
#[test]
fn bad_settings_are_refused_naming_the_item() {
    let (plant, a) = design();
    let cases: [(Request, &str); 8] = [
        (set(&[("split:vent", 0.1)]), "unknown stream \"vent\""),
        (
            set(&[("split:feed", 0.1)]),
            "\"feed\" is not an outlet of a splitter",
        ),
        (
            set(&[("split:purge", 1.5)]),
            "\"split:purge\": 1.5 is outside [0, 1]",
        ),
        (set(&[("feed:gas", 10.0)]), "\"gas\" is not a fresh feed"),
        (
            set(&[("conversion:cracking", 0.2)]),
            "unknown reaction \"cracking\"",
        ),
        (
            set(&[("inlet_fraction:conv:Xe", 0.1)]),
            "unknown component \"Xe\"",
        ),
        (
            set(&[("inlet_fraction:sep:Ar", 0.1)]),
            "\"sep\" is not a reactor",
        ),
        (set(&[("purge", 0.1)]), "\"purge\": not a setting name"),
    ];
    for (request, want) in cases {
        let err = whatif::what_if(&plant, &a, &request)
            .unwrap_err()
            .to_string();
        assert!(err.contains(want), "{err} should say {want}");
    }
    let err = Sweep::parse("split:purge=0..1:1001")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("1001 points") && err.contains("split:purge"),
        "{err}"
    );
    assert!(Sweep::parse("split:purge=0..1").is_err());
}

/// The purge-design model with the product stream also carrying argon (a share r of the
/// separator's argon leaves with the liquid), its meters kept.
fn with_argon_in_the_product() -> Plant {
    let model = PURGE_DESIGN.replace(
        "to = \"outside\"\ncomponents = [\"NH3\"]",
        "to = \"outside\"\ncomponents = [\"NH3\", \"Ar\"]",
    );
    parse_plant(&model).unwrap()
}

/// An inert that partly leaves with the liquid product needs a smaller purge. Hand balance (the module header, with a share r of the argon reaching
/// the separator leaving in the product): argon at the reactor inlet n_I satisfies
/// n_I = f_I + (1 − φ)(1 − r) n_I, so n_I = f_I / (1 − (1 − φ)(1 − r)), below f_I / φ. With
/// the purge closed the argon would all leave with the product, but N2 and H2, fed in exact
/// proportion, could leave only by reaction: nothing fixes how much circulates, and the
/// what-if says so.
#[test]
fn an_inert_leaving_partly_with_the_product_needs_a_smaller_purge() {
    let plant = with_argon_in_the_product();
    let r = 0.25;
    let mut specs = DESIGN.specs();
    specs.push(reconcile::simulate::Spec::Recovery {
        stream: "product".into(),
        component: "Ar".into(),
        value: r,
    });
    let z = steady_state(&plant, &specs).unwrap();
    let a = analyse(&plant, values(&plant, &z, None));
    assert!(matches!(
        a.report.status,
        ReportStatus::Solved | ReportStatus::Unobservable
    ));
    let w = whatif::what_if(&plant, &a, &set(&[("split:purge", 0.0)])).unwrap();
    // The base case's argon split at the separator is held.
    assert!(
        w.holds
            .iter()
            .any(|h| h.contains("split of \"Ar\" to stream \"product\"")),
        "{:?}",
        w.holds
    );
    assert_eq!(w.points[0].status, PointStatus::NoSteadyState);
    let reason = w.points[0].reason.as_deref().unwrap();
    assert!(
        reason.contains("stoichiometric proportion") && !reason.contains("\"Ar\""),
        "{reason}"
    );
    let f_i = DESIGN.inert_fraction * DESIGN.feed * MOL_S;
    for phi in [0.01, 0.02, 0.05] {
        let w = whatif::what_if(&plant, &a, &set(&[("split:purge", phi)])).unwrap();
        let n_i = f_i / (1.0 - (1.0 - phi) * (1.0 - r));
        let got = w.points[0]
            .streams
            .iter()
            .find(|s| s.id == "conv-in")
            .unwrap()
            .component_flows["Ar"]
            .unwrap();
        close(&format!("argon at the inlet, φ = {phi}"), got, n_i, 1e-8);
        assert!(got < f_i / phi, "less argon than with none in the product");
        let (ar_in, _) = figure(&w, 0, "inert_in", "Ar");
        let (ar_out, _) = figure(&w, 0, "inert_out", "Ar");
        close("argon in = out (purge and product)", ar_out, ar_in, 1e-10);
    }
}

/// A reactant fed beyond stoichiometry behaves like an inert: with hydrogen fed 5 % above
/// N2:H2 = 1:3 and the purge closed, the hydrogen has no way out, and the reason says it is
/// fed beyond what the nitrogen can take.
#[test]
fn a_reactant_fed_beyond_stoichiometry_needs_the_purge() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let mut specs = DESIGN.specs();
    for s in specs.iter_mut() {
        if let reconcile::simulate::Spec::ComponentFlow {
            component, value, ..
        } = s
        {
            if component == "H2" {
                *value *= 1.05;
            }
        }
    }
    let z = steady_state(&plant, &specs).unwrap();
    let a = analyse(&plant, values(&plant, &z, None));
    // Argon out of the way (set its feed to zero is not a setting): the reason names both.
    let w = whatif::what_if(&plant, &a, &set(&[("split:purge", 0.0)])).unwrap();
    let reason = w.points[0].reason.as_deref().unwrap();
    assert!(
        reason.contains("\"H2\" accumulates") && reason.contains("beyond"),
        "{reason}"
    );
    assert!(reason.contains("\"Ar\" accumulates"), "{reason}");
    // With the purge open the excess hydrogen leaves by it: in − consumed = purged.
    let w = whatif::what_if(&plant, &a, &set(&[("split:purge", 0.03)])).unwrap();
    let feed_h2 = w.points[0]
        .streams
        .iter()
        .find(|s| s.id == "feed")
        .unwrap()
        .component_flows["H2"]
        .unwrap();
    let feed_n2 = w.points[0]
        .streams
        .iter()
        .find(|s| s.id == "feed")
        .unwrap()
        .component_flows["N2"]
        .unwrap();
    let purged_h2 = figure(&w, 0, "reactant_lost_in_purge", "purge:H2").0;
    let purged_n2 = figure(&w, 0, "reactant_lost_in_purge", "purge:N2").0;
    // ξ = f_N − purged N2; H2 consumed 3ξ.
    close(
        "H2 balance",
        feed_h2 - 3.0 * (feed_n2 - purged_n2),
        purged_h2,
        1e-8,
    );
}

/// Mass closes at every point of a sweep on the Vantle Cross loop (two reactions, two
/// separators held at their component splits): every balance of the model to 1e-9 of the
/// largest flow, and the total mass in equals the mass out.
#[test]
fn mass_closes_at_every_point_of_a_sweep_on_the_vantle_loop() {
    let plant = parse_plant(VANTLE).unwrap();
    let layout = Layout::new(&plant);
    let z = testkit::vantle_true_state(&plant, &layout, &testkit::VantleConditions::default());
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let a = analyse(&plant, values(&plant, &z, Some(&mut rng)));
    let request = Request {
        sweep: Some(Sweep::parse("split:purge=0.01..0.12:12").unwrap()),
        ..Request::default()
    };
    let w = whatif::what_if(&plant, &a, &request).unwrap();
    for p in &w.points {
        assert_eq!(p.status, PointStatus::Solved, "{:?}", p.reason);
        let mass = |to_outside: bool| -> f64 {
            p.streams
                .iter()
                .filter(|s| {
                    if to_outside {
                        s.to == "outside"
                    } else {
                        s.from == "outside"
                    }
                })
                .map(|s| s.mass_flow.unwrap())
                .sum()
        };
        close("mass in = out", mass(true), mass(false), 1e-10);
        for f in p
            .figures
            .iter()
            .filter(|f| f.name == "single_pass_conversion")
        {
            let base = a
                .report
                .figures
                .iter()
                .find(|b| b.name == f.name && b.subject == f.subject)
                .unwrap();
            close(
                "conversion held",
                f.value.unwrap(),
                base.value.unwrap(),
                1e-9,
            );
        }
    }
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

/// Properties: the what-if at the base case's own settings (the purge, the feed and the
/// conversion set to their reconciled values) returns the base case; held at its extent, the
/// reaction makes the same ammonia whatever the purge (2ξ), and the purge then moves only the
/// circulation.
#[test]
fn the_base_case_settings_give_the_base_case_and_a_held_extent_holds_the_production() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(99);
    let a = analyse(&plant, values(&plant, &z, Some(&mut rng)));
    let base_fig = |name: &str, subject: &str| {
        a.report
            .figures
            .iter()
            .find(|f| f.name == name && f.subject == subject)
            .unwrap()
            .value
            .unwrap()
    };
    let feed = a
        .report
        .streams
        .iter()
        .find(|s| s.id == "feed")
        .unwrap()
        .molar_flow
        .unwrap();
    let w = whatif::what_if(
        &plant,
        &a,
        &set(&[
            ("split:purge", base_fig("purge_fraction", "purge")),
            ("feed:feed", feed),
            (
                "conversion:synthesis",
                base_fig("single_pass_conversion", "synthesis"),
            ),
        ]),
    )
    .unwrap();
    // Only the feed's composition is still the base case's.
    assert_eq!(
        w.holds,
        vec!["composition of fresh feed \"feed\"".to_string()]
    );
    for s in &a.report.streams {
        close(&s.id, flow(&w, 0, &s.id).0, s.molar_flow.unwrap(), 1e-9);
    }
    assert!(
        flow(&w, 0, "feed").1 < 1e-9,
        "the feed's flow was set: no σ"
    );

    let held = |phi: f64| {
        let request = Request {
            hold: whatif::ReactionHold::Extent,
            ..set(&[("split:purge", phi)])
        };
        whatif::what_if(&plant, &a, &request).unwrap()
    };
    let (w1, w2) = (held(0.04), held(0.08));
    assert!(
        w1.holds
            .iter()
            .any(|h| h.starts_with("extent of reaction \"synthesis\"")),
        "{:?}",
        w1.holds
    );
    let made = |w: &WhatIf| figure(w, 0, "product_made", "NH3").0;
    close("NH3 at a held extent", made(&w1), made(&w2), 1e-10);
    close(
        "NH3 = 2ξ of the base",
        made(&w1),
        2.0 * a.report.extents[0].value.unwrap(),
        1e-9,
    );
    let conversion = |w: &WhatIf| figure(w, 0, "single_pass_conversion", "synthesis").0;
    assert!(conversion(&w1) != conversion(&w2));
}

/// A negative feed, a NaN and a sweep of zero points are refused naming the setting.
#[test]
fn impossible_values_are_refused_naming_the_setting() {
    let (plant, a) = design();
    for (request, want) in [
        (
            set(&[("feed:feed", -5.0)]),
            "\"feed:feed\": -5 is outside ≥ 0",
        ),
        (
            set(&[("conversion:synthesis", f64::NAN)]),
            "\"conversion:synthesis\": the value must be a finite number",
        ),
        (
            set(&[("split:purge", 0.1), ("split:purge", 0.2)]),
            "\"split:purge\" is given twice",
        ),
        (
            set(&[("split:recycle", 0.7), ("split:purge", 0.4)]),
            "sum to 1.1",
        ),
    ] {
        let err = whatif::what_if(&plant, &a, &request)
            .unwrap_err()
            .to_string();
        assert!(err.contains(want), "{err} should say {want}");
    }
    assert!(Sweep::parse("split:purge=0..1:0")
        .unwrap_err()
        .to_string()
        .contains("at least one point"));
    let values = Sweep::parse("split:purge=0.1..0.3:3").unwrap().values();
    assert_eq!(values, vec![0.1, 0.2, 0.3]);
}

/// A base that leaves unobservable what the what-if needs makes it refuse, naming the
/// quantity: without the flow meters on the feed, the product, the converter inlet and the
/// recycle, the analysers still fix the feed and the extent by the balances, but nothing fixes
/// how much circulates, so the single-pass conversion is unknown.
#[test]
fn an_unobservable_base_is_refused_naming_the_quantity() {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let dropped = ["FI-1", "FI-2", "FI-3", "FI-5"];
    let kept: Vec<MeterValue> = values(&plant, &z, None)
        .into_iter()
        .filter(|v| !dropped.contains(&plant.meters[v.meter].tag.as_str()))
        .collect();
    let a = analyse(&plant, kept);
    assert_eq!(a.report.status, ReportStatus::Unobservable);
    let err = whatif::what_if(&plant, &a, &set(&[("split:purge", 0.1)])).unwrap_err();
    assert!(matches!(err, WhatIfError::Unobservable(_)), "{err}");
    assert!(
        err.to_string()
            .contains("single-pass conversion of reaction \"synthesis\" unobservable"),
        "{err}"
    );
}

/// The methanol-from-CO2 recycle-and-purge example of Felder & Rousseau, *Elementary
/// Principles of Chemical Processes*, 3rd ed., chapter 4 (the statement from memory, not
/// checked against the book; the flows below are derived here by hand from it, not copied
/// from the book's solution): CO2 + 3 H2 → CH3OH + H2O; fresh feed of H2 and CO2 with 0.400
/// mol % inerts; the reactor feed 28.0 % CO2, 70.0 % H2, 2.00 % inerts; 60.0 % single-pass
/// conversion of H2; the condenser removes all the methanol and water and nothing else; a
/// purge off the recycle; 155 kmol/h of methanol.
///
/// By hand, per 100 mol of reactor feed: 42 mol H2 react, ξ = 14, so 14 mol of methanol; the
/// gas leaving the condenser is 14 CO2, 28 H2, 2 I (44 mol). With R mol recycled and F fresh,
/// F + R = 100 and the inert balance at the mixer 0.004 F + (2/44) R = 2 give
/// R = 1.6 / (1/22 − 0.004) = 38.597, F = 61.403, purge 44 − R = 5.403 (a split of
/// 5.403/44 = 0.1228). CO2 fresh = 28 − (14/44) R = 15.719 (25.60 %), H2 fresh = 70 −
/// (28/44) R = 45.438 (74.00 %). Scaled by 155/14: fresh feed 679.8 kmol/h, reactor feed
/// 1107.1, recycle 427.3, purge 59.82 kmol/h.
///
/// The what-if reaches this from a base case at another purge (0.25) and another feed by
/// setting the fresh feed (its composition as reconciled) and the 2 % inert target.
#[test]
fn the_felder_rousseau_methanol_purge_is_reproduced_by_a_target() {
    const MODEL: &str = r#"
name = "methanol-from-co2"
[[component]]
id = "CO2"
molar_mass = 44.009
[[component]]
id = "H2"
molar_mass = 2.016
[[component]]
id = "CH3OH"
molar_mass = 32.042
[[component]]
id = "H2O"
molar_mass = 18.015
[[component]]
id = "I"
molar_mass = 28.014
inert = true
[[unit]]
id = "mix"
kind = "mixer"
[[unit]]
id = "reactor"
kind = "reactor"
[[unit]]
id = "condenser"
kind = "separator"
[[unit]]
id = "split"
kind = "splitter"
[[reaction]]
id = "methanol"
unit = "reactor"
stoichiometry = { CO2 = -1, H2 = -3, CH3OH = 1, H2O = 1 }
key = "H2"
[[stream]]
id = "fresh"
from = "outside"
to = "mix"
components = ["CO2", "H2", "I"]
[[stream]]
id = "reactor-feed"
from = "mix"
to = "reactor"
components = ["CO2", "H2", "I"]
[[stream]]
id = "effluent"
from = "reactor"
to = "condenser"
[[stream]]
id = "liquid"
from = "condenser"
to = "outside"
components = ["CH3OH", "H2O"]
[[stream]]
id = "gas"
from = "condenser"
to = "split"
components = ["CO2", "H2", "I"]
[[stream]]
id = "purge"
from = "split"
to = "outside"
components = ["CO2", "H2", "I"]
[[stream]]
id = "recycle"
from = "split"
to = "mix"
components = ["CO2", "H2", "I"]
[[meter]]
tag = "F-1"
stream = "fresh"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 5.0
[[meter]]
tag = "A-1"
stream = "fresh"
quantity = "mole_fraction"
component = "I"
uom = "%"
sigma = 0.01
[[meter]]
tag = "A-2"
stream = "fresh"
quantity = "mole_fraction"
component = "CO2"
uom = "%"
sigma = 0.2
[[meter]]
tag = "F-2"
stream = "reactor-feed"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 10.0
[[meter]]
tag = "F-3"
stream = "liquid"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 3.0
[[meter]]
tag = "F-4"
stream = "purge"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "A-4"
stream = "purge"
quantity = "mole_fraction"
component = "I"
uom = "%"
sigma = 0.05
"#;
    use reconcile::simulate::Spec;
    let plant = parse_plant(MODEL).unwrap();
    let fresh = |total: f64| {
        [("CO2", 0.256), ("H2", 0.740), ("I", 0.004)].map(|(c, x)| Spec::ComponentFlow {
            stream: "fresh".into(),
            component: c.into(),
            value: x * total,
        })
    };
    let mut specs: Vec<Spec> = fresh(600.0).to_vec();
    specs.push(Spec::Conversion {
        reaction: "methanol".into(),
        value: 0.6,
    });
    specs.push(Spec::SplitFraction {
        stream: "purge".into(),
        value: 0.25,
    });
    let z = steady_state(&plant, &specs).unwrap();
    let a = analyse(&plant, values(&plant, &z, None));
    assert_eq!(
        a.report.status,
        ReportStatus::Solved,
        "{:?}",
        a.report.unobservable
    );

    let scale = 155.0 / 14.0;
    let r = 1.6 / (1.0 / 22.0 - 0.004);
    let request = set(&[
        ("feed:fresh", (100.0 - r) * scale),
        ("inlet_fraction:reactor:I", 0.02),
    ]);
    let w = whatif::what_if(&plant, &a, &request).unwrap();
    assert_eq!(w.points[0].status, PointStatus::Solved);
    close(
        "methanol",
        figure(&w, 0, "product_made", "CH3OH").0,
        155.0,
        1e-8,
    );
    close(
        "fresh feed",
        flow(&w, 0, "fresh").0,
        (100.0 - r) * scale,
        1e-9,
    );
    close(
        "reactor feed",
        flow(&w, 0, "reactor-feed").0,
        100.0 * scale,
        1e-8,
    );
    close("recycle", flow(&w, 0, "recycle").0, r * scale, 1e-8);
    close("purge", flow(&w, 0, "purge").0, (44.0 - r) * scale, 1e-8);
    close(
        "purge split",
        figure(&w, 0, "purge_fraction", "purge").0,
        (44.0 - r) / 44.0,
        1e-8,
    );
    let inlet = w.points[0]
        .streams
        .iter()
        .find(|s| s.id == "reactor-feed")
        .unwrap();
    close(
        "CO2 at the reactor inlet",
        inlet.composition["CO2"].unwrap(),
        0.28,
        1e-8,
    );
    close(
        "H2 at the reactor inlet",
        inlet.composition["H2"].unwrap(),
        0.70,
        1e-8,
    );
    // The hand figures as rounded in the header (the book's own printed flows are not quoted:
    // they were not at hand to check).
    assert!(
        (flow(&w, 0, "fresh").0 - 679.8).abs() < 0.1 && (flow(&w, 0, "purge").0 - 59.8).abs() < 0.1
    );
}
