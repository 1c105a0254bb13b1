//! The starting point of the iteration (docs/methods.md §2): bilinear problems have poor starting
//! regions, so start from what the meters say. Total flows come from flow meters and are
//! propagated through total mole balances; compositions come from analysers, else from the
//! mixture of the streams upstream, else evenly over the carried components; split fractions
//! from the outlet flows; extents from the least-squares fit of the reactor balances.

use nalgebra::{DMatrix, DVector};

use crate::equations::Layout;
use crate::model::{Plant, UnitKind};
use crate::solve::Measured;
use crate::uom::Quantity;

/// Smallest starting mole fraction: keeps every flow off its bound at the start.
const MIN_FRACTION: f64 = 1e-6;

pub fn initial_point(plant: &Plant, layout: &Layout, measured: &[Measured]) -> Vec<f64> {
    let ns = plant.streams.len();
    let nc = plant.components.len();
    let base = |m: &Measured| m.value / plant.meters[m.meter].uom.factor_from_base();

    // Compositions: analysers first.
    let mut comp: Vec<Option<Vec<f64>>> = vec![None; ns];
    for s in 0..ns {
        let mut x = vec![f64::NAN; nc];
        let mut any = false;
        for m in measured
            .iter()
            .filter(|m| plant.meters[m.meter].stream == s)
        {
            let meter = &plant.meters[m.meter];
            // Only an analyser of mole fractions over every carried component gives the
            // composition directly.
            let analyser = match meter.quantity {
                Quantity::MoleFraction => meter.basis.is_none(),
                Quantity::MolarFlow
                | Quantity::MassFlow
                | Quantity::StdVolumeFlow
                | Quantity::ComponentFlow
                | Quantity::MassFraction => false,
            };
            if analyser {
                x[meter.component.expect("validated")] = base(m).clamp(0.0, 1.0);
                any = true;
            }
        }
        if any {
            comp[s] = Some(fill_composition(plant, s, &x));
        }
    }
    // Then propagate downstream: a stream without analyser takes its unit's inlet mixture.
    for _ in 0..ns {
        let mut changed = false;
        for s in 0..ns {
            if comp[s].is_some() {
                continue;
            }
            let Some(u) = plant.streams[s].from else {
                continue;
            };
            let known: Vec<&Vec<f64>> = plant.units[u]
                .inlets
                .iter()
                .filter_map(|&i| comp[i].as_ref())
                .collect();
            if known.is_empty() {
                continue;
            }
            let mut x = vec![0.0; nc];
            for k in &known {
                for c in 0..nc {
                    x[c] += k[c] / known.len() as f64;
                }
            }
            let mut masked = vec![f64::NAN; nc];
            let total: f64 = plant.streams[s].components.iter().map(|&c| x[c]).sum();
            if total > 0.0 {
                for &c in &plant.streams[s].components {
                    masked[c] = x[c] / total;
                }
            }
            comp[s] = Some(fill_composition(plant, s, &masked));
            changed = true;
        }
        if !changed {
            break;
        }
    }
    let comp: Vec<Vec<f64>> = (0..ns)
        .map(|s| {
            comp[s]
                .clone()
                .unwrap_or_else(|| fill_composition(plant, s, &vec![f64::NAN; nc]))
        })
        .collect();

    // Total flows from flow meters.
    let mut flow: Vec<Option<f64>> = vec![None; ns];
    for m in measured {
        let meter = &plant.meters[m.meter];
        let s = meter.stream;
        let x = &comp[s];
        let mean_mass: f64 = (0..nc).map(|c| x[c] * plant.components[c].molar_mass).sum();
        let estimate = match meter.quantity {
            Quantity::MolarFlow | Quantity::StdVolumeFlow => Some(base(m)),
            Quantity::MassFlow => (mean_mass > 0.0).then(|| base(m) / mean_mass),
            Quantity::ComponentFlow => {
                let c = meter.component.expect("validated");
                (x[c] > 1e-3).then(|| base(m) / x[c])
            }
            Quantity::MoleFraction | Quantity::MassFraction => None,
        };
        if let Some(f) = estimate.filter(|f| f.is_finite() && *f > 0.0) {
            flow[s].get_or_insert(f);
        }
    }
    // Propagate through total mole balances where a unit has one stream unknown.
    for _ in 0..ns {
        let mut changed = false;
        for u in &plant.units {
            let unknown: Vec<usize> = u
                .inlets
                .iter()
                .chain(&u.outlets)
                .copied()
                .filter(|&s| flow[s].is_none())
                .collect();
            if unknown.len() != 1 || !u.reactions.is_empty() {
                continue;
            }
            let s = unknown[0];
            let inflow: f64 = u.inlets.iter().filter_map(|&i| flow[i]).sum();
            let outflow: f64 = u.outlets.iter().filter_map(|&o| flow[o]).sum();
            let value = if u.inlets.contains(&s) {
                outflow - inflow
            } else {
                inflow - outflow
            };
            if value > 0.0 {
                flow[s] = Some(value);
                changed = true;
            }
        }
        if !changed {
            break;
        }
    }
    let known: Vec<f64> = flow.iter().flatten().copied().collect();
    let fallback = if known.is_empty() {
        100.0
    } else {
        known.iter().sum::<f64>() / known.len() as f64
    };
    // Outlets of a splitter without a flow share the rest of the inlet.
    for u in &plant.units {
        match u.kind {
            UnitKind::Splitter => {
                let inlet = flow[u.inlets[0]].unwrap_or(fallback);
                let missing: Vec<usize> = u
                    .outlets
                    .iter()
                    .copied()
                    .filter(|&o| flow[o].is_none())
                    .collect();
                let taken: f64 = u.outlets.iter().filter_map(|&o| flow[o]).sum();
                let rest = (inlet - taken).max(0.05 * inlet);
                for &o in &missing {
                    flow[o] = Some(rest / missing.len() as f64);
                }
            }
            UnitKind::Mixer | UnitKind::Reactor | UnitKind::Separator | UnitKind::Node => {}
        }
    }
    let flow: Vec<f64> = flow.into_iter().map(|f| f.unwrap_or(fallback)).collect();

    let mut z = vec![0.0; layout.n];
    for s in 0..ns {
        for &c in &plant.streams[s].components {
            z[layout.flow(plant, s, c).expect("carried")] = flow[s] * comp[s][c];
        }
    }
    // Split fractions from outlet flows, and outlets made consistent with them.
    for u in &plant.units {
        match u.kind {
            UnitKind::Splitter => {
                let total: f64 = u.outlets.iter().map(|&o| flow[o]).sum();
                let inlet = u.inlets[0];
                for &o in &u.outlets[..u.outlets.len() - 1] {
                    let phi = (flow[o] / total).clamp(1e-3, 1.0 - 1e-3);
                    z[layout.split(o).expect("split var")] = phi;
                    for &c in &plant.streams[inlet].components {
                        let i = layout.flow(plant, inlet, c).expect("carried");
                        z[layout.flow(plant, o, c).expect("same components")] = phi * z[i];
                    }
                }
            }
            UnitKind::Mixer | UnitKind::Reactor | UnitKind::Separator | UnitKind::Node => {}
        }
    }
    fit_extents(plant, layout, &mut z);
    z
}

