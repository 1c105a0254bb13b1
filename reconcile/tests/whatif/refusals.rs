//! Bad input refused, naming the item; a base case that cannot carry the what-if refused.

use super::*;

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
