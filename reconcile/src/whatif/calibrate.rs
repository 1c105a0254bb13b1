//! The loop response model calibrated from a reconciled base case: the specifications that fix
//! every degree of freedom of the loop, each at its base-case value with the gradient of that
//! value on the base state (for the delta method), or at a setting.
//!
//! Held as the base case has them: each fresh feed's component flows; each reaction's
//! single-pass conversion of its key reactant (or its extent, on request or without a key);
//! each separator's component splits (the share of the unit's inflow of a component that
//! leaves by each outlet but one); each splitter's fractions but the one that takes the rest.

use crate::equations::Layout;
use crate::model::{Plant, UnitKind};
use crate::simulate::Spec;

pub use super::holds::{holds, quantity, Hold};
use super::settings::{Set, Setting};
use super::WhatIfError;

/// Flows below this (kmol/h) give no ratio to hold.
const TINY: f64 = 1e-9;

/// What each reaction is held at.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ReactionHold {
    /// The single-pass conversion of the key reactant (the extent when there is no key).
    #[default]
    Conversion,
    /// The extent, kmol/h.
    Extent,
}

/// One specification of the response model.
#[derive(Debug, Clone)]
pub struct Param {
    pub spec: Spec,
    /// ∂value/∂z_base (sparse); empty when the value is a setting (no uncertainty).
    pub grad: Vec<(usize, f64)>,
    /// What is held, for the list of holds; `None` for a setting and for each feed component
    /// but the last (the feed is listed once).
    pub hold: Option<Hold>,
}

/// The splitter outlet that moves to reach an inlet-fraction target.
pub fn free_outlet(plant: &Plant, free: Option<usize>) -> Result<usize, WhatIfError> {
    if let Some(s) = free {
        return Ok(s);
    }
    // Default: the one splitter outlet that leaves the plant (the purge).
    let purges: Vec<usize> = (0..plant.streams.len())
        .filter(|&s| {
            let st = &plant.streams[s];
            st.to.is_none()
                && st
                    .from
                    .is_some_and(|u| plant.units[u].kind == UnitKind::Splitter)
        })
        .collect();
    match purges.as_slice() {
        [one] => Ok(*one),
        [] => Err(WhatIfError::NoPurge),
        many => Err(WhatIfError::AmbiguousFree(
            many.iter()
                .map(|&s| format!("split:{}", plant.streams[s].id))
                .collect::<Vec<_>>()
                .join(", "),
        )),
    }
}

