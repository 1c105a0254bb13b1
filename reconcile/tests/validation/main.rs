//! Model validation (docs/model.md): every problem is reported,
//! each naming the item at fault; TOML and JSON give the same plant; parsing never panics.
//! This file holds the base model and the helpers; the tests are by kind of problem:
//! `valid`, `unknown_ids`, `topology`, `mass`, `meters`, `not_finite`, `fields`,
//! `all_at_once`, `formats`, `never_panics`, `names`.

mod all_at_once;
mod fields;
mod formats;
mod mass;
mod meters;
mod names;
mod never_panics;
mod not_finite;
mod topology;
mod unknown_ids;
mod valid;

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
