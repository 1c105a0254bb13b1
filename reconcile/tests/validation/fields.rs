//! Ids, period, alpha and fields: duplicates, empty and reserved ids, bad periods (absurdly
//! long ones too), alpha out of range, unknown fields, kinds and quantities.

use super::*;

#[test]
fn duplicate_ids() {
    let text = edit(&[("[[component]]\nid = \"H2O\"\nmolar_mass = 18.015\n", "[[component]]\nid = \"H2O\"\nmolar_mass = 18.015\n[[component]]\nid = \"H2O\"\nmolar_mass = 18.015\n")]);
    assert_only_problem(&text, "component \"H2O\"", &["more than once"]);
    let text = format!("{BASE}\n[[stream]]\nid = \"purge\"\nfrom = \"split\"\nto = \"outside\"\n");
    assert_only_problem(&text, "stream \"purge\"", &["more than once"]);
    let text = format!("{BASE}\n[[meter]]\ntag = \"FI-1\"\nstream = \"feed\"\nquantity = \"molar_flow\"\nuom = \"kmol/h\"\nsigma = 5.0\n");
    assert_only_problem(&text, "meter \"FI-1\"", &["more than once"]);
    let text = format!("{BASE}\n[[reaction]]\nid = \"synth\"\nunit = \"conv\"\nstoichiometry = {{ N2 = -1, H2 = -3, NH3 = 2 }}\n");
    assert_only_problem(&text, "reaction \"synth\"", &["more than once"]);
    let text = format!("{BASE}\n[[unit]]\nid = \"sep\"\nkind = \"separator\"\n");
    assert_problem(&text, "unit \"sep\"", &["more than once"]);
}

#[test]
fn empty_ids_and_reserved_unit_id() {
    let text = edit(&[("id = \"mix\"\nkind", "id = \"\"\nkind")]);
    assert_problem(&text, "unit #1", &["empty id"]);
    let text = format!("{BASE}\n[[unit]]\nid = \"outside\"\nkind = \"node\"\n");
    assert_problem(&text, "unit \"outside\"", &["reserved"]);
    let text = edit(&[("name = \"gull-rock\"", "name = \"  \"")]);
    assert_only_problem(&text, "model", &["name"]);
}

#[test]
fn stream_component_list_rules() {
    let text = edit(&[("components = [\"NH3\", \"H2O\"]", "components = []")]);
    assert_problem(&text, "stream \"liquid\"", &["no components"]);
    let text = edit(&[(
        "components = [\"NH3\", \"H2O\"]",
        "components = [\"NH3\", \"H2O\", \"NH3\"]",
    )]);
    assert_only_problem(&text, "stream \"liquid\"", &["\"NH3\"", "twice"]);
}

#[test]
fn bad_period_strings() {
    for bad in [
        "1 hour",
        "7m",
        "0h",
        "",
        "h",
        "-1h",
        "1.5h",
        "60",
        "1w",
        "25h",
        "99999999999999999999h",
    ] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{bad}\""))]);
        assert_only_problem(&text, "model", &["period", &format!("\"{bad}\"")]);
    }
}

#[test]
fn alpha_out_of_range() {
    for bad in ["0.0", "0.5", "1.0", "-0.05", "2"] {
        let text = edit(&[("alpha = 0.05", &format!("alpha = {bad}"))]);
        assert_only_problem(&text, "model", &["alpha"]);
    }
    for good in ["0.01", "0.1", "0.499"] {
        let text = edit(&[("alpha = 0.05", &format!("alpha = {good}"))]);
        assert!(parse_plant(&text).is_ok(), "alpha {good}");
    }
}

#[test]
fn unknown_fields_are_refused() {
    assert_syntax(&format!("colour = \"red\"\n{BASE}"), "colour");
    assert_syntax(
        &edit(&[("molar_mass = 39.95\n", "molar_mass = 39.95\ncharge = 0\n")]),
        "charge",
    );
    assert_syntax(
        &edit(&[("kind = \"mixer\"", "kind = \"mixer\"\nvolume = 3.0")]),
        "volume",
    );
    assert_syntax(
        &edit(&[("key = \"N2\"", "key = \"N2\"\nrate = 1.0")]),
        "rate",
    );
    assert_syntax(
        &edit(&[("to = \"conv\"", "to = \"conv\"\npressure = 150.0")]),
        "pressure",
    );
    assert_syntax(&edit(&[("sigma = 2.0", "sigmaa = 2.0")]), "sigmaa");
    // The TOML message points at the line.
    assert_syntax(&edit(&[("sigma = 2.0", "sigmaa = 2.0")]), "line");
    // And the same in JSON.
    let json = r#"{"name": "x", "component": [{"id": "A", "molar_mass": 1.0, "mass": 2.0}]}"#;
    assert_syntax(json, "mass");
    assert_syntax(r#"{"name": "x", "flavour": 1}"#, "flavour");
}

#[test]
fn unknown_kind_and_quantity_are_refused() {
    assert_syntax(
        &edit(&[("kind = \"mixer\"", "kind = \"blender\"")]),
        "blender",
    );
    assert_syntax(
        &edit(&[("quantity = \"molar_flow\"", "quantity = \"volume_flow\"")]),
        "volume_flow",
    );
}

#[test]
fn absurdly_long_periods_are_refused() {
    // 106 751 991 167 300 days fit an i64 of seconds but lie far beyond any calendar date;
    // a plant with such a period could not even name the end of its first period.
    for bad in ["106751991167300d", "1000000000h", "400d"] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{bad}\""))]);
        assert_only_problem(&text, "model", &["period", &format!("\"{bad}\"")]);
    }
}
