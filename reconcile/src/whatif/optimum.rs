//! The economic optimum of the purge: the split of the free purge outlet that maximises the
//! margin
//!
//!   M(φ) = Σ_c price_c · made_c − Σ_c value_c · lost_c − cost · recycle,
//!
//! (product made in the product streams, reactant lost in the purge, the recycle flow as a
//! proxy for compression), within [φ_lo, φ_hi] and an upper limit on an inert's mole fraction
//! at a reactor inlet, which sets the smallest purge allowed. A bounded one-dimensional search
//! by golden section (Kiefer 1953; as in Press et al., *Numerical Recipes*, 3rd ed., §10.2),
//! each evaluation a what-if point; σ of the margin at the optimum by the delta method, with
//! the purge split held at the optimum.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::model::Plant;
use crate::report::CAUTION;
use crate::uncertainty::Uncertainty;

use super::base::BaseCase;
use super::calibrate::{free_outlet, holds, ReactionHold};
use super::point::{self, product_streams, Point, Solved};
use super::settings::{Set, Setting};
use super::WhatIfError;

/// Golden-section search stops when the bracket is this narrow (in split fraction).
const TOLERANCE: f64 = 1e-7;

/// An upper limit on a component's mole fraction at a reactor inlet.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct InletLimit {
    pub unit: String,
    pub component: String,
    pub max: f64,
}

/// The values of the trade-off, per kmol (any currency, the same throughout).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Economics {
    /// Price per kmol of each product component made.
    pub product_price: BTreeMap<String, f64>,
    /// Value per kmol of each reactant lost in the purge.
    pub loss_value: BTreeMap<String, f64>,
    /// Cost per kmol of recycle (a compression proxy).
    pub recycle_cost: f64,
    pub inlet_limit: Option<InletLimit>,
    /// The purge split searched: [lo, hi].
    pub range: [f64; 2],
}

/// The optimum found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Optimum {
    /// The setting moved, `split:STREAM`.
    pub setting: String,
    pub value: f64,
    /// Margin per hour at the optimum.
    pub margin: f64,
    pub margin_sigma: f64,
    /// What bounds the optimum, when it lies on a limit.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bound: Option<String>,
    /// What was held constant.
    pub holds: Vec<String>,
    pub point: Point,
    pub caution: String,
}

/// The margin's gradient on the state: a linear function of it.
pub fn margin_gradient(
    plant: &Plant,
    layout: &crate::equations::Layout,
    purge: usize,
    e: &Economics,
) -> Result<Vec<(usize, f64)>, WhatIfError> {
    let component = |id: &str| {
        plant
            .component_index(id)
            .ok_or_else(|| WhatIfError::UnknownComponent(id.to_string()))
    };
    let mut grad: BTreeMap<usize, f64> = BTreeMap::new();
    let products = product_streams(plant);
    for (id, price) in &e.product_price {
        let c = component(id)?;
        for &s in &products {
            if let Some(i) = layout.flow(plant, s, c) {
                *grad.entry(i).or_default() += price;
            }
        }
    }
    for (id, value) in &e.loss_value {
        let c = component(id)?;
        if let Some(i) = layout.flow(plant, purge, c) {
            *grad.entry(i).or_default() -= value;
        }
    }
    let unit = plant.streams[purge].from.expect("a splitter outlet");
    for &o in &plant.units[unit].outlets {
        if plant.streams[o].to.is_some() {
            for i in layout.stream_flows(plant, o) {
                *grad.entry(i).or_default() -= e.recycle_cost;
            }
        }
    }
    Ok(grad.into_iter().collect())
}

fn check(e: &Economics) -> Result<(), WhatIfError> {
    let all = e
        .product_price
        .values()
        .chain(e.loss_value.values())
        .chain(std::iter::once(&e.recycle_cost))
        .chain(e.range.iter());
    if all.clone().any(|v| !v.is_finite()) {
        return Err(WhatIfError::Economics(
            "every value must be a finite number".into(),
        ));
    }
    let [lo, hi] = e.range;
    if !(0.0..=1.0).contains(&lo) || !(0.0..=1.0).contains(&hi) || lo >= hi {
        return Err(WhatIfError::Economics(format!(
            "the purge range [{lo}, {hi}] must lie in [0, 1] with its lower end first"
        )));
    }
    if let Some(l) = &e.inlet_limit {
        if !(l.max.is_finite() && (0.0..=1.0).contains(&l.max)) {
            return Err(WhatIfError::Economics(format!(
                "inlet limit {}:{} = {} is outside [0, 1]",
                l.unit, l.component, l.max
            )));
        }
    }
    Ok(())
}

