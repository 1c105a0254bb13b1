//! Model validation (docs/model.md): every problem is reported,
//! each naming the item at fault; TOML and JSON give the same plant; parsing never panics.

use proptest::prelude::*;
use reconcile::equations::{constraints, measurement, Layout};
use reconcile::{parse_plant, ModelError, ModelProblem, ModelSpec, Plant};

use testkit::plants::OMBRASK as FIXTURE;

/// A small valid loop: makeup and recycle mix, a converter, a separator that drops liquid
/// ammonia with the water, and a splitter that purges part of the vapour.
const BASE: &str = r#"
name = "gull-rock"
period = "1h"
alpha = 0.05

[[component]]
id = "N2"
molar_mass = 28.014
[[component]]
id = "H2"
molar_mass = 2.016
[[component]]
id = "NH3"
molar_mass = 17.031
[[component]]
id = "Ar"
molar_mass = 39.95
inert = true
[[component]]
id = "H2O"
molar_mass = 18.015

[[unit]]
id = "mix"
kind = "mixer"
[[unit]]
id = "conv"
kind = "reactor"
[[unit]]
id = "sep"
kind = "separator"
[[unit]]
id = "split"
kind = "splitter"

[[reaction]]
id = "synth"
unit = "conv"
stoichiometry = { N2 = -1, H2 = -3, NH3 = 2 }
key = "N2"

[[stream]]
id = "makeup"
from = "outside"
to = "mix"
components = ["N2", "H2", "Ar", "H2O"]
[[stream]]
id = "feed"
from = "mix"
to = "conv"
[[stream]]
id = "effluent"
from = "conv"
to = "sep"
[[stream]]
id = "liquid"
from = "sep"
to = "outside"
components = ["NH3", "H2O"]
[[stream]]
id = "vapour"
from = "sep"
to = "split"
[[stream]]
id = "purge"
from = "split"
to = "outside"
[[stream]]
id = "recycle"
from = "split"
to = "mix"

[[meter]]
tag = "FI-1"
stream = "makeup"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "AI-2"
stream = "purge"
quantity = "mole_fraction"
component = "Ar"
uom = "%"
sigma = 0.1
[[meter]]
tag = "AI-3"
stream = "makeup"
quantity = "mole_fraction"
component = "N2"
basis = ["N2", "H2", "Ar"]
uom = "%"
sigma_pct_span = 1.0
range = [0.0, 100.0]
[[meter]]
tag = "FI-4"
stream = "liquid"
quantity = "mass_flow"
uom = "t/h"
sigma_pct = 1.0
"#;

/// BASE with each `(from, to)` replacement made; every `from` must occur exactly once.
fn edit(edits: &[(&str, &str)]) -> String {
    let mut text = BASE.to_string();
    for (from, to) in edits {
        assert_eq!(
            text.matches(from).count(),
            1,
            "edit target {from:?} must occur once"
        );
        text = text.replacen(from, to, 1);
    }
    text
}

fn problems_of(text: &str) -> Vec<ModelProblem> {
    match parse_plant(text) {
        Ok(_) => panic!("model was accepted:\n{text}"),
        Err(e) => e.problems(),
    }
}

/// The model is refused with a problem on `item` whose message holds every word of `words`.
#[track_caller]
fn assert_problem(text: &str, item: &str, words: &[&str]) -> Vec<ModelProblem> {
    let problems = problems_of(text);
    let found = problems
        .iter()
        .any(|p| p.item == item && words.iter().all(|w| p.message.contains(w)));
    assert!(
        found,
        "no problem on {item} mentioning {words:?}; got {problems:#?}"
    );
    problems
}

/// Like [`assert_problem`], and that problem is the only one.
#[track_caller]
fn assert_only_problem(text: &str, item: &str, words: &[&str]) {
    let problems = assert_problem(text, item, words);
    assert_eq!(problems.len(), 1, "expected one problem, got {problems:#?}");
}

