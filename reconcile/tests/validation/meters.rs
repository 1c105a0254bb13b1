//! Meters: components, sigma rules, ranges, units of measure.

use super::*;

#[test]
fn meter_on_a_component_its_stream_does_not_carry() {
    // Argon does not leave with the liquid.
    let text = edit(&[(
        "stream = \"purge\"\nquantity = \"mole_fraction\"",
        "stream = \"liquid\"\nquantity = \"mole_fraction\"",
    )]);
    assert_only_problem(&text, "meter \"AI-2\"", &["\"Ar\"", "\"liquid\""]);
    // Nor may a basis hold a component the stream lacks (no NH3 in the makeup).
    let text = edit(&[(
        "basis = [\"N2\", \"H2\", \"Ar\"]",
        "basis = [\"N2\", \"H2\", \"NH3\"]",
    )]);
    assert_only_problem(&text, "meter \"AI-3\"", &["\"NH3\"", "\"makeup\""]);
}

#[test]
fn meter_component_rules() {
    // A component quantity without component.
    let text = edit(&[("component = \"Ar\"\n", "")]);
    assert_only_problem(&text, "meter \"AI-2\"", &["mole_fraction", "no component"]);
    // A whole-stream quantity with a component.
    let text = edit(&[(
        "quantity = \"mass_flow\"\n",
        "quantity = \"mass_flow\"\ncomponent = \"NH3\"\n",
    )]);
    assert_only_problem(&text, "meter \"FI-4\"", &["\"NH3\"", "mass_flow"]);
    // A basis that leaves out the measured component, and a basis on a mass fraction.
    let text = edit(&[(
        "basis = [\"N2\", \"H2\", \"Ar\"]",
        "basis = [\"H2\", \"Ar\"]",
    )]);
    assert_only_problem(&text, "meter \"AI-3\"", &["basis"]);
    let text = edit(&[(
        "quantity = \"mole_fraction\"\ncomponent = \"N2\"",
        "quantity = \"mass_fraction\"\ncomponent = \"N2\"",
    )]);
    assert_only_problem(&text, "meter \"AI-3\"", &["basis", "mole_fraction"]);
    let text = edit(&[(
        "basis = [\"N2\", \"H2\", \"Ar\"]",
        "basis = [\"N2\", \"H2\", \"Ne\"]",
    )]);
    assert_only_problem(&text, "meter \"AI-3\"", &["\"Ne\""]);
}

#[test]
fn non_positive_sigma() {
    for bad in ["0.0", "-2.0", "-0.0"] {
        let text = edit(&[("sigma = 2.0", &format!("sigma = {bad}"))]);
        assert_only_problem(&text, "meter \"FI-1\"", &["sigma"]);
    }
    let text = edit(&[("sigma_pct = 1.0", "sigma_pct = 0")]);
    assert_only_problem(&text, "meter \"FI-4\"", &["sigma_pct"]);
    let text = edit(&[("sigma_pct_span = 1.0", "sigma_pct_span = -1")]);
    assert_only_problem(&text, "meter \"AI-3\"", &["sigma_pct_span"]);
}

#[test]
fn exactly_one_sigma_rule() {
    let text = edit(&[("sigma = 2.0\n", "")]);
    assert_only_problem(&text, "meter \"FI-1\"", &["exactly one"]);
    let text = edit(&[("sigma = 2.0\n", "sigma = 2.0\nsigma_pct = 1.0\n")]);
    assert_only_problem(&text, "meter \"FI-1\"", &["exactly one"]);
}

#[test]
fn sigma_pct_span_without_range() {
    let text = edit(&[("range = [0.0, 100.0]\n", "")]);
    assert_only_problem(&text, "meter \"AI-3\"", &["sigma_pct_span", "range"]);
}

#[test]
fn range_must_be_ordered() {
    let text = edit(&[("range = [0.0, 100.0]", "range = [100.0, 0.0]")]);
    assert_only_problem(&text, "meter \"AI-3\"", &["range"]);
    let text = edit(&[("range = [0.0, 100.0]", "range = [5.0, 5.0]")]);
    assert_only_problem(&text, "meter \"AI-3\"", &["range"]);
}

