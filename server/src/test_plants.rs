//! The smallest plants the shell's unit tests need: a tee (one node `n` with a feed `in` and
//! an outlet `out`, one component `A`) with the molar-flow meters a test asks for.

/// A molar-flow meter of the tee, σ 1 kmol/h: its tag, its stream (`in` or `out`) and its
/// range, if it has one.
pub(crate) struct FlowMeter(pub &'static str, pub &'static str, pub Option<[f64; 2]>);

/// The tee's model file with `meters`.
pub(crate) fn tee(meters: &[FlowMeter]) -> String {
    let mut text = String::from(
        r#"
name = "tee"
[[component]]
id = "A"
molar_mass = 2.0
[[unit]]
id = "n"
kind = "node"
[[stream]]
id = "in"
from = "outside"
to = "n"
[[stream]]
id = "out"
from = "n"
to = "outside"
"#,
    );
    for FlowMeter(tag, stream, range) in meters {
        text += &format!(
            "[[meter]]\ntag = \"{tag}\"\nstream = \"{stream}\"\nquantity = \"molar_flow\"\n\
             uom = \"kmol/h\"\nsigma = 1.0\n"
        );
        if let Some([lo, hi]) = range {
            text += &format!("range = [{lo:?}, {hi:?}]\n");
        }
    }
    text
}

/// The tee with one meter, F-1 on the feed (revisions, the scheduler).
pub(crate) fn tee_with_feed_meter() -> String {
    tee(&[FlowMeter("F-1", "in", None)])
}

#[test]
fn the_shell_has_no_import_circle() {
    let src = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let graph = testkit::layers::imports(&src);
    assert!(graph.contains_key("api") && graph["api"].contains("service"));
    assert_eq!(testkit::layers::circles(&graph), Vec::<Vec<String>>::new());
}
