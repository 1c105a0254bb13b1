//! Structural zeros: component flows that no path can bring a component to (docs/methods.md
//! §1). A stream from outside brings what it lists; a unit passes a component to its outlets
//! when an inlet brings it or one of its reactions can make it. A component listed on a
//! stream that nothing upstream brings is zero in every state the model means: with no source
//! the balances leave it at most a circulation with no origin, and n ≥ 0 the rest.
//!
//! They depend only on the model, so they are found once per model revision
//! (in `Prepared`) and held at zero from the start of every solve: the estimate then never
//! "rests on a bound" because of them, and the restarts run for such a state do not run.

use crate::equations::Layout;
use crate::model::Plant;

/// The states of `layout` that no path brings their component to: `true` at the index of
/// every such component flow n_{s,c}.
///
/// What each stream brings grows from the feeds until a pass over the units adds nothing: a
/// unit passes component c on when some inlet brings it, or when one of its reactions can make
/// it (a positive coefficient, or any nonzero coefficient of a reversible reaction).
pub fn structural_zeros(plant: &Plant, layout: &Layout) -> Vec<bool> {
    let mut brought = vec![false; layout.n];
    for (s, stream) in plant.streams.iter().enumerate() {
        if stream.from.is_none() {
            for i in layout.stream_flows(plant, s) {
                brought[i] = true;
            }
        }
    }
    // A chain of k units takes at most k passes.
    loop {
        let mut changed = false;
        for (ui, unit) in plant.units.iter().enumerate() {
            for &outlet in &unit.outlets {
                for (i, &c) in layout
                    .stream_flows(plant, outlet)
                    .zip(&plant.streams[outlet].components)
                {
                    if !brought[i] && supplies(plant, layout, &brought, ui, c) {
                        brought[i] = true;
                        changed = true;
                    }
                }
            }
        }
        if !changed {
            break;
        }
    }
    // Only flows: extents and split fractions are not claimed.
    (0..layout.n)
        .map(|i| i < layout.extent_start && !brought[i])
        .collect()
}

/// Whether unit `ui` can pass component c to its outlets, given what its inlets bring.
fn supplies(plant: &Plant, layout: &Layout, brought: &[bool], ui: usize, c: usize) -> bool {
    let unit = &plant.units[ui];
    let fed = unit
        .inlets
        .iter()
        .any(|&s| layout.flow(plant, s, c).is_some_and(|i| brought[i]));
    let made = unit.reactions.iter().any(|&r| {
        let reaction = &plant.reactions[r];
        let nu = reaction.coefficient(c);
        nu > 0.0 || (nu != 0.0 && !reaction.irreversible)
    });
    fed || made
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::parse_plant;

    /// A loop where water is listed on every stream but only the product's feed brings it:
    /// makeup (A, B, W) → mix → reactor (A → B) → split → purge, recycle → mix; and a side
    /// stream that lists W although its source unit gets none.
    pub(crate) const PLANT: &str = r#"
        name = "structure"
        period = "1h"
        [[component]]
        id = "A"
        molar_mass = 10.0
        [[component]]
        id = "B"
        molar_mass = 10.0
        [[component]]
        id = "W"
        molar_mass = 18.0
        [[unit]]
        id = "mix"
        kind = "mixer"
        [[unit]]
        id = "rx"
        kind = "reactor"
        [[unit]]
        id = "split"
        kind = "splitter"
        [[unit]]
        id = "side"
        kind = "mixer"
        [[reaction]]
        id = "a-to-b"
        unit = "rx"
        stoichiometry = { A = -1, B = 1 }
        key = "A"
        [[stream]]
        id = "makeup"
        from = "outside"
        to = "mix"
        components = ["A", "B"]
        [[stream]]
        id = "rx-feed"
        from = "mix"
        to = "rx"
        [[stream]]
        id = "rx-out"
        from = "rx"
        to = "split"
        [[stream]]
        id = "purge"
        from = "split"
        to = "outside"
        [[stream]]
        id = "recycle"
        from = "split"
        to = "mix"
        [[stream]]
        id = "water"
        from = "outside"
        to = "side"
        components = ["W"]
        [[stream]]
        id = "side-out"
        from = "side"
        to = "outside"
        [[meter]]
        tag = "F1"
        stream = "makeup"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 1.0
        [[meter]]
        tag = "F2"
        stream = "rx-feed"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 5.0
        [[meter]]
        tag = "F3"
        stream = "purge"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 1.0
        [[meter]]
        tag = "F4"
        stream = "recycle"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 4.0
        [[meter]]
        tag = "A3"
        stream = "purge"
        quantity = "mole_fraction"
        component = "A"
        uom = "fraction"
        sigma = 0.01
        [[meter]]
        tag = "F5"
        stream = "water"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 0.1
        [[meter]]
        tag = "F6"
        stream = "side-out"
        quantity = "molar_flow"
        uom = "kmol/h"
        sigma = 0.1
    "#;

    #[test]
    fn a_component_no_path_brings_is_a_structural_zero_and_nothing_else_is() {
        let plant = parse_plant(PLANT).expect("valid model");
        let layout = Layout::new(&plant);
        let zero = structural_zeros(&plant, &layout);
        let named: Vec<String> = (0..layout.n)
            .filter(|&i| zero[i])
            .map(|i| crate::equations::var_name(&plant, &layout, i))
            .collect();
        let w = |s: &str| format!("flow of \"W\" in stream \"{s}\"");
        // W reaches the loop from nowhere: every loop stream's W is forced to zero, however it
        // circulates (the purge takes its share of all of it). The side mixer is fed water:
        // its outlet's W is not forced, and its A and B are.
        let mut expected = vec![w("rx-feed"), w("rx-out"), w("purge"), w("recycle")];
        expected.extend([
            "flow of \"A\" in stream \"side-out\"".to_string(),
            "flow of \"B\" in stream \"side-out\"".to_string(),
        ]);
        expected.sort();
        let mut named = named;
        named.sort();
        assert_eq!(named, expected);
    }
}