/// A syntax error (TOML or JSON) whose message names `word`.
#[track_caller]
fn assert_syntax(text: &str, word: &str) {
    match parse_plant(text) {
        Err(ModelError::Syntax { message, .. }) => {
            assert!(
                message.contains(word),
                "syntax message does not name {word:?}: {message}"
            )
        }
        other => panic!("expected a syntax error naming {word:?}, got {other:?}"),
    }
}

// ---------------------------------------------------------------------------------------------
// Valid models.

#[test]
fn base_model_is_valid() {
    let plant = parse_plant(BASE).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(plant.name, "gull-rock");
    assert_eq!(
        (
            plant.components.len(),
            plant.units.len(),
            plant.streams.len()
        ),
        (5, 4, 7)
    );
    assert_eq!((plant.reactions.len(), plant.meters.len()), (1, 4));
}

#[test]
fn the_fixture_passes() {
    let plant = parse_plant(FIXTURE).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(plant.name, "ombrask-ob2");
    assert_eq!(plant.period_seconds, 3600);
    assert_eq!(plant.alpha, 0.05);
    // As many items as the file has tables of each kind.
    let count = |table: &str| FIXTURE.lines().filter(|l| l.trim() == table).count();
    assert_eq!(plant.components.len(), count("[[component]]"));
    assert_eq!(plant.units.len(), count("[[unit]]"));
    assert_eq!(plant.reactions.len(), count("[[reaction]]"));
    assert_eq!(plant.streams.len(), count("[[stream]]"));
    assert_eq!(plant.meters.len(), count("[[meter]]"));
    assert_eq!(
        (
            plant.components.len(),
            plant.units.len(),
            plant.streams.len()
        ),
        (5, 4, 7)
    );
    // References resolved: the purge leaves the splitter for the outside, carrying everything.
    let purge = &plant.streams[plant.stream_index("purge").unwrap()];
    assert_eq!(plant.units[purge.from.unwrap()].id, "purge-split");
    assert_eq!(purge.to, None);
    assert_eq!(purge.components, (0..5).collect::<Vec<_>>());
    let product = &plant.streams[plant.stream_index("product").unwrap()];
    let names: Vec<&str> = product
        .components
        .iter()
        .map(|&c| plant.components[c].id.as_str())
        .collect();
    assert_eq!(names, ["NH3", "CH4"]);
    let synthesis = &plant.reactions[0];
    assert_eq!(plant.units[synthesis.unit].id, "conv");
    assert_eq!(synthesis.key, plant.component_index("N2"));
    assert_eq!(
        synthesis.coefficient(plant.component_index("H2").unwrap()),
        -3.0
    );
    assert_eq!(
        synthesis.coefficient(plant.component_index("Ar").unwrap()),
        0.0
    );
}

#[test]
fn defaults_of_period_and_alpha() {
    let text = edit(&[("period = \"1h\"\n", ""), ("alpha = 0.05\n", "")]);
    let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((plant.period_seconds, plant.alpha), (3600, 0.05));
}

#[test]
fn good_periods_are_accepted() {
    for (period, seconds) in [
        ("15m", 900),
        ("1h", 3600),
        ("30s", 30),
        ("1d", 86_400),
        ("2d", 172_800),
        ("8h", 28_800),
    ] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{period}\""))]);
        let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{period}: {e}"));
        assert_eq!(plant.period_seconds, seconds, "{period}");
    }
}

// ---------------------------------------------------------------------------------------------
// Unknown ids.

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

// ---------------------------------------------------------------------------------------------
// Topology.

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

// ---------------------------------------------------------------------------------------------
// Conservation of mass.

