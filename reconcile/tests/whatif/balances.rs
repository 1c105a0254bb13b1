//! New steady states against the loop's mass balance solved by hand (the header of main.rs).

use super::*;

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
