//! The smallest plants the shell's unit tests need: one node between a feed and a product.

/// The tee with one meter, `F-1`, on its feed.
pub(crate) const TEE: &str = r#"
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
[[meter]]
tag = "F-1"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#;

/// The tee with a meter on each stream: `feed` on the feed, with an instrument range of 0 to
/// `range` kmol/h, and `product` on the product (a redundant pair: each tests the other).
pub(crate) fn metered_tee(feed: &str, product: &str, range: f64) -> String {
    let feed_meter = TEE.replace("tag = \"F-1\"", &format!("tag = \"{feed}\""));
    format!(
        "{feed_meter}range = [0.0, {range:?}]\n[[meter]]\ntag = \"{product}\"\nstream = \"out\"\n\
         quantity = \"molar_flow\"\nuom = \"kmol/h\"\nsigma = 1.0\n"
    )
}

#[test]
fn the_metered_tee_is_a_valid_model_with_both_meters() {
    let plant = reconcile::parse_plant(&metered_tee("FT-1", "FT-2", 100.0)).expect("valid");
    let tags: Vec<&str> = plant.meters.iter().map(|m| m.tag.as_str()).collect();
    assert_eq!(tags, ["FT-1", "FT-2"]);
    assert_eq!(plant.meters[0].range, Some([0.0, 100.0]));
    assert_eq!(plant.meters[1].range, None);
}
