//! `check-model`'s answer for a valid model: a short account of what the file contains, so a
//! user can see at a glance that the engine read what they meant to write.

use std::fmt::Write;

use reconcile::model::Quantity;
use reconcile::Plant;

pub fn summary(plant: &Plant) -> String {
    let mut out = String::new();
    // Writing to a String cannot fail; the results are ignored for that reason only.
    let _ = writeln!(out, "model \"{}\" is valid", plant.name);
    let _ = writeln!(
        out,
        "  period {} ({} s), alpha {}",
        plant.spec.period.trim(),
        plant.period_seconds,
        plant.alpha
    );
    let _ = writeln!(
        out,
        "  {}: {}",
        count(plant.components.len(), "component"),
        join(plant.components.iter().map(|c| c.id.clone()))
    );
    let inerts = join(
        plant
            .components
            .iter()
            .filter(|c| c.inert)
            .map(|c| c.id.clone()),
    );
    let _ = writeln!(
        out,
        "  inerts: {}",
        if inerts.is_empty() { "none" } else { &inerts }
    );
    let _ = writeln!(
        out,
        "  {}: {}",
        count(plant.units.len(), "unit"),
        join(plant.units.iter().map(|u| format!("{} ({})", u.id, u.kind)))
    );
    let _ = writeln!(out, "  {}", count(plant.reactions.len(), "reaction"));
    for r in &plant.reactions {
        let _ = writeln!(
            out,
            "    {} in {}: {}{}",
            r.id,
            plant.units[r.unit].id,
            equation(plant, &r.stoichiometry),
            r.key
                .map(|k| format!(" (key {})", plant.components[k].id))
                .unwrap_or_default()
        );
    }
    let _ = writeln!(out, "  {}", count(plant.streams.len(), "stream"));
    let _ = writeln!(out, "  {}", count(plant.meters.len(), "meter"));
    let all = [
        Quantity::MolarFlow,
        Quantity::MassFlow,
        Quantity::StdVolumeFlow,
        Quantity::ComponentFlow,
        Quantity::MoleFraction,
        Quantity::MassFraction,
    ];
    for q in all {
        let n = plant.meters.iter().filter(|m| m.quantity == q).count();
        if n > 0 {
            let _ = writeln!(out, "    {}: {n}", q.as_str());
        }
    }
    out
}

/// `N2 + 3 H2 -> 2 NH3`: reactants (negative coefficients) left, products right.
fn equation(plant: &Plant, stoichiometry: &[(usize, f64)]) -> String {
    let side = |sign: f64| {
        stoichiometry
            .iter()
            .filter(|(_, v)| v * sign > 0.0)
            .map(|&(c, v)| {
                let v = v.abs();
                let id = &plant.components[c].id;
                if v == 1.0 {
                    id.clone()
                } else {
                    format!("{v} {id}")
                }
            })
            .collect::<Vec<_>>()
            .join(" + ")
    };
    format!("{} -> {}", side(-1.0), side(1.0))
}

fn join(items: impl Iterator<Item = String>) -> String {
    items.collect::<Vec<_>>().join(", ")
}

fn count(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}
