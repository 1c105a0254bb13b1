//! One what-if point: the specifications solved for the new steady state by Newton on the
//! model's own equations (from the base state, or the previous point of a sweep), its σ carried
//! from the base case, and its loop figures and streams.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::equations::Layout;
use crate::figures::{loop_figures_of, Builder};
use crate::model::{Plant, UnitKind};
use crate::period_report::stream_report;
use crate::report::{Figure, StreamReport};
use crate::simulate::{SimulateError, Spec, SpecSystem};

use super::base::Calibrated;
use super::diagnose;
use super::propagate::Propagated;
use super::WhatIfError;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum PointStatus {
    Solved,
    NoSteadyState,
}

/// The loop at one set of settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Point {
    /// The settings of this point, by name.
    pub settings: BTreeMap<String, f64>,
    pub status: PointStatus,
    /// Why there is no steady state (naming the component that accumulates); null when solved.
    pub reason: Option<String>,
    pub figures: Vec<Figure>,
    pub streams: Vec<StreamReport>,
}

/// A solved point's state with what its σ needs, for the optimum's margin.
pub struct Solved {
    pub z: Vec<f64>,
    pub propagated: Propagated,
}

/// Solve the specifications from `start`; `Err(reason)` when the loop has no steady state.
pub fn solve(
    plant: &Plant,
    calibrated: &Calibrated,
    start: &[f64],
) -> Result<Result<Solved, String>, WhatIfError> {
    let specs: Vec<Spec> = calibrated.params.iter().map(|p| p.spec.clone()).collect();
    let system = SpecSystem::new(plant, &specs).map_err(WhatIfError::Model)?;
    let z = match system.solve(plant, Some(start)) {
        Ok(z) => z,
        Err(SimulateError::NoSteadyState(message)) => {
            return Ok(Err(diagnose::accumulation(plant, &specs).unwrap_or(message)));
        }
        Err(e) => return Err(WhatIfError::Model(e)),
    };
    match Propagated::new(plant, &system, calibrated, &z) {
        Some(propagated) => Ok(Ok(Solved { z, propagated })),
        None => Ok(Err(diagnose::accumulation(plant, &specs).unwrap_or_else(
            || "the balances do not fix an isolated steady state at these settings".into(),
        ))),
    }
}

/// The point's report: its figures and streams with σ, or the reason there is none.
pub fn report(
    plant: &Plant,
    layout: &Layout,
    settings: BTreeMap<String, f64>,
    solved: &Result<Solved, String>,
) -> Point {
    match solved {
        Ok(s) => Point {
            settings,
            status: PointStatus::Solved,
            reason: None,
            figures: figures(plant, layout, &s.z, &s.propagated),
            streams: (0..plant.streams.len())
                .map(|k| stream_report(plant, layout, k, &s.z, &s.propagated))
                .collect(),
        },
        Err(reason) => Point {
            settings,
            status: PointStatus::NoSteadyState,
            reason: Some(reason.clone()),
            figures: Vec::new(),
            streams: Vec::new(),
        },
    }
}

/// The loop figures of a report, and those a purge decision needs beside them: product made,
/// recycle flow, and each reactant's mole fraction at each reactor inlet.
pub fn figures(plant: &Plant, layout: &Layout, z: &[f64], unc: &Propagated) -> Vec<Figure> {
    let mut out = loop_figures_of(plant, layout, z, unc);
    let mut b = Builder {
        plant,
        layout,
        z,
        unc,
        out: Vec::new(),
    };
    for (c, comp) in plant.components.iter().enumerate() {
        let made = plant.reactions.iter().any(|r| r.coefficient(c) > 0.0);
        if made {
            let flow = b.component(&product_streams(plant), c);
            b.linear("product_made", comp.id.clone(), "kmol/h", &flow, 1.0);
        }
    }
    for unit in &plant.units {
        match unit.kind {
            UnitKind::Splitter => {
                let recycles: Vec<usize> = unit
                    .outlets
                    .iter()
                    .copied()
                    .filter(|&o| plant.streams[o].to.is_some())
                    .collect();
                let leaves = unit.outlets.iter().any(|&o| plant.streams[o].to.is_none());
                if leaves && !recycles.is_empty() {
                    let flow = b.total(&recycles);
                    b.linear("recycle_flow", unit.id.clone(), "kmol/h", &flow, 1.0);
                }
            }
            UnitKind::Reactor => {
                let total = b.total(&unit.inlets);
                for (c, comp) in plant.components.iter().enumerate() {
                    let reactant = unit
                        .reactions
                        .iter()
                        .any(|&r| plant.reactions[r].coefficient(c) < 0.0);
                    if reactant {
                        let x = b.component(&unit.inlets, c);
                        let subject = format!("{}:{}", unit.id, comp.id);
                        b.ratio(
                            "reactant_fraction_reactor_inlet",
                            subject,
                            "fraction",
                            &x,
                            &total,
                            1.0,
                        );
                    }
                }
            }
            UnitKind::Mixer | UnitKind::Separator | UnitKind::Node => {}
        }
    }
    out.extend(b.out);
    out
}

/// Streams that leave the plant other than by a splitter (a purge): the products.
pub fn product_streams(plant: &Plant) -> Vec<usize> {
    (0..plant.streams.len())
        .filter(|&s| {
            let st = &plant.streams[s];
            st.to.is_none()
                && !st
                    .from
                    .is_some_and(|u| plant.units[u].kind == UnitKind::Splitter)
        })
        .collect()
}