/// A full composition for stream s: given fractions where known (not NaN), the rest shared
/// evenly, floored at MIN_FRACTION and renormalised over the carried components.
fn fill_composition(plant: &Plant, s: usize, x: &[f64]) -> Vec<f64> {
    let carried = &plant.streams[s].components;
    let known: f64 = carried
        .iter()
        .filter(|&&c| x[c].is_finite())
        .map(|&c| x[c])
        .sum();
    let unknown = carried.iter().filter(|&&c| !x[c].is_finite()).count();
    let share = if unknown > 0 {
        ((1.0 - known).max(0.0) / unknown as f64).max(MIN_FRACTION)
    } else {
        0.0
    };
    let mut out = vec![0.0; x.len()];
    for &c in carried {
        out[c] = if x[c].is_finite() { x[c] } else { share }.max(MIN_FRACTION);
    }
    let total: f64 = out.iter().sum();
    out.iter_mut().for_each(|v| *v /= total);
    out
}

/// Extents that best close each reactor's component balances at the current flows.
fn fit_extents(plant: &Plant, layout: &Layout, z: &mut [f64]) {
    for u in plant.units.iter().filter(|u| !u.reactions.is_empty()) {
        let nc = plant.components.len();
        let nr = u.reactions.len();
        let a = DMatrix::from_fn(nc, nr, |c, k| {
            plant.reactions[u.reactions[k]].coefficient(c)
        });
        let b = DVector::from_fn(nc, |c, _| {
            let sum = |list: &[usize]| -> f64 {
                list.iter()
                    .filter_map(|&s| layout.flow(plant, s, c))
                    .map(|i| z[i])
                    .sum()
            };
            sum(&u.outlets) - sum(&u.inlets)
        });
        let svd = a.svd(true, true);
        if let Ok(x) = svd.solve(&b, 1e-12) {
            for k in 0..nr {
                let r = u.reactions[k];
                let v = if plant.reactions[r].irreversible {
                    x[k].max(1e-6)
                } else {
                    x[k]
                };
                z[layout.extent(r)] = v;
            }
        }
    }
}
