//! An inlet-fraction target, reached by moving the free purge split: where that split stands
//! at a state, and what moving it alone can give when a target is out of reach.

use crate::model::Plant;

use super::base::BaseCase;
use super::calibrate::ReactionHold;
use super::point;
use super::settings::{Set, Setting};
use super::WhatIfError;

/// The fraction of its splitter's inlet that outlet `stream` takes at state z.
pub fn free_fraction(
    plant: &Plant,
    layout: &crate::equations::Layout,
    stream: usize,
    z: &[f64],
) -> f64 {
    match layout.split(stream) {
        Some(i) => z[i],
        None => {
            let unit = plant.streams[stream].from.expect("a splitter outlet");
            1.0 - plant.units[unit]
                .outlets
                .iter()
                .filter_map(|&o| layout.split(o))
                .map(|i| z[i])
                .sum::<f64>()
        }
    }
}

/// What an inlet fraction can be by moving the purge alone: its value with everything purged
/// (no recycle) and with a purge of 0.1 %, as the trade would say why a target is out of reach.
pub(crate) fn reachable(
    plant: &Plant,
    base: &BaseCase,
    sets: &[Set],
    target: &Set,
    purge: usize,
    hold: ReactionHold,
) -> Result<Option<String>, WhatIfError> {
    let Setting::InletFraction { unit, component } = target.setting else {
        return Ok(None);
    };
    let name = format!("split:{}", plant.streams[purge].id);
    let at = |phi: f64| -> Result<Option<f64>, WhatIfError> {
        let mut s: Vec<Set> = sets
            .iter()
            .filter(|s| s.name != target.name)
            .cloned()
            .collect();
        s.push(Set {
            name: name.clone(),
            setting: Setting::Split { stream: purge },
            value: phi,
        });
        let calibrated = base.calibrated(plant, &s, None, hold)?;
        Ok(match point::solve(plant, &calibrated, base.start())? {
            Ok(solved) => {
                let inlets = &plant.units[unit].inlets;
                let of = |c: Option<usize>| -> f64 {
                    inlets
                        .iter()
                        .flat_map(|&k| {
                            base.layout()
                                .stream_flows(plant, k)
                                .zip(&plant.streams[k].components)
                        })
                        .filter(|(_, &k)| c.is_none_or(|c| c == k))
                        .map(|(i, _)| solved.z[i])
                        .sum()
                };
                Some(of(Some(component)) / of(None).max(1e-300))
            }
            Err(_) => None,
        })
    };
    let (open, nearly_closed) = (at(1.0)?, at(1e-3)?);
    let what = format!(
        "\"{}\" at the inlet of \"{}\"",
        plant.components[component].id, plant.units[unit].id
    );
    Ok(match (open, nearly_closed) {
        (Some(a), Some(b)) => Some(format!(
            "moving {name} alone, {what} goes from {a:.6} with everything purged ({name} = 1, no recycle) to {b:.6} at {name} = 0.001"
        )),
        (Some(a), None) => Some(format!(
            "moving {name} alone, {what} is {a:.6} with everything purged ({name} = 1, no recycle)"
        )),
        _ => None,
    })
}
