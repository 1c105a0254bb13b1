//! JSON and TOML: the same plant from either, a JSON round trip, JSON problems named.

use super::*;

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

pub(super) const SMALL_JSON: &str = r#"{
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

#[test]
fn units_with_a_space_read_alike_from_toml_and_json() {
    // `mol %` and `vol %` hold a space: TOML and JSON strings carry it as written.
    let toml = SMALL_TOML
        .replace("uom = \"ppm\"", "uom = \"mol %\"")
        .replace("uom = \"Sm3/h\"", "uom = \"MMSCFD\"");
    let json = SMALL_JSON
        .replace("\"uom\": \"ppm\"", "\"uom\": \"mol %\"")
        .replace("\"uom\": \"Sm3/h\"", "\"uom\": \"MMSCFD\"");
    let from_toml = parse_plant(&toml).unwrap_or_else(|e| panic!("{e}"));
    let from_json = parse_plant(&json).unwrap_or_else(|e| panic!("{e}"));
    same_plant(&from_toml, &from_json);
    assert_eq!(from_toml.meters[1].uom.as_str(), "mol %");
    // And back: the JSON written holds the unit as it was read.
    let written = serde_json::to_string(&from_toml.spec).expect("serialises");
    assert!(written.contains("\"uom\":\"mol %\""), "{written}");
    let again = ModelSpec::from_json(&written).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(again, from_toml.spec);
}