#[test]
fn uom_that_does_not_fit_the_quantity() {
    let text = edit(&[("uom = \"kmol/h\"", "uom = \"kg/h\"")]);
    assert_only_problem(&text, "meter \"FI-1\"", &["\"kg/h\"", "molar_flow"]);
    let text = edit(&[("uom = \"t/h\"", "uom = \"Nm3/h\"")]);
    assert_only_problem(&text, "meter \"FI-4\"", &["\"Nm3/h\"", "mass_flow"]);
    // Spelled otherwise than docs/model.md lists.
    for bad in ["kmol/hr", "Kmol/h", "", "mol%"] {
        let text = edit(&[("uom = \"kmol/h\"", &format!("uom = \"{bad}\""))]);
        assert_only_problem(&text, "meter \"FI-1\"", &[&format!("\"{bad}\"")]);
    }
}

#[test]
fn customary_units_that_do_not_fit_the_quantity() {
    // vol % (and ppmv, mol %) are mole fractions: refused on a mass fraction, naming the
    // meter and listing the units a mass fraction accepts.
    for unit in ["vol %", "ppmv", "mol %"] {
        let text = edit(&[(
            "quantity = \"mole_fraction\"\ncomponent = \"Ar\"\nuom = \"%\"",
            &format!("quantity = \"mass_fraction\"\ncomponent = \"Ar\"\nuom = \"{unit}\""),
        )]);
        assert_only_problem(
            &text,
            "meter \"AI-2\"",
            &[
                &format!("\"{unit}\""),
                "does not fit mass_fraction",
                "use one of \"fraction\", \"%\", \"ppm\"",
                "; mol %, vol % and ppmv measure mole fractions only",
            ],
        );
    }
    // lb/h is a mass flow: refused on a molar flow, listing the molar flow's units.
    let text = edit(&[("uom = \"kmol/h\"", "uom = \"lb/h\"")]);
    assert_only_problem(
        &text,
        "meter \"FI-1\"",
        &[
            "\"lb/h\"",
            "does not fit molar_flow",
            "use one of \"kmol/h\", \"mol/s\", \"kmol/s\", \"lbmol/h\"",
        ],
    );
    // MMSCFD is a standard volume flow, not a mass flow.
    let text = edit(&[("uom = \"t/h\"", "uom = \"MMSCFD\"")]);
    assert_only_problem(
        &text,
        "meter \"FI-4\"",
        &[
            "\"MMSCFD\"",
            "mass_flow",
            "\"kg/h\", \"t/h\", \"t/d\", \"kg/s\", \"lb/h\", \"klb/h\"",
        ],
    );
}

#[test]
fn customary_units_are_accepted_where_they_fit() {
    let text = edit(&[
        ("uom = \"kmol/h\"", "uom = \"lbmol/h\""),
        (
            "component = \"Ar\"\nuom = \"%\"",
            "component = \"Ar\"\nuom = \"mol %\"",
        ),
        (
            "basis = [\"N2\", \"H2\", \"Ar\"]\nuom = \"%\"",
            "basis = [\"N2\", \"H2\", \"Ar\"]\nuom = \"vol %\"",
        ),
        ("uom = \"t/h\"", "uom = \"klb/h\""),
    ]);
    let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{e}"));
    let uoms: Vec<&str> = plant.meters.iter().map(|m| m.uom.as_str()).collect();
    assert_eq!(uoms, ["lbmol/h", "mol %", "vol %", "klb/h"]);
    // The model keeps the unit as written, space and all.
    assert_eq!(plant.spec.meters[1].uom, "mol %");
}

#[test]
fn a_unit_spelled_otherwise_is_refused_with_its_spelling() {
    // Units are spelled exactly (docs/model.md): `mol%` is not `mol %`, and the message says
    // which unit was meant.
    let text = edit(&[(
        "component = \"Ar\"\nuom = \"%\"",
        "component = \"Ar\"\nuom = \"mol%\"",
    )]);
    assert_only_problem(
        &text,
        "meter \"AI-2\"",
        &[
            "\"mol%\" is not one of",
            "\"fraction\", \"%\", \"ppm\", \"mol %\", \"vol %\", \"ppmv\"",
            "did you mean \"mol %\"",
        ],
    );
    let text = edit(&[("uom = \"kmol/h\"", "uom = \"LBMOL/H\"")]);
    assert_only_problem(&text, "meter \"FI-1\"", &["did you mean \"lbmol/h\""]);
}