/// The purge split that maximises the margin.
pub fn optimum(
    plant: &Plant,
    base: &BaseCase,
    sets: &[Set],
    free: Option<usize>,
    hold: ReactionHold,
    e: &Economics,
) -> Result<Optimum, WhatIfError> {
    check(e)?;
    let purge = free_outlet(plant, free)?;
    let name = format!("split:{}", plant.streams[purge].id);
    if sets
        .iter()
        .any(|s| s.setting == (Setting::Split { stream: purge }))
    {
        return Err(WhatIfError::Conflict(format!(
            "{name} is set, and it is the split the optimum moves"
        )));
    }
    let layout = base.layout();
    let grad = margin_gradient(plant, layout, purge, e)?;
    let at = |phi: f64, start: &[f64]| -> Result<(Vec<Set>, Result<Solved, String>), WhatIfError> {
        let mut s = sets.to_vec();
        s.push(Set {
            name: name.clone(),
            setting: Setting::Split { stream: purge },
            value: phi,
        });
        let calibrated = base.calibrated(plant, &s, free, hold)?;
        Ok((s, point::solve(plant, &calibrated, start)?))
    };
    let margin = |solved: &Result<Solved, String>| match solved {
        Ok(s) => grad.iter().map(|&(i, a)| a * s.z[i]).sum(),
        Err(_) => f64::NEG_INFINITY,
    };

    // The inert limit sets the smallest purge: the split at which the inlet fraction is at the
    // limit (a what-if with that target).
    let [mut lo, hi] = e.range;
    let mut bound_by_limit = false;
    if let Some(l) = &e.inlet_limit {
        let target = format!("inlet_fraction:{}:{}", l.unit, l.component);
        let setting = Setting::parse(plant, &target)?;
        let mut s = sets.to_vec();
        s.push(Set {
            name: target.clone(),
            setting,
            value: l.max,
        });
        let calibrated = base.calibrated(plant, &s, Some(purge), hold)?;
        match point::solve(plant, &calibrated, base.start())? {
            Ok(solved) => {
                let phi = super::free_fraction(plant, layout, purge, &solved.z);
                if phi > lo {
                    lo = phi;
                    bound_by_limit = true;
                }
            }
            Err(reason) => {
                return Err(WhatIfError::Unreachable {
                    name: target,
                    value: l.max,
                    reason,
                })
            }
        }
        if lo >= hi {
            return Err(WhatIfError::Economics(format!(
                "the inlet limit needs a purge split of at least {lo:.6}, above the range's upper end {hi}"
            )));
        }
    }

    // Golden section on [a, b] for the maximum of M.
    let g = (5.0_f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (lo, hi);
    let start = base.start().to_vec();
    let mut x1 = b - g * (b - a);
    let mut x2 = a + g * (b - a);
    let mut f1 = margin(&at(x1, &start)?.1);
    let mut f2 = margin(&at(x2, &start)?.1);
    while b - a > TOLERANCE {
        if f1 >= f2 {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = b - g * (b - a);
            f1 = margin(&at(x1, &start)?.1);
        } else {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = a + g * (b - a);
            f2 = margin(&at(x2, &start)?.1);
        }
    }
    // The ends are candidates too: golden section never evaluates them.
    let mid = 0.5 * (a + b);
    let mut best = (mid, margin(&at(mid, &start)?.1));
    for x in [lo, hi] {
        let f = margin(&at(x, &start)?.1);
        if f > best.1 {
            best = (x, f);
        }
    }
    let (phi, _) = best;
    let (s, solved) = at(phi, &start)?;
    let Ok(sol) = &solved else {
        return Err(WhatIfError::Economics(
            "no purge split in the range gives a steady state".into(),
        ));
    };
    let value = grad.iter().map(|&(i, a)| a * sol.z[i]).sum();
    let sigma = sol.propagated.sigma(&grad);
    let bound = if (phi - lo).abs() <= 2.0 * TOLERANCE {
        Some(if bound_by_limit {
            let l = e.inlet_limit.as_ref().expect("limit");
            format!(
                "the limit of {} on \"{}\" at the inlet of \"{}\"",
                l.max, l.component, l.unit
            )
        } else {
            format!("the lower end of the purge range, {lo}")
        })
    } else if (phi - hi).abs() <= 2.0 * TOLERANCE {
        Some(format!("the upper end of the purge range, {hi}"))
    } else {
        None
    };
    let holds = holds(&base.calibrated(plant, &s, free, hold)?.params);
    let settings = s.iter().map(|x| (x.name.clone(), x.value)).collect();
    Ok(Optimum {
        setting: name,
        value: phi,
        margin: value,
        margin_sigma: sigma,
        bound,
        holds,
        point: point::report(plant, layout, settings, &solved),
        caution: CAUTION.to_string(),
    })
}

/// The margin at purge split φ (NEG_INFINITY without a steady state): for checking an optimum
/// against its neighbours.
pub fn margin_at(
    plant: &Plant,
    base: &BaseCase,
    sets: &[Set],
    free: Option<usize>,
    hold: ReactionHold,
    e: &Economics,
    phi: f64,
) -> Result<f64, WhatIfError> {
    let purge = free_outlet(plant, free)?;
    let grad = margin_gradient(plant, base.layout(), purge, e)?;
    let mut s = sets.to_vec();
    s.push(Set {
        name: format!("split:{}", plant.streams[purge].id),
        setting: Setting::Split { stream: purge },
        value: phi,
    });
    let calibrated = base.calibrated(plant, &s, free, hold)?;
    Ok(match point::solve(plant, &calibrated, base.start())? {
        Ok(sol) => grad.iter().map(|&(i, a)| a * sol.z[i]).sum(),
        Err(_) => f64::NEG_INFINITY,
    })
}
