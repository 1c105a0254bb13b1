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