/// The ammonia synthesis N2 + 3 H2 → 2 NH3 with the molar mass of NH3 set so that
/// Σ ν·M = r · Σ |ν·M|.
fn synthesis_off_by(r: f64) -> String {
    // IUPAC 2021 abridged atomic weights: N 14.007, H 1.008.
    let (m_n2, m_h2) = (2.0 * 14.007, 2.0 * 1.008);
    // Σ ν M = 2 M − (m_n2 + 3 m_h2) and Σ |ν M| = 2 M + m_n2 + 3 m_h2; solve for M.
    let reactants = m_n2 + 3.0 * m_h2;
    let m_nh3 = reactants * (1.0 + r) / (2.0 * (1.0 - r));
    let net = 2.0 * m_nh3 - reactants;
    let scale = 2.0 * m_nh3 + reactants;
    assert!((net / scale - r).abs() < 1e-3 * r.abs(), "construction");
    edit(&[("molar_mass = 17.031", &format!("molar_mass = {m_nh3:?}"))])
}

#[test]
fn reaction_conserving_mass_within_the_tolerance_passes() {
    // The tolerance is 1e-6 relative to Σ|ν·M| (FORMATS/DOMAIN: "within tolerance").
    for r in [0.9e-6, -0.9e-6, 0.5e-6] {
        let text = synthesis_off_by(r);
        if let Err(e) = parse_plant(&text) {
            panic!("relative imbalance {r:e} is inside the tolerance: {e}");
        }
    }
}

#[test]
fn reaction_not_conserving_mass_is_refused() {
    for r in [1.1e-6, -1.1e-6, 1e-3] {
        let text = synthesis_off_by(r);
        assert_only_problem(&text, "reaction \"synth\"", &["mass"]);
    }
    // A plainly wrong stoichiometry: N2 + H2 → NH3.
    let text = edit(&[("N2 = -1, H2 = -3, NH3 = 2", "N2 = -1, H2 = -1, NH3 = 1")]);
    assert_only_problem(&text, "reaction \"synth\"", &["mass"]);
}

#[test]
fn zero_coefficient_and_empty_stoichiometry() {
    let text = edit(&[("NH3 = 2 }", "NH3 = 2, Ar = 0 }")]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"Ar\"", "zero"]);
    let text = edit(&[(
        "stoichiometry = { N2 = -1, H2 = -3, NH3 = 2 }\nkey = \"N2\"",
        "stoichiometry = {}",
    )]);
    assert_only_problem(&text, "reaction \"synth\"", &["empty"]);
}

// ---------------------------------------------------------------------------------------------
// Meters.

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

// ---------------------------------------------------------------------------------------------
// NaN and infinity (TOML has `nan` and `inf` literals).

#[test]
fn nan_and_inf_molar_mass() {
    for bad in ["nan", "inf", "-inf", "+nan"] {
        let text = edit(&[("molar_mass = 39.95", &format!("molar_mass = {bad}"))]);
        assert_only_problem(&text, "component \"Ar\"", &["molar_mass"]);
    }
    // In a component that reacts, the mass balance cannot be checked; the molar mass is
    // still the problem reported.
    let text = edit(&[("molar_mass = 17.031", "molar_mass = nan")]);
    assert_problem(&text, "component \"NH3\"", &["molar_mass"]);
}

#[test]
fn nan_and_inf_sigma() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("sigma = 2.0", &format!("sigma = {bad}"))]);
        assert_only_problem(&text, "meter \"FI-1\"", &["sigma"]);
        let text = edit(&[("sigma_pct = 1.0", &format!("sigma_pct = {bad}"))]);
        assert_only_problem(&text, "meter \"FI-4\"", &["sigma_pct"]);
        let text = edit(&[("sigma_pct_span = 1.0", &format!("sigma_pct_span = {bad}"))]);
        assert_only_problem(&text, "meter \"AI-3\"", &["sigma_pct_span"]);
    }
}

#[test]
fn nan_and_inf_stoichiometry() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("H2 = -3", &format!("H2 = {bad}"))]);
        assert_only_problem(&text, "reaction \"synth\"", &["\"H2\""]);
    }
}