/// The specifications of the loop under the settings, from the base state `z`.
pub fn calibrate(
    plant: &Plant,
    layout: &Layout,
    z: &[f64],
    sets: &[Set],
    free: Option<usize>,
    hold: ReactionHold,
) -> Result<Vec<Param>, WhatIfError> {
    let mut params = Vec::new();
    let set_value = |want: Setting| sets.iter().find(|s| s.setting == want).map(|s| s.value);
    let target = sets.iter().find_map(|s| match s.setting {
        Setting::InletFraction { unit, component } => Some((unit, component, s.value)),
        _ => None,
    });
    let free = match target {
        Some(_) => Some(free_outlet(plant, free)?),
        None => None,
    };

    // Fresh feeds: every component flow, or the set total with the base composition.
    for (s, stream) in plant.streams.iter().enumerate() {
        if stream.from.is_some() {
            continue;
        }
        let cols: Vec<usize> = layout.stream_flows(plant, s).collect();
        let total: f64 = cols.iter().map(|&i| z[i]).sum();
        let set = set_value(Setting::Feed { stream: s });
        if set.is_some() && total <= TINY {
            return Err(WhatIfError::Unobservable(format!(
                "composition of feed \"{}\" (no flow in the base case)",
                stream.id
            )));
        }
        for (&i, &c) in cols.iter().zip(&stream.components) {
            let (value, grad) = match set {
                // n_c = F x_c with x_c = n_c / Σ n: ∂n_c/∂n_k = F (δ_ck − x_c) / Σ n.
                Some(f) => {
                    let x = z[i] / total;
                    let grad = cols
                        .iter()
                        .map(|&k| (k, f * (if k == i { 1.0 } else { 0.0 } - x) / total))
                        .collect();
                    (f * x, grad)
                }
                None => (z[i], vec![(i, 1.0)]),
            };
            params.push(Param {
                spec: Spec::ComponentFlow {
                    stream: stream.id.clone(),
                    component: plant.components[c].id.clone(),
                    value,
                },
                grad,
                hold: None,
            });
        }
        let hold = match set {
            Some(_) => Hold::FeedComposition {
                stream: stream.id.clone(),
            },
            None => Hold::Feed {
                stream: stream.id.clone(),
            },
        };
        params.last_mut().expect("a feed carries a component").hold = Some(hold);
    }

    // Reactions: single-pass conversion X = |ν_key| ξ / Σ_in n_key, or the extent ξ.
    for (r, reaction) in plant.reactions.iter().enumerate() {
        if let Some(x) = set_value(Setting::Conversion { reaction: r }) {
            params.push(Param {
                spec: Spec::Conversion {
                    reaction: reaction.id.clone(),
                    value: x,
                },
                grad: Vec::new(),
                hold: None,
            });
            continue;
        }
        let xi = layout.extent(r);
        match (reaction.key, hold) {
            (Some(key), ReactionHold::Conversion) => {
                let nu = reaction.coefficient(key).abs();
                let inlet: Vec<usize> = plant.units[reaction.unit]
                    .inlets
                    .iter()
                    .filter_map(|&s| layout.flow(plant, s, key))
                    .collect();
                let d: f64 = inlet.iter().map(|&i| z[i]).sum();
                let what = format!(
                    "single-pass conversion of \"{}\" in reaction \"{}\"",
                    plant.components[key].id, reaction.id
                );
                if d <= TINY {
                    return Err(WhatIfError::Unobservable(format!(
                        "{what} (no \"{}\" enters its reactor in the base case)",
                        plant.components[key].id
                    )));
                }
                let x = nu * z[xi] / d;
                let mut grad = vec![(xi, nu / d)];
                grad.extend(inlet.iter().map(|&i| (i, -x / d)));
                params.push(Param {
                    spec: Spec::Conversion {
                        reaction: reaction.id.clone(),
                        value: x,
                    },
                    grad,
                    hold: Some(Hold::Value { what }),
                });
            }
            _ => params.push(Param {
                spec: Spec::Extent {
                    reaction: reaction.id.clone(),
                    value: z[xi],
                },
                grad: vec![(xi, 1.0)],
                hold: Some(Hold::Value {
                    what: format!("extent of reaction \"{}\" (kmol/h)", reaction.id),
                }),
            }),
        }
    }

    // Units with several outlets: a splitter's fractions, any other unit's component splits.
    for unit in &plant.units {
        if unit.outlets.len() < 2 {
            continue;
        }
        if unit.kind == UnitKind::Splitter {
            splitter(plant, layout, z, unit, sets, free, &mut params)?;
        } else {
            component_splits(plant, layout, z, unit, &mut params)?;
        }
    }

    if let Some((unit, component, value)) = target {
        params.push(Param {
            spec: Spec::InletFraction {
                unit: plant.units[unit].id.clone(),
                component: plant.components[component].id.clone(),
                value,
            },
            grad: Vec::new(),
            hold: None,
        });
    }
    Ok(params)
}

/// φ of outlet o as (value, gradient): its own variable, or 1 − Σ of the others for the last.
fn fraction(
    layout: &Layout,
    unit: &crate::model::Unit,
    o: usize,
    z: &[f64],
) -> (f64, Vec<(usize, f64)>) {
    match layout.split(o) {
        Some(i) => (z[i], vec![(i, 1.0)]),
        None => {
            let others: Vec<usize> = unit
                .outlets
                .iter()
                .filter_map(|&k| layout.split(k))
                .collect();
            (
                1.0 - others.iter().map(|&i| z[i]).sum::<f64>(),
                others.iter().map(|&i| (i, -1.0)).collect(),
            )
        }
    }
}

