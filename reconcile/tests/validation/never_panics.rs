//! Never a panic: arbitrary and mutated texts (proptest).

use super::formats::SMALL_JSON;
use super::*;

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