#[test]
fn nan_and_inf_range() {
    for range in [
        "[0.0, nan]",
        "[nan, 100.0]",
        "[-inf, 100.0]",
        "[0.0, inf]",
        "[nan, nan]",
    ] {
        let text = edit(&[("range = [0.0, 100.0]", &format!("range = {range}"))]);
        assert_only_problem(&text, "meter \"AI-3\"", &["range"]);
        // A range on a meter with an absolute sigma is checked just the same.
        let text = edit(&[("sigma = 2.0\n", &format!("sigma = 2.0\nrange = {range}\n"))]);
        assert_only_problem(&text, "meter \"FI-1\"", &["range"]);
    }
}

#[test]
fn nan_and_inf_alpha() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("alpha = 0.05", &format!("alpha = {bad}"))]);
        assert_only_problem(&text, "model", &["alpha"]);
    }
}

// ---------------------------------------------------------------------------------------------
// Ids, period, alpha, fields.

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

// ---------------------------------------------------------------------------------------------
// All problems at once.

#[test]
fn a_model_with_many_problems_reports_all_of_them() {
    let text = edit(&[
        ("period = \"1h\"", "period = \"7m\""), // 420 s does not divide a day
        ("alpha = 0.05", "alpha = 0.7"),        // alpha above 0.5
        ("molar_mass = 39.95", "molar_mass = 0.0"), // Ar, in no reaction
        (
            "components = [\"N2\", \"H2\", \"Ar\", \"H2O\"]",
            "components = [\"N2\", \"H2\", \"Ar\", \"H2O\", \"Xe\"]",
        ),
        ("key = \"N2\"", "key = \"NH3\""), // a product as key
        ("sigma = 2.0", "sigma = -2.0"),   // FI-1
        ("uom = \"%\"\nsigma = 0.1", "uom = \"kg/h\"\nsigma = 0.1"), // AI-2
        (
            "stream = \"liquid\"\nquantity",
            "stream = \"liquor\"\nquantity",
        ), // FI-4
    ]);
    let text =
        format!("{text}\n[[stream]]\nid = \"bypass\"\nfrom = \"outside\"\nto = \"outside\"\n");
    let problems = problems_of(&text);
    let expected = [
        ("model", "period"),
        ("model", "alpha"),
        ("component \"Ar\"", "molar_mass"),
        ("stream \"makeup\"", "\"Xe\""),
        ("reaction \"synth\"", "\"NH3\""),
        ("meter \"FI-1\"", "sigma"),
        ("meter \"AI-2\"", "\"kg/h\""),
        ("meter \"FI-4\"", "\"liquor\""),
        ("stream \"bypass\"", "outside"),
    ];
    for (item, word) in expected {
        assert!(
            problems
                .iter()
                .any(|p| p.item == item && p.message.contains(word)),
            "missing {item} / {word} in {problems:#?}"
        );
    }
    assert_eq!(problems.len(), expected.len(), "{problems:#?}");
    // The error's text lists them all, one per line, item first.
    let err = parse_plant(&text).unwrap_err();
    let shown = err.to_string();
    assert!(shown.contains("9 problem(s)"), "{shown}");
    assert_eq!(
        shown.lines().filter(|l| l.starts_with("  - ")).count(),
        9,
        "{shown}"
    );
    assert!(shown.contains("  - meter \"FI-4\": "), "{shown}");
}

// ---------------------------------------------------------------------------------------------
// JSON and TOML.

const SMALL_TOML: &str = r#"
name = "quorrin"
period = "15m"
alpha = 0.01

[[component]]
id = "A"
molar_mass = 30.0
[[component]]
id = "B"
molar_mass = 15.0
[[component]]
id = "I"
molar_mass = 40.0
inert = true

[[unit]]
id = "m"
kind = "mixer"
[[unit]]
id = "r"
kind = "reactor"
[[unit]]
id = "t"
kind = "splitter"

[[reaction]]
id = "cracking"
unit = "r"
stoichiometry = { A = -1, B = 2 }
key = "A"
irreversible = true

[[stream]]
id = "in"
from = "outside"
to = "m"
components = ["A", "I"]
[[stream]]
id = "rf"
from = "m"
to = "r"
[[stream]]
id = "ro"
from = "r"
to = "t"
[[stream]]
id = "out"
from = "t"
to = "outside"
[[stream]]
id = "back"
from = "t"
to = "m"

