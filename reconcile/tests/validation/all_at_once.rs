//! All problems at once: a model with many problems reports every one.

use super::*;

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
