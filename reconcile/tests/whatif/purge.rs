//! The purge moved: no steady state when it closes, a target inlet fraction reached, the economic optimum.

use super::*;

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
