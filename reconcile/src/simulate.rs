//! A plant simulator: the true steady state of a loop from its operating specifications, and
//! the readings its meters would send (true value + Gaussian noise at each meter's σ, with
//! optional bias, drift, frozen value, dropout and bad quality). Deterministic from a seed.
//! Tests, benchmarks and the demo use it.
//!
//! The steady state solves the model's own equations g(z) = 0 together with one equation per
//! specification, by Newton's method: the system is square when the specifications fix every
//! degree of freedom.

use chrono::{DateTime, Duration, Utc};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};

use crate::equations::{constraints, measurement, Layout};
use crate::model::{Plant, OUTSIDE};
use crate::period::{Quality, Reading};
use crate::sparse::{SparseLu, Triplets};

/// One operating specification, by the model's ids.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "spec", rename_all = "snake_case")]
pub enum Spec {
    /// Flow of one component in a stream (usually a fresh feed), kmol/h.
    ComponentFlow {
        stream: String,
        component: String,
        value: f64,
    },
    /// Extent of a reaction, kmol/h.
    Extent { reaction: String, value: f64 },
    /// Single-pass conversion of the reaction's key reactant: |ν_key| ξ = X × reactor inlet.
    Conversion { reaction: String, value: f64 },
    /// Split fraction of a splitter outlet.
    SplitFraction { stream: String, value: f64 },
    /// Share of a unit's inflow of a component that leaves by the given outlet.
    Recovery {
        stream: String,
        component: String,
        value: f64,
    },
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SimulateError {
    #[error("specification {index}: {message}")]
    BadSpec { index: usize, message: String },
    #[error("the specifications give {specs} equations for {free} degrees of freedom")]
    Count { specs: usize, free: usize },
    #[error("the loop has no steady state: {0}")]
    NoSteadyState(String),
}

/// Equation of one spec, linear in the state: Σ a_i z_i = value.
struct SpecRow(Vec<(usize, f64)>, f64);

fn resolve(
    plant: &Plant,
    layout: &Layout,
    index: usize,
    spec: &Spec,
) -> Result<SpecRow, SimulateError> {
    let bad = |message: String| SimulateError::BadSpec { index, message };
    let stream = |id: &str| {
        plant
            .stream_index(id)
            .ok_or_else(|| bad(format!("unknown stream \"{id}\"")))
    };
    let component = |id: &str| {
        plant
            .component_index(id)
            .ok_or_else(|| bad(format!("unknown component \"{id}\"")))
    };
    let reaction = |id: &str| {
        plant
            .reactions
            .iter()
            .position(|r| r.id == id)
            .ok_or_else(|| bad(format!("unknown reaction \"{id}\"")))
    };
    let flow = |s: usize, c: usize| {
        layout.flow(plant, s, c).ok_or_else(|| {
            bad(format!(
                "stream \"{}\" does not carry \"{}\"",
                plant.streams[s].id, plant.components[c].id
            ))
        })
    };
    Ok(match spec {
        Spec::ComponentFlow {
            stream: s,
            component: c,
            value,
        } => SpecRow(vec![(flow(stream(s)?, component(c)?)?, 1.0)], *value),
        Spec::Extent { reaction: r, value } => {
            SpecRow(vec![(layout.extent(reaction(r)?), 1.0)], *value)
        }
        Spec::Conversion { reaction: r, value } => {
            let r = reaction(r)?;
            let reac = &plant.reactions[r];
            let key = reac
                .key
                .ok_or_else(|| bad(format!("reaction \"{}\" has no key reactant", reac.id)))?;
            let nu = reac.coefficient(key).abs();
            let mut row = vec![(layout.extent(r), nu)];
            for &s in &plant.units[reac.unit].inlets {
                if let Some(i) = layout.flow(plant, s, key) {
                    row.push((i, -value));
                }
            }
            SpecRow(row, 0.0)
        }
        Spec::SplitFraction { stream: s, value } => {
            let s = stream(s)?;
            let i = layout
                .split(s)
                .ok_or_else(|| bad(format!("stream \"{}\" is not a splitter outlet with its own fraction (the last outlet takes the rest)", plant.streams[s].id)))?;
            SpecRow(vec![(i, 1.0)], *value)
        }
        Spec::Recovery {
            stream: s,
            component: c,
            value,
        } => {
            let (s, c) = (stream(s)?, component(c)?);
            let unit = plant.streams[s].from.ok_or_else(|| {
                bad(format!(
                    "stream \"{}\" comes from {OUTSIDE}",
                    plant.streams[s].id
                ))
            })?;
            let mut row = vec![(flow(s, c)?, 1.0)];
            for &i in &plant.units[unit].inlets {
                if let Some(k) = layout.flow(plant, i, c) {
                    row.push((k, -value));
                }
            }
            SpecRow(row, 0.0)
        }
    })
}

/// The true steady state z of the loop under the specifications.
pub fn steady_state(plant: &Plant, specs: &[Spec]) -> Result<Vec<f64>, SimulateError> {
    let layout = Layout::new(plant);
    let rows: Vec<SpecRow> = specs
        .iter()
        .enumerate()
        .map(|(k, s)| resolve(plant, &layout, k, s))
        .collect::<Result<_, _>>()?;
    let p = layout.rows.len();
    let n = layout.n;
    if p + rows.len() != n {
        return Err(SimulateError::Count {
            specs: rows.len(),
            free: n.saturating_sub(p),
        });
    }
    // Start: every flow at the mean specified flow, fractions at an even split.
    let mean_flow = {
        let flows: Vec<f64> = specs
            .iter()
            .filter_map(|s| match s {
                Spec::ComponentFlow { value, .. } => Some(*value),
                _ => None,
            })
            .collect();
        if flows.is_empty() {
            100.0
        } else {
            flows.iter().sum::<f64>() / flows.len() as f64
        }
    };
    let mut z = vec![mean_flow; n];
    for r in 0..plant.reactions.len() {
        z[layout.extent(r)] = 0.0;
    }
    for &(_, i) in &layout.splits {
        z[i] = 0.5;
    }
    let mut residual = f64::INFINITY;
    for _ in 0..50 {
        let mut jac = Triplets::new(n, n);
        let mut f = constraints(plant, &layout, &z, Some(&mut jac));
        for (k, row) in rows.iter().enumerate() {
            let SpecRow(coefs, value) = row;
            let mut v = -value;
            for &(i, a) in coefs {
                v += a * z[i];
                jac.push(p + k, i, a);
            }
            f.push(v);
        }
        let scale = z.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
        residual = f.iter().fold(0.0_f64, |a, v| a.max(v.abs()));
        if residual <= 1e-11 * scale {
            break;
        }
        let Some(lu) = SparseLu::new(&jac) else {
            return Err(SimulateError::NoSteadyState(accumulation_diagnosis(plant)));
        };
        let dz = lu.solve(&f);
        if dz.iter().any(|v| !v.is_finite()) {
            return Err(SimulateError::NoSteadyState(accumulation_diagnosis(plant)));
        }
        for i in 0..n {
            z[i] -= dz[i];
        }
    }
    let scale = z.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
    if residual > 1e-8 * scale {
        return Err(SimulateError::NoSteadyState(format!(
            "Newton's method did not close the balances (residual {residual:.3e} kmol/h); {}",
            accumulation_diagnosis(plant)
        )));
    }
    for i in 0..layout.extent_start {
        if z[i] < -1e-9 * scale {
            let name = crate::equations::var_name(plant, &layout, i);
            return Err(SimulateError::NoSteadyState(format!(
                "the balances need a negative {name} ({:.4} kmol/h); {}",
                z[i],
                accumulation_diagnosis(plant)
            )));
        }
        z[i] = z[i].max(0.0);
    }
    Ok(z)
}

/// Components that no stream can take out of the plant: an inert among them accumulates; a
/// reactant among them leaves only by reaction, so it accumulates unless fed in exact
/// stoichiometric proportion.
pub fn accumulation_diagnosis(plant: &Plant) -> String {
    let mut notes = Vec::new();
    for (c, comp) in plant.components.iter().enumerate() {
        let leaves = plant
            .streams
            .iter()
            .any(|s| s.to.is_none() && s.from.is_some() && s.components.contains(&c));
        if leaves {
            continue;
        }
        let reacts = plant.reactions.iter().any(|r| r.coefficient(c) != 0.0);
        let enters = plant
            .streams
            .iter()
            .any(|s| s.from.is_none() && s.components.contains(&c));
        if reacts {
            notes.push(format!(
                "\"{}\" can leave only by reaction, so any excess over stoichiometry accumulates",
                comp.id
            ));
        } else if enters {
            notes.push(format!(
                "\"{}\" enters but no stream takes it out, so it accumulates",
                comp.id
            ));
        }
    }
    if notes.is_empty() {
        "the specifications do not fix a unique state (or a purge fraction of zero leaves a component nowhere to go)".into()
    } else {
        format!(
            "{}; a purge (or a product that carries it) is needed",
            notes.join("; ")
        )
    }
}

/// What goes wrong with one meter, from a period on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "fault", rename_all = "snake_case")]
pub enum MeterFault {
    /// Reads high by a constant, in the meter's uom.
    Bias {
        tag: String,
        from_hour: usize,
        value: f64,
    },
    /// Reads high by a growing amount, uom per hour since `from_hour`.
    Drift {
        tag: String,
        from_hour: usize,
        per_hour: f64,
    },
    /// Repeats the value it had at `from_hour`.
    Frozen { tag: String, from_hour: usize },
    /// Sends nothing in [from_hour, to_hour).
    Dropout {
        tag: String,
        from_hour: usize,
        to_hour: usize,
    },
    /// Marks its readings bad in [from_hour, to_hour).
    BadQuality {
        tag: String,
        from_hour: usize,
        to_hour: usize,
    },
}

/// How to produce readings.
#[derive(Debug, Clone, PartialEq)]
pub struct ReadingPlan {
    pub start: DateTime<Utc>,
    pub hours: usize,
    /// Readings per meter per hour, spread evenly in the hour.
    pub per_hour: usize,
    pub seed: u64,
    pub faults: Vec<MeterFault>,
}

/// The readings the plant's meters send for `plan.hours` hours of the steady state z.
pub fn readings(plant: &Plant, z: &[f64], plan: &ReadingPlan) -> Vec<Reading> {
    let layout = Layout::new(plant);
    let mut rng = ChaCha8Rng::seed_from_u64(plan.seed);
    let mut out = Vec::new();
    let per_hour = plan.per_hour.max(1);
    let truth: Vec<f64> = plant
        .meters
        .iter()
        .map(|m| measurement(plant, &layout, m, z).0)
        .collect();
    let mut frozen: Vec<Option<f64>> = vec![None; plant.meters.len()];
    for hour in 0..plan.hours {
        for k in 0..per_hour {
            let time = plan.start + Duration::seconds((hour * 3600 + k * 3600 / per_hour) as i64);
            for (mi, meter) in plant.meters.iter().enumerate() {
                let sigma = meter.sigma_for(truth[mi]).unwrap_or(0.0);
                let noise = if sigma > 0.0 {
                    Normal::new(0.0, sigma)
                        .expect("positive σ")
                        .sample(&mut rng)
                } else {
                    0.0
                };
                let mut value = truth[mi] + noise;
                let mut quality = Quality::Good;
                let mut send = true;
                for fault in plan.faults.iter() {
                    match fault {
                        MeterFault::Bias {
                            tag,
                            from_hour,
                            value: b,
                        } if *tag == meter.tag && hour >= *from_hour => value += b,
                        MeterFault::Drift {
                            tag,
                            from_hour,
                            per_hour: d,
                        } if *tag == meter.tag && hour >= *from_hour => {
                            value += d * (hour - from_hour) as f64
                        }
                        MeterFault::Frozen { tag, from_hour }
                            if *tag == meter.tag && hour >= *from_hour =>
                        {
                            value = *frozen[mi].get_or_insert(value);
                        }
                        MeterFault::Dropout {
                            tag,
                            from_hour,
                            to_hour,
                        } if *tag == meter.tag && (*from_hour..*to_hour).contains(&hour) => {
                            send = false
                        }
                        MeterFault::BadQuality {
                            tag,
                            from_hour,
                            to_hour,
                        } if *tag == meter.tag && (*from_hour..*to_hour).contains(&hour) => {
                            quality = Quality::Bad
                        }
                        _ => {}
                    }
                }
                // The noise is drawn whatever the faults, so a fault never shifts the noise
                // of the other meters: the same seed gives the same clean readings.
                if send {
                    out.push(Reading {
                        tag: meter.tag.clone(),
                        time,
                        value,
                        quality,
                    });
                }
            }
        }
    }
    out
}

/// Exact (noise-free) meter values of state z, in meter order.
pub fn exact_values(plant: &Plant, z: &[f64]) -> Vec<f64> {
    let layout = Layout::new(plant);
    plant
        .meters
        .iter()
        .map(|m| measurement(plant, &layout, m, z).0)
        .collect()
}
