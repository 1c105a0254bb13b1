//! `loopbal check-model`: the fixture summarised, JSON read by its extension, every problem
//! listed with its item, syntax errors and missing or binary files named.

use super::*;

#[test]
fn check_model_summarises_the_fixture() {
    let out = loopbal(&["check-model", OMBRASK]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).expect("utf-8");
    for expected in [
        "ombrask-ob2",
        "period 1h",
        "alpha 0.05",
        "5 components: N2, H2, NH3, Ar, CH4",
        "inerts: Ar, CH4",
        "4 units",
        "purge-split (splitter)",
        "1 reaction",
        "synthesis in conv: N2 + 3 H2 -> 2 NH3 (key N2)",
        "7 streams",
        "11 meters",
        "molar_flow: 3",
        "mass_flow: 1",
        "std_volume_flow: 1",
        "mole_fraction: 6",
    ] {
        assert!(
            text.contains(expected),
            "summary lacks {expected:?}:\n{text}"
        );
    }
}

#[test]
fn check_model_reads_json_by_extension() {
    let dir = tempfile::tempdir().expect("tempdir");
    let spec = serde_json::json!({
        "name": "wren-json",
        "component": [{"id": "A", "molar_mass": 28.0}],
        "unit": [{"id": "tee", "kind": "splitter"}],
        "stream": [
            {"id": "in", "from": "outside", "to": "tee"},
            {"id": "a", "from": "tee", "to": "outside"},
            {"id": "b", "from": "tee", "to": "outside"}
        ],
        "meter": [{"tag": "F1", "stream": "in", "quantity": "molar_flow", "uom": "kmol/h", "sigma": 1.0}]
    });
    // Pretty-printed with leading whitespace, so only the extension says JSON.
    let model = write(dir.path(), "wren.json", format!("\n  {spec:#}"));
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("wren-json") && text.contains("3 streams") && text.contains("1 meter"),
        "{text}"
    );
}

#[test]
fn check_model_lists_every_problem_with_its_item() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(
        dir.path(),
        "heron.toml",
        r#"
name = "heron-loop"
period = "7m"
[[component]]
id = "A"
molar_mass = 28.0
[[unit]]
id = "join"
kind = "mixer"
[[stream]]
id = "feed"
from = "outside"
to = "join"
[[stream]]
id = "out"
from = "join"
to = "nowhere"
[[meter]]
tag = "HR-F1"
stream = "feed"
quantity = "molar_flow"
uom = "Nm3/h"
sigma = 1.0
[[meter]]
tag = "HR-F2"
stream = "ghost"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#,
    );
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty());
    let err = stderr(&out);
    for item in [
        "model",
        "stream \"out\"",
        "meter \"HR-F1\"",
        "meter \"HR-F2\"",
    ] {
        let line = format!("{}: {item}: ", model.display());
        assert!(err.contains(&line), "stderr lacks {line:?}:\n{err}");
    }
    assert!(
        err.contains("\"7m\"") && err.contains("nowhere") && err.contains("ghost"),
        "{err}"
    );
    // One line per problem, plus the count.
    assert!(err.contains("the model has 4 problem(s)"), "{err}");
}

#[test]
fn check_model_syntax_error_names_the_file_and_position() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(
        dir.path(),
        "broken.toml",
        "name = \"x\"\n[[component]\nid = \"A\"\n",
    );
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(
        err.starts_with(&format!("{}: not valid TOML", model.display())),
        "{err}"
    );
    assert!(err.contains("line 2"), "{err}");

    let json = write(dir.path(), "broken.json", "{\"name\": \"x\",}");
    let out = loopbal(&["check-model", s(&json)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).starts_with(&format!("{}: not valid JSON", json.display())),
        "{}",
        stderr(&out)
    );
}

#[test]
fn check_model_missing_or_binary_file_exits_2_naming_it() {
    let dir = tempfile::tempdir().expect("tempdir");
    let missing = dir.path().join("absent.toml");
    let out = loopbal(&["check-model", s(&missing)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains(&format!("{}: cannot read", missing.display())));

    let binary = write(dir.path(), "binary.toml", b"name = \"x\"\n\xff\xfe\n");
    let out = loopbal(&["check-model", s(&binary)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains(&format!("{}: line 2: not UTF-8", binary.display())),
        "{}",
        stderr(&out)
    );
}

#[test]
fn a_model_wrong_throughout_is_reported_in_a_few_lines_with_its_names_escaped() {
    let dir = tempfile::tempdir().expect("tempdir");
    let mut text = WREN.to_string();
    for k in 0..10_000 {
        text += &format!(
            "[[meter]]\ntag = \"=WR{k}\\u202E\\n\"\nstream = \"east\"\nquantity = \"molar_flow\"\n\
             uom = \"kmol/h\"\nsigma = 1.0\n"
        );
    }
    let model = write(dir.path(), "hostile.toml", &text);
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(err.len() < 16 * 1024, "{} bytes", err.len());
    let file = model.display();
    for expected in [
        format!("{file}: meter \"=WR0\\u{{202e}}\\n\": id begins with '='"),
        format!("{file}: 9950 more problem(s) not listed"),
        format!("{file}: the model has 10000 problem(s)"),
    ] {
        assert!(err.contains(&expected), "stderr lacks {expected:?}:\n{err}");
    }
    assert!(!err.contains('\u{202e}'), "{err}");
    // One line per listed problem, the rest counted: newlines in ids are escaped.
    assert_eq!(err.lines().count(), 52, "{err}");
}

#[test]
fn check_model_takes_the_units_plants_send_spelled_exactly() {
    let dir = tempfile::tempdir().expect("tempdir");
    let fixture = std::fs::read_to_string(OMBRASK).expect("the fixture");
    let once = |text: &str, from: &str, to: &str| {
        assert!(text.contains(from), "{from}");
        text.replacen(from, to, 1)
    };
    // Makeup in MMSCFD, product in lb/h, the argon analyser in mol % (a space in the unit).
    let text = once(&fixture, "uom = \"Nm3/h\"", "uom = \"MMSCFD\"");
    let text = once(&text, "uom = \"t/h\"", "uom = \"lb/h\"");
    let text = once(&text, "uom = \"%\"", "uom = \"mol %\"");
    let model = write(dir.path(), "customary.toml", &text);
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));

    // Spelled otherwise, or on a quantity it does not measure: refused, naming the meter and
    // the units its quantity accepts.
    let text = once(&text, "uom = \"mol %\"", "uom = \"mol%\"");
    let text = once(&text, "uom = \"kmol/h\"", "uom = \"lb/h\"");
    let model = write(dir.path(), "misspelt.toml", &text);
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    for expected in [
        "meter \"OB2-AI-102\": uom \"mol%\" is not one of \"fraction\", \"%\", \"ppm\", \"mol %\", \"vol %\", \"ppmv\" for mole_fraction",
        "did you mean \"mol %\"?",
        "meter \"OB2-FI-201\": uom \"lb/h\" does not fit molar_flow; use one of \"kmol/h\", \"mol/s\", \"kmol/s\", \"lbmol/h\"",
        "the model has 2 problem(s)",
    ] {
        assert!(err.contains(expected), "stderr lacks {expected:?}:\n{err}");
    }
}