fn splitter(
    plant: &Plant,
    layout: &Layout,
    z: &[f64],
    unit: &crate::model::Unit,
    sets: &[Set],
    free: Option<usize>,
    params: &mut Vec<Param>,
) -> Result<(), WhatIfError> {
    let set = |o: usize| {
        sets.iter()
            .find(|s| s.setting == Setting::Split { stream: o })
            .map(|s| s.value)
    };
    let moving = free.filter(|f| unit.outlets.contains(f));
    if let Some(f) = moving {
        if set(f).is_some() {
            return Err(WhatIfError::Conflict(format!(
                "split:{} is set and is also the split that moves to reach the inlet-fraction target",
                plant.streams[f].id
            )));
        }
    }
    // The outlet that takes the rest: the last one, unless it is set or moving; then the last
    // of the others that is neither.
    let rest = unit
        .outlets
        .iter()
        .rev()
        .copied()
        .find(|&o| set(o).is_none() && Some(o) != moving);
    let Some(rest) = rest else {
        // Every outlet set (or set and moving): their sum must be 1, and one of them follows.
        let total: f64 = unit.outlets.iter().filter_map(|&o| set(o)).sum();
        return Err(WhatIfError::Conflict(format!(
            "every outlet of splitter \"{}\" is set (their fractions sum to {total}); leave one to take the rest",
            unit.id
        )));
    };
    let set_total: f64 = unit.outlets.iter().filter_map(|&o| set(o)).sum();
    if set_total > 1.0 + 1e-12 {
        return Err(WhatIfError::Conflict(format!(
            "the fractions set on splitter \"{}\" sum to {set_total}, more than 1",
            unit.id
        )));
    }
    for &o in &unit.outlets {
        if o == rest || Some(o) == moving {
            continue;
        }
        let id = plant.streams[o].id.clone();
        let param = match set(o) {
            Some(v) => Param {
                spec: Spec::SplitFraction {
                    stream: id,
                    value: v,
                },
                grad: Vec::new(),
                hold: None,
            },
            None => {
                let (v, grad) = fraction(layout, unit, o, z);
                Param {
                    spec: Spec::SplitFraction {
                        stream: id.clone(),
                        value: v,
                    },
                    grad,
                    hold: Some(Hold::Value {
                        what: format!("split fraction of stream \"{id}\""),
                    }),
                }
            }
        };
        params.push(param);
    }
    Ok(())
}

/// The share of the unit's inflow of each component that leaves by each outlet carrying it,
/// but the last such outlet (which takes the rest).
fn component_splits(
    plant: &Plant,
    layout: &Layout,
    z: &[f64],
    unit: &crate::model::Unit,
    params: &mut Vec<Param>,
) -> Result<(), WhatIfError> {
    for (c, comp) in plant.components.iter().enumerate() {
        let outs: Vec<usize> = unit
            .outlets
            .iter()
            .copied()
            .filter(|&o| plant.streams[o].components.contains(&c))
            .collect();
        if outs.len() < 2 {
            continue;
        }
        let inlet: Vec<usize> = unit
            .inlets
            .iter()
            .filter_map(|&s| layout.flow(plant, s, c))
            .collect();
        let d: f64 = inlet.iter().map(|&i| z[i]).sum();
        for &o in &outs[..outs.len() - 1] {
            let what = format!(
                "split of \"{}\" to stream \"{}\" in {} \"{}\"",
                comp.id, plant.streams[o].id, unit.kind, unit.id
            );
            if d <= TINY {
                return Err(WhatIfError::Unobservable(format!(
                    "{what} (no \"{}\" enters the unit in the base case)",
                    comp.id
                )));
            }
            let i = layout.flow(plant, o, c).expect("carried");
            // R = n_o / Σ_in n: ∂R/∂n_o = 1/d, ∂R/∂n_in = −R/d.
            let r = z[i] / d;
            let mut grad = vec![(i, 1.0 / d)];
            grad.extend(inlet.iter().map(|&k| (k, -r / d)));
            params.push(Param {
                spec: Spec::Recovery {
                    stream: plant.streams[o].id.clone(),
                    component: comp.id.clone(),
                    value: r,
                },
                grad,
                hold: Some(Hold::Value { what }),
            });
        }
    }
    Ok(())
}