[[meter]]
tag = "F1"
stream = "in"
quantity = "std_volume_flow"
uom = "Sm3/h"
sigma_pct_span = 0.5
range = [0.0, 5000.0]
[[meter]]
tag = "Q1"
stream = "out"
quantity = "mole_fraction"
component = "B"
basis = ["A", "B"]
uom = "ppm"
sigma_pct = 2.0
"#;

const SMALL_JSON: &str = r#"{
  "name": "quorrin", "period": "15m", "alpha": 0.01,
  "component": [
    {"id": "A", "molar_mass": 30.0},
    {"id": "B", "molar_mass": 15.0},
    {"id": "I", "molar_mass": 40.0, "inert": true}
  ],
  "unit": [
    {"id": "m", "kind": "mixer"},
    {"id": "r", "kind": "reactor"},
    {"id": "t", "kind": "splitter"}
  ],
  "reaction": [
    {"id": "cracking", "unit": "r", "stoichiometry": {"A": -1, "B": 2}, "key": "A", "irreversible": true}
  ],
  "stream": [
    {"id": "in", "from": "outside", "to": "m", "components": ["A", "I"]},
    {"id": "rf", "from": "m", "to": "r"},
    {"id": "ro", "from": "r", "to": "t"},
    {"id": "out", "from": "t", "to": "outside"},
    {"id": "back", "from": "t", "to": "m"}
  ],
  "meter": [
    {"tag": "F1", "stream": "in", "quantity": "std_volume_flow", "uom": "Sm3/h",
     "sigma_pct_span": 0.5, "range": [0.0, 5000.0]},
    {"tag": "Q1", "stream": "out", "quantity": "mole_fraction", "component": "B",
     "basis": ["A", "B"], "uom": "ppm", "sigma_pct": 2.0}
  ]
}"#;

fn same_plant(a: &Plant, b: &Plant) {
    assert_eq!(a.spec, b.spec);
    // Plant has no PartialEq; its Debug form shows every field.
    assert_eq!(format!("{a:?}"), format!("{b:?}"));
}

#[test]
fn json_and_toml_give_the_same_plant() {
    let from_toml = parse_plant(SMALL_TOML).unwrap_or_else(|e| panic!("{e}"));
    let from_json = parse_plant(SMALL_JSON).unwrap_or_else(|e| panic!("{e}"));
    same_plant(&from_toml, &from_json);
    assert_eq!(from_json.period_seconds, 900);
    assert_eq!(from_json.alpha, 0.01);
    assert!(from_json.reactions[0].irreversible);
    // Leading white space before the JSON object is fine.
    let padded = parse_plant(&format!("\n  \t{SMALL_JSON}")).unwrap_or_else(|e| panic!("{e}"));
    same_plant(&from_toml, &padded);
}

#[test]
fn fixture_survives_a_json_round_trip() {
    let spec = ModelSpec::from_toml(FIXTURE).unwrap_or_else(|e| panic!("{e}"));
    let json = serde_json::to_string_pretty(&spec).expect("serialises");
    let again = ModelSpec::from_json(&json).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(spec, again);
    same_plant(&parse_plant(FIXTURE).unwrap(), &parse_plant(&json).unwrap());
}

