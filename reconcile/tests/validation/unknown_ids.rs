//! Unknown ids: components, units, streams named where they are not defined.

use super::*;

#[test]
fn unknown_component_in_a_stream() {
    let text = edit(&[(
        "components = [\"N2\", \"H2\", \"Ar\", \"H2O\"]",
        "components = [\"N2\", \"H2\", \"Ar\", \"Xe\"]",
    )]);
    // The makeup then carries no water, which is allowed: one problem.
    assert_only_problem(&text, "stream \"makeup\"", &["\"Xe\""]);
}

#[test]
fn unknown_unit_at_either_end_of_a_stream() {
    let text = edit(&[(
        "from = \"outside\"\nto = \"mix\"",
        "from = \"outside\"\nto = \"blender\"",
    )]);
    assert_only_problem(&text, "stream \"makeup\"", &["\"blender\""]);
    let text = edit(&[(
        "from = \"sep\"\nto = \"outside\"",
        "from = \"flash\"\nto = \"outside\"",
    )]);
    assert_only_problem(&text, "stream \"liquid\"", &["\"flash\""]);
}

#[test]
fn meter_on_an_unknown_stream() {
    let text = edit(&[(
        "stream = \"liquid\"\nquantity",
        "stream = \"liquor\"\nquantity",
    )]);
    assert_only_problem(&text, "meter \"FI-4\"", &["\"liquor\""]);
}

#[test]
fn meter_on_an_unknown_component() {
    let text = edit(&[("component = \"Ar\"", "component = \"Xe\"")]);
    assert_only_problem(&text, "meter \"AI-2\"", &["\"Xe\""]);
}

#[test]
fn reaction_on_an_unknown_unit() {
    let text = edit(&[("unit = \"conv\"", "unit = \"converter\"")]);
    assert_problem(&text, "reaction \"synth\"", &["\"converter\""]);
    // The converter is then left without a reaction, which is a problem of its own.
    assert_problem(&text, "unit \"conv\"", &["reaction"]);
}

#[test]
fn unknown_component_in_stoichiometry() {
    let text = edit(&[("NH3 = 2 }", "NH3 = 2, Kr = 1 }")]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"Kr\""]);
}

#[test]
fn unknown_key_component() {
    let text = edit(&[("key = \"N2\"", "key = \"N3\"")]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"N3\""]);
    // A key that is a product, not a reactant.
    let text = edit(&[("key = \"N2\"", "key = \"NH3\"")]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"NH3\"", "reactant"]);
}
