//! Topology: dangling streams, units without inlet or outlet, splitters, reactors and their
//! reactions.

use super::*;

#[test]
fn dangling_stream_from_outside_to_outside() {
    let text =
        format!("{BASE}\n[[stream]]\nid = \"bypass\"\nfrom = \"outside\"\nto = \"outside\"\n");
    assert_only_problem(&text, "stream \"bypass\"", &["outside"]);
}

#[test]
fn stream_that_leaves_and_enters_the_same_unit() {
    let text = format!("{BASE}\n[[stream]]\nid = \"loopback\"\nfrom = \"sep\"\nto = \"sep\"\n");
    assert_only_problem(&text, "stream \"loopback\"", &["\"sep\""]);
}

#[test]
fn unit_without_inlet_or_outlet() {
    let text = format!("{BASE}\n[[unit]]\nid = \"drum\"\nkind = \"node\"\n[[stream]]\nid = \"drain\"\nfrom = \"drum\"\nto = \"outside\"\n");
    assert_only_problem(&text, "unit \"drum\"", &["inlet"]);
    let text = format!("{BASE}\n[[unit]]\nid = \"sump\"\nkind = \"node\"\n[[stream]]\nid = \"fill\"\nfrom = \"outside\"\nto = \"sump\"\n");
    assert_only_problem(&text, "unit \"sump\"", &["outlet"]);
    // A unit no stream touches has both problems.
    let text = format!("{BASE}\n[[unit]]\nid = \"orphan\"\nkind = \"mixer\"\n");
    let problems = problems_of(&text);
    assert_eq!(problems.len(), 2, "{problems:#?}");
    assert!(
        problems.iter().all(|p| p.item == "unit \"orphan\""),
        "{problems:#?}"
    );
    assert!(problems.iter().any(|p| p.message.contains("inlet")));
    assert!(problems.iter().any(|p| p.message.contains("outlet")));
}

#[test]
fn splitter_with_fewer_than_two_outlets() {
    // The recycle now leaves the separator: the splitter keeps one outlet.
    let text = edit(&[(
        "from = \"split\"\nto = \"mix\"",
        "from = \"sep\"\nto = \"mix\"",
    )]);
    assert_only_problem(&text, "unit \"split\"", &["splitter", "1 outlet"]);
}

#[test]
fn splitter_with_two_inlets() {
    let text = format!("{BASE}\n[[stream]]\nid = \"spill\"\nfrom = \"outside\"\nto = \"split\"\n");
    assert_only_problem(&text, "unit \"split\"", &["splitter", "inlet"]);
}

#[test]
fn splitter_outlet_with_other_components() {
    let text = edit(&[(
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\n",
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\ncomponents = [\"N2\", \"H2\", \"Ar\"]\n",
    )]);
    // The meter AI-2 on the purge still measures Ar, which the purge carries.
    assert_only_problem(&text, "stream \"purge\"", &["\"split\"", "\"vapour\""]);
}

#[test]
fn reactor_without_reaction() {
    let text = edit(&[(
        "[[reaction]]\nid = \"synth\"\nunit = \"conv\"\nstoichiometry = { N2 = -1, H2 = -3, NH3 = 2 }\nkey = \"N2\"\n",
        "",
    )]);
    assert_only_problem(&text, "unit \"conv\"", &["reactor", "reaction"]);
}

#[test]
fn reaction_on_a_unit_that_is_not_a_reactor() {
    let text = edit(&[("unit = \"conv\"", "unit = \"mix\"")]);
    assert_problem(
        &text,
        "reaction \"synth\"",
        &["\"mix\"", "mixer", "not a reactor"],
    );
}

#[test]
fn reaction_on_a_component_no_stream_of_its_unit_carries() {
    // Neither the converter's feed nor its effluent may carry ammonia: the synthesis could
    // then never run, and the model says so.
    let text = edit(&[
        ("id = \"feed\"\nfrom = \"mix\"\nto = \"conv\"\n", "id = \"feed\"\nfrom = \"mix\"\nto = \"conv\"\ncomponents = [\"N2\", \"H2\", \"Ar\", \"H2O\"]\n"),
        ("id = \"effluent\"\nfrom = \"conv\"\nto = \"sep\"\n", "id = \"effluent\"\nfrom = \"conv\"\nto = \"sep\"\ncomponents = [\"N2\", \"H2\", \"Ar\", \"H2O\"]\n"),
    ]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"NH3\"", "\"conv\""]);
}

#[test]
fn splitter_outlet_listing_every_component_in_another_order_is_fine() {
    let text = edit(&[(
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\n",
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\ncomponents = [\"H2O\", \"Ar\", \"NH3\", \"H2\", \"N2\"]\n",
    )]);
    parse_plant(&text).unwrap_or_else(|e| panic!("{e}"));
}