#[test]
fn json_problems_name_their_items_too() {
    let json = SMALL_JSON.replace(r#""sigma_pct": 2.0"#, r#""sigma_pct": -2.0"#);
    assert_only_problem_json(&json, "meter \"Q1\"", "sigma_pct");
    let json = SMALL_JSON.replace(r#""to": "r"}"#, r#""to": "reactor"}"#);
    let problems = problems_of(&json);
    assert!(
        problems
            .iter()
            .any(|p| p.item == "stream \"rf\"" && p.message.contains("\"reactor\"")),
        "{problems:#?}"
    );
    // A JSON syntax error is reported as such.
    match parse_plant("{\"name\": ") {
        Err(ModelError::Syntax { format, .. }) => assert_eq!(format, "JSON"),
        other => panic!("{other:?}"),
    }
    match parse_plant("name = ") {
        Err(ModelError::Syntax { format, .. }) => assert_eq!(format, "TOML"),
        other => panic!("{other:?}"),
    }
}

fn assert_only_problem_json(json: &str, item: &str, word: &str) {
    let problems = problems_of(json);
    assert_eq!(problems.len(), 1, "{problems:#?}");
    assert_eq!(problems[0].item, item);
    assert!(problems[0].message.contains(word), "{problems:#?}");
}

// ---------------------------------------------------------------------------------------------
// Never a panic.

/// When a text parses, the equations can be set up and evaluated on it without a panic.
fn exercise(text: &str) {
    if let Ok(plant) = parse_plant(text) {
        let layout = Layout::new(&plant);
        let z: Vec<f64> = (0..layout.n)
            .map(|i| if layout.upper[i] == 1.0 { 0.5 } else { 1.0 })
            .collect();
        let g = constraints(&plant, &layout, &z, None);
        assert_eq!(g.len(), layout.rows.len());
        assert!(g.iter().all(|v| v.is_finite()));
        for m in &plant.meters {
            let (h, _) = measurement(&plant, &layout, m, &z);
            assert!(h.is_finite(), "meter {}", m.tag);
        }
    }
}

#[derive(Debug, Clone)]
enum Mutation {
    DeleteLine(usize),
    DuplicateLine(usize),
    SwapLines(usize, usize),
    ReplaceValue(usize, String),
    InsertText(usize, String),
    DeleteChars(usize, usize),
}

fn mutate(text: &str, mutations: &[Mutation]) -> String {
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    for m in mutations {
        if lines.is_empty() {
            break;
        }
        let n = lines.len();
        match m {
            Mutation::DeleteLine(i) => {
                lines.remove(i % n);
            }
            Mutation::DuplicateLine(i) => {
                let l = lines[i % n].clone();
                lines.insert(i % n, l);
            }
            Mutation::SwapLines(i, j) => lines.swap(i % n, j % n),
            Mutation::ReplaceValue(i, v) => {
                let line = &mut lines[i % n];
                if let Some(eq) = line.find('=') {
                    *line = format!("{}= {v}", &line[..eq]);
                }
            }
            Mutation::InsertText(i, t) => {
                let line = &mut lines[i % n];
                let chars: Vec<char> = line.chars().collect();
                let at = if chars.is_empty() {
                    0
                } else {
                    i % (chars.len() + 1)
                };
                let mut s: String = chars[..at].iter().collect();
                s.push_str(t);
                s.extend(&chars[at..]);
                *line = s;
            }
            Mutation::DeleteChars(i, len) => {
                let line = &mut lines[i % n];
                let chars: Vec<char> = line.chars().collect();
                if !chars.is_empty() {
                    let at = i % chars.len();
                    let end = (at + len).min(chars.len());
                    *line = chars[..at].iter().chain(&chars[end..]).collect();
                }
            }
        }
    }
    lines.join("\n")
}

/// Values a model file might plausibly (or implausibly) hold.
fn value_strategy() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("nan".to_string()),
        Just("inf".to_string()),
        Just("-inf".to_string()),
        Just("0".to_string()),
        Just("-1".to_string()),
        Just("1e308".to_string()),
        Just("\"outside\"".to_string()),
        Just("\"\"".to_string()),
        Just("[]".to_string()),
        Just("{}".to_string()),
        Just("[0.0, nan]".to_string()),
        Just("{ N2 = -1 }".to_string()),
        Just("\"splitter\"".to_string()),
        Just("\"reactor\"".to_string()),
        Just("\"mole_fraction\"".to_string()),
        Just("\"component_flow\"".to_string()),
        Just("[\"N2\"]".to_string()),
        Just("[\"NH3\", \"CH4\"]".to_string()),
        Just("\"purge\"".to_string()),
        Just("\"conv\"".to_string()),
        Just("\"mix\"".to_string()),
        Just("\"Ar\"".to_string()),
        Just("\"ppm\"".to_string()),
        Just("\"0s\"".to_string()),
        "-?[0-9]{1,6}(\\.[0-9]{1,4})?".prop_map(|s| s),
        "\"[a-zA-Z0-9 %/_-]{0,10}\"".prop_map(|s| s),
    ]
}

