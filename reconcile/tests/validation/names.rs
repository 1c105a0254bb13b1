//! Names: the model's name and every id are safe names (reconcile::names), refused otherwise
//! as a problem naming the item, quoted escaped and cut; a model wrong throughout is reported
//! in a message of bounded size.

use super::*;

use reconcile::names::MAX_NAME_CHARS;
use reconcile::text::quote;

/// `text` as a TOML basic string.
fn toml_string(text: &str) -> String {
    let mut out = String::from("\"");
    for c in text.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c if c.is_control() => out.push_str(&format!("\\u{:04X}", u32::from(c))),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// Names a spreadsheet, a terminal or a reader could be fooled by, and why each is refused.
fn hostile() -> Vec<(String, &'static str)> {
    vec![
        ("F-1\u{202e}2".into(), "U+202E"),
        ("F\u{200b}1".into(), "U+200B"),
        ("F-1\nF-2".into(), "U+000A"),
        ("F\t1".into(), "U+0009"),
        ("=1+2".into(), "begins with '='"),
        ("@SUM(A1)".into(), "begins with '@'"),
        ("+x".into(), "begins with '+'"),
        ("-x".into(), "begins with '-'"),
        (" x".into(), "a space"),
        ("A".repeat(MAX_NAME_CHARS + 1), "65 characters long"),
    ]
}

#[test]
fn every_kind_of_id_is_held_to_the_safe_names() {
    // Each id renamed everywhere it is used, so the name is the only problem.
    for (kind, id) in [
        ("component", "Ar"),
        ("unit", "split"),
        ("reaction", "synth"),
        ("stream", "purge"),
        ("meter", "AI-2"),
    ] {
        for (name, why) in hostile() {
            let text = BASE.replace(&format!("\"{id}\""), &toml_string(&name));
            assert_ne!(text, BASE);
            assert_only_problem(&text, &format!("{kind} {}", quote(&name)), &["id", why]);
        }
    }
}

#[test]
fn the_models_name_is_held_to_the_safe_names_too() {
    for (name, why) in hostile() {
        let text = edit(&[(
            "name = \"gull-rock\"",
            &format!("name = {}", toml_string(&name)),
        )]);
        assert_only_problem(&text, "model", &["name", why]);
    }
}

#[test]
fn an_empty_id_is_named_by_its_place() {
    let text = edit(&[("tag = \"FI-4\"", "tag = \"\"")]);
    assert_only_problem(&text, "meter #4", &["empty id"]);
}

#[test]
fn the_names_in_use_pass_and_a_model_admitted_before_the_rule_still_validates() {
    parse_plant(FIXTURE).unwrap_or_else(|e| panic!("{e}"));
    let text = BASE.replace("\"purge\"", "\"=purge\"");
    let spec = ModelSpec::from_toml(&text).expect("parses");
    assert!(Plant::new(spec.clone()).is_err());
    let plant = Plant::revalidate(spec).unwrap_or_else(|e| panic!("{e}"));
    assert!(plant.stream_index("=purge").is_some());
}

#[test]
fn a_model_with_ten_thousand_bad_ids_is_reported_in_a_bounded_message() {
    let mut text = BASE.to_string();
    for k in 0..10_000 {
        text += &format!(
            "[[meter]]\ntag = \"=M{k}\u{202e}\"\nstream = \"purge\"\nquantity = \"molar_flow\"\n\
             uom = \"kmol/h\"\nsigma = 1.0\n"
        );
    }
    let problems = problems_of(&text);
    assert_eq!(problems.len(), 10_000);
    assert_eq!(problems[0].item, "meter \"=M0\\u{202e}\"");
    let shown = parse_plant(&text).unwrap_err().to_string();
    assert!(shown.len() < 64 * 1024, "{} bytes", shown.len());
    assert!(
        shown.starts_with(
            "the model has 10000 problem(s):\n  - meter \"=M0\\u{202e}\": id begins with '='"
        ),
        "{shown}"
    );
    assert!(shown.ends_with("\n  - and 9950 more problem(s)"), "{shown}");
    assert!(!shown.contains('\u{202e}'));
}

#[test]
fn a_huge_id_is_quoted_cut_wherever_it_is_named() {
    let huge = "N".repeat(3_000_000);
    // A stream listing an unknown component of three million characters, and a meter whose
    // tag is as long.
    let text = edit(&[
        (
            "components = [\"NH3\", \"H2O\"]",
            &format!("components = [\"NH3\", \"H2O\", \"{huge}\"]"),
        ),
        ("tag = \"FI-4\"", &format!("tag = \"{huge}\"")),
    ]);
    let problems = problems_of(&text);
    assert_eq!(problems.len(), 2, "{problems:#?}");
    for p in &problems {
        assert!(p.item.len() + p.message.len() < 1_000, "{}", p.item.len());
    }
    assert!(problems
        .iter()
        .any(|p| p.item == "stream \"liquid\"" && p.message.contains("(3000000 characters)")));
    assert!(problems.iter().any(|p| p.item.starts_with("meter \"NNN")
        && p.item.ends_with("…\" (3000000 characters)")
        && p.message.contains("3000000 characters long")));
}

#[test]
fn a_syntax_error_on_a_huge_line_is_cut() {
    let text = format!("name = \"x\"\nperiod = {}\n", "9".repeat(2_000_000));
    let err = parse_plant(&text).unwrap_err();
    let shown = err.to_string();
    assert!(shown.len() < 8 * 1024, "{} bytes", shown.len());
    assert!(matches!(err, ModelError::Syntax { .. }));
    let json = format!("{{\"name\": \"x\", \"{}\": 1}}", "k".repeat(2_000_000));
    let shown = parse_plant(&json).unwrap_err().to_string();
    assert!(shown.len() < 2_000, "{} bytes", shown.len());
    assert!(shown.contains("at line 1 column"), "{shown}");
}
