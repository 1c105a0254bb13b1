//! Why a what-if has no steady state, in the trade's terms: a component that enters and that
//! no open outlet can take out of the plant accumulates — an inert, or a reactant fed beyond
//! stoichiometry (which behaves like an inert). An outlet is closed when the specifications
//! send it none of a component: a splitter outlet at a fraction of 0, a component split of 0.

use crate::model::{Plant, UnitKind};
use crate::simulate::Spec;

/// Reactants fed within this relative margin of stoichiometric proportion are taken as fed
/// in it (a reconciled feed carries rounding of about 1e-9).
const STOICHIOMETRIC: f64 = 1e-6;

/// The reason a loop under `specs` has no steady state, or `None` when every fed component has
/// a way out (then the cause is elsewhere, and the solver's own message says what it found).
pub fn accumulation(plant: &Plant, specs: &[Spec]) -> Option<String> {
    let closed = closed_outlets(plant, specs);
    let feed_of = |c: usize| -> f64 {
        specs
            .iter()
            .filter_map(|s| match s {
                Spec::ComponentFlow {
                    stream,
                    component,
                    value,
                } if plant.component_index(component) == Some(c)
                    && plant
                        .stream_index(stream)
                        .is_some_and(|k| plant.streams[k].from.is_none()) =>
                {
                    Some(*value)
                }
                _ => None,
            })
            .sum()
    };
    let mut notes = Vec::new();
    let mut balanced: Vec<String> = Vec::new();
    for (c, comp) in plant.components.iter().enumerate() {
        let fed = feed_of(c);
        if fed <= 0.0 || leaves(plant, c, &closed) {
            continue;
        }
        let closed_names: Vec<String> = closed
            .iter()
            .filter(|(s, k)| k.is_none_or(|k| k == c) && plant.streams[*s].components.contains(&c))
            .map(
                |(s, k)| match (plant.streams[*s].from.map(|u| plant.units[u].kind), k) {
                    (Some(UnitKind::Splitter), _) => format!("split:{} at 0", plant.streams[*s].id),
                    _ => format!(
                        "no \"{}\" sent to stream \"{}\"",
                        comp.id, plant.streams[*s].id
                    ),
                },
            )
            .collect();
        let because = if closed_names.is_empty() {
            "no stream takes it out of the plant".to_string()
        } else {
            format!(
                "with {} no stream takes it out of the plant",
                closed_names.join(", ")
            )
        };
        let reacting: Vec<&crate::model::Reaction> = plant
            .reactions
            .iter()
            .filter(|r| r.coefficient(c) < 0.0)
            .collect();
        if reacting.is_empty() {
            notes.push(format!(
                "\"{}\" accumulates: it enters with the fresh feed ({fed:.4} kmol/h) and {because}; an inert needs a purge",
                comp.id
            ));
            continue;
        }
        // A reactant that can leave only by reaction: fed beyond what its reactions can take
        // with the other reactants fed, it accumulates; fed in exact proportion, it does not,
        // but nothing then fixes how much of it circulates.
        let mut excess = None;
        let mut limiting_somewhere = false;
        for r in &reacting {
            let nu_c = r.coefficient(c).abs();
            let limiting = r
                .stoichiometry
                .iter()
                .filter(|&&(k, nu)| nu < 0.0 && k != c)
                .map(|&(k, nu)| (k, feed_of(k) / nu.abs()))
                .min_by(|a, b| a.1.total_cmp(&b.1));
            if let Some((k, extent)) = limiting {
                if fed < nu_c * extent * (1.0 - STOICHIOMETRIC) {
                    // c limits this reaction: it is used up, another reactant is in excess.
                    limiting_somewhere = true;
                }
                if fed > nu_c * extent * (1.0 + STOICHIOMETRIC) {
                    excess = Some(format!(
                        "fed at {fed:.4} kmol/h, beyond the {:.4} kmol/h that the \"{}\" fed can react by \"{}\"",
                        nu_c * extent,
                        plant.components[k].id,
                        r.id
                    ));
                }
            }
        }
        match excess {
            Some(what) => notes.push(format!(
                "\"{}\" accumulates: it can leave only by reaction ({what}) and {because}; a reactant fed beyond stoichiometry needs a purge",
                comp.id
            )),
            None if limiting_somewhere => {}
            None => balanced.push(comp.id.clone()),
        }
    }
    if !balanced.is_empty() {
        notes.push(format!(
            "{} can leave only by reaction and {} fed in stoichiometric proportion, so the balances do not fix how much circulates (the loop's pressure would): there is no isolated steady state",
            balanced
                .iter()
                .map(|c| format!("\"{c}\""))
                .collect::<Vec<_>>()
                .join(" and "),
            if balanced.len() == 1 { "is" } else { "are" }
        ));
    }
    (!notes.is_empty()).then(|| notes.join("; "))
}

/// Outlets the specifications close: (stream, None) for a splitter outlet at fraction 0 (it
/// takes nothing), (stream, Some(c)) for a component split of 0.
fn closed_outlets(plant: &Plant, specs: &[Spec]) -> Vec<(usize, Option<usize>)> {
    let mut closed = Vec::new();
    for unit in &plant.units {
        if unit.kind != UnitKind::Splitter {
            continue;
        }
        let fraction = |o: usize| {
            specs.iter().find_map(|s| match s {
                Spec::SplitFraction { stream, value } if plant.stream_index(stream) == Some(o) => {
                    Some(*value)
                }
                _ => None,
            })
        };
        let given: Vec<(usize, Option<f64>)> =
            unit.outlets.iter().map(|&o| (o, fraction(o))).collect();
        let unset: Vec<usize> = given
            .iter()
            .filter(|(_, f)| f.is_none())
            .map(|(o, _)| *o)
            .collect();
        for &(o, f) in &given {
            if f.is_some_and(|f| f <= 0.0) {
                closed.push((o, None));
            }
        }
        // The one outlet that takes the rest is closed when the others take everything.
        if let [rest] = unset.as_slice() {
            let sum: f64 = given.iter().filter_map(|(_, f)| *f).sum();
            if sum >= 1.0 {
                closed.push((*rest, None));
            }
        }
    }
    for s in specs {
        if let Spec::Recovery {
            stream,
            component,
            value,
        } = s
        {
            if *value <= 0.0 {
                if let (Some(o), Some(c)) =
                    (plant.stream_index(stream), plant.component_index(component))
                {
                    closed.push((o, Some(c)));
                }
            }
        }
    }
    closed
}

/// Can component c, from the units its fresh feeds enter, reach a stream that leaves the plant
/// through streams open to it?
fn leaves(plant: &Plant, c: usize, closed: &[(usize, Option<usize>)]) -> bool {
    let open = |s: usize| {
        plant.streams[s].components.contains(&c)
            && !closed
                .iter()
                .any(|&(o, k)| o == s && k.is_none_or(|k| k == c))
    };
    let mut seen = vec![false; plant.units.len()];
    let mut stack: Vec<usize> = plant
        .streams
        .iter()
        .filter(|s| s.from.is_none() && s.components.contains(&c))
        .filter_map(|s| s.to)
        .collect();
    while let Some(u) = stack.pop() {
        if std::mem::replace(&mut seen[u], true) {
            continue;
        }
        for &o in &plant.units[u].outlets {
            if !open(o) {
                continue;
            }
            match plant.streams[o].to {
                None => return true,
                Some(next) => stack.push(next),
            }
        }
    }
    false
}