fn mutation_strategy() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        any::<usize>().prop_map(Mutation::DeleteLine),
        any::<usize>().prop_map(Mutation::DuplicateLine),
        (any::<usize>(), any::<usize>()).prop_map(|(i, j)| Mutation::SwapLines(i, j)),
        (any::<usize>(), value_strategy()).prop_map(|(i, v)| Mutation::ReplaceValue(i, v)),
        (any::<usize>(), "\\PC{0,6}|[\\[\\]{}=\",\\n#]{1,3}")
            .prop_map(|(i, t)| Mutation::InsertText(i, t)),
        (any::<usize>(), 1usize..12).prop_map(|(i, n)| Mutation::DeleteChars(i, n)),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 512, ..ProptestConfig::default() })]

    #[test]
    fn parse_plant_never_panics_on_arbitrary_text(text in "\\PC{0,200}") {
        exercise(&text);
    }

    #[test]
    fn parse_plant_never_panics_on_arbitrary_bytes(bytes in proptest::collection::vec(any::<u8>(), 0..200)) {
        exercise(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn parse_plant_never_panics_on_toml_like_text(
        text in "((\\[\\[(component|unit|stream|meter|reaction)\\]\\]|(id|from|to|unit|kind|name|period|alpha|tag|stream|quantity|uom|sigma|molar_mass) = (\"[a-z0-9 ]{0,6}\"|-?[0-9]{1,3}|nan|inf|\\[[^\\n]{0,8}\\]))\\n){0,25}"
    ) {
        exercise(&text);
    }

    #[test]
    fn parse_plant_never_panics_on_a_mutated_fixture(
        mutations in proptest::collection::vec(mutation_strategy(), 1..6)
    ) {
        exercise(&mutate(FIXTURE, &mutations));
    }

    #[test]
    fn parse_plant_never_panics_on_a_mutated_base_model(
        mutations in proptest::collection::vec(mutation_strategy(), 1..4)
    ) {
        exercise(&mutate(BASE, &mutations));
    }

    #[test]
    fn parse_plant_never_panics_on_mutated_json(
        mutations in proptest::collection::vec(mutation_strategy(), 1..4)
    ) {
        exercise(&mutate(SMALL_JSON, &mutations));
    }
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

#[test]
fn every_accepted_period_groups_readings() {
    use chrono::{TimeZone, Utc};
    use reconcile::{group_readings, Quality, Reading};
    let time = Utc.with_ymd_and_hms(2026, 3, 2, 5, 30, 0).unwrap();
    for period in ["30s", "15m", "1h", "1d", "7d", "366d"] {
        let text = edit(&[("period = \"1h\"", &format!("period = \"{period}\""))]);
        let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{period}: {e}"));
        let readings = [Reading {
            tag: "FI-1".into(),
            time,
            value: 100.0,
            quality: Quality::Good,
        }];
        let periods = group_readings(&plant, &readings);
        assert_eq!(periods.len(), 1, "{period}");
        assert!(
            periods[0].start <= time && time < periods[0].end,
            "{period}"
        );
        assert_eq!(
            (periods[0].end - periods[0].start).num_seconds(),
            plant.period_seconds
        );
    }
}

#[test]
fn splitter_outlet_listing_every_component_in_another_order_is_fine() {
    let text = edit(&[(
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\n",
        "id = \"purge\"\nfrom = \"split\"\nto = \"outside\"\ncomponents = [\"H2O\", \"Ar\", \"NH3\", \"H2\", \"N2\"]\n",
    )]);
    parse_plant(&text).unwrap_or_else(|e| panic!("{e}"));
}
