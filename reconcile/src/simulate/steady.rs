//! The steady state of a loop: the model's own equations g(z) = 0 together with one equation
//! per specification, solved by Newton's method; the system is square when the specifications
//! fix every degree of freedom. `SpecSystem` also gives the what-if its Jacobian and the
//! derivative of each specification's row by its value.

use serde::{Deserialize, Serialize};

use crate::equations::{constraints, Layout};
use crate::model::{Plant, OUTSIDE};
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
    /// Split fraction of a splitter outlet: its own φ, or for the last outlet 1 − Σ of the
    /// others' φ.
    SplitFraction { stream: String, value: f64 },
    /// Share of a unit's inflow of a component that leaves by the given outlet.
    Recovery {
        stream: String,
        component: String,
        value: f64,
    },
    /// Mole fraction of a component in the combined inlet of a unit (a reactor's inert or
    /// excess reactant): Σ_in n_c = x Σ_in Σ_k n_k, linear in the state.
    InletFraction {
        unit: String,
        component: String,
        value: f64,
    },
}

impl Spec {
    /// The specified value.
    pub fn value(&self) -> f64 {
        match self {
            Spec::ComponentFlow { value, .. }
            | Spec::Extent { value, .. }
            | Spec::Conversion { value, .. }
            | Spec::SplitFraction { value, .. }
            | Spec::Recovery { value, .. }
            | Spec::InletFraction { value, .. } => *value,
        }
    }
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

/// Equation of one spec, linear in the state: r(z, v) = Σ a_i z_i − (rhs + v) = 0 for a spec
/// that fixes a quantity at v, or Σ a_i z_i − v Σ_{i∈B} z_i = 0 for a ratio v of two flows
/// (conversion, recovery, inlet fraction), whose terms in B carry −v inside `coefs`.
struct SpecRow {
    coefs: Vec<(usize, f64)>,
    /// Right-hand side: rhs + v for a fixed quantity, 0 for a ratio.
    rhs: f64,
    /// The states of B for a ratio (∂r/∂v = −Σ_B z_i); empty for a fixed quantity (∂r/∂v = −1).
    ratio_of: Vec<usize>,
}

impl SpecRow {
    fn fixed(coefs: Vec<(usize, f64)>, rhs: f64) -> SpecRow {
        SpecRow {
            coefs,
            rhs,
            ratio_of: Vec::new(),
        }
    }

    /// aᵀz = v bᵀz with b the unit vectors of `base` (and `scale` on a).
    fn ratio(mut coefs: Vec<(usize, f64)>, base: Vec<usize>, value: f64) -> SpecRow {
        coefs.extend(base.iter().map(|&i| (i, -value)));
        SpecRow {
            coefs,
            rhs: 0.0,
            ratio_of: base,
        }
    }

    fn residual(&self, z: &[f64]) -> f64 {
        self.coefs.iter().map(|&(i, a)| a * z[i]).sum::<f64>() - self.rhs
    }

    /// ∂r/∂v at z.
    fn d_value(&self, z: &[f64]) -> f64 {
        if self.ratio_of.is_empty() {
            -1.0
        } else {
            -self.ratio_of.iter().map(|&i| z[i]).sum::<f64>()
        }
    }
}

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
        } => SpecRow::fixed(vec![(flow(stream(s)?, component(c)?)?, 1.0)], *value),
        Spec::Extent { reaction: r, value } => {
            SpecRow::fixed(vec![(layout.extent(reaction(r)?), 1.0)], *value)
        }
        Spec::Conversion { reaction: r, value } => {
            let r = reaction(r)?;
            let reac = &plant.reactions[r];
            let key = reac
                .key
                .ok_or_else(|| bad(format!("reaction \"{}\" has no key reactant", reac.id)))?;
            let nu = reac.coefficient(key).abs();
            let inlet: Vec<usize> = plant.units[reac.unit]
                .inlets
                .iter()
                .filter_map(|&s| layout.flow(plant, s, key))
                .collect();
            SpecRow::ratio(vec![(layout.extent(r), nu)], inlet, *value)
        }
        Spec::SplitFraction { stream: s, value } => {
            let s = stream(s)?;
            let unit = plant.streams[s]
                .from
                .filter(|&u| plant.units[u].kind == crate::model::UnitKind::Splitter)
                .ok_or_else(|| {
                    bad(format!(
                        "stream \"{}\" is not a splitter outlet",
                        plant.streams[s].id
                    ))
                })?;
            match layout.split(s) {
                Some(i) => SpecRow::fixed(vec![(i, 1.0)], *value),
                // The last outlet has no φ of its own: 1 − Σ_others φ = v.
                None => {
                    let others = plant.units[unit]
                        .outlets
                        .iter()
                        .filter_map(|&o| layout.split(o))
                        .map(|i| (i, -1.0))
                        .collect();
                    SpecRow::fixed(others, *value - 1.0)
                }
            }
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
            let inlet: Vec<usize> = plant.units[unit]
                .inlets
                .iter()
                .filter_map(|&i| layout.flow(plant, i, c))
                .collect();
            SpecRow::ratio(vec![(flow(s, c)?, 1.0)], inlet, *value)
        }
        Spec::InletFraction {
            unit: u,
            component: c,
            value,
        } => {
            let u = plant
                .units
                .iter()
                .position(|unit| unit.id == *u)
                .ok_or_else(|| bad(format!("unknown unit \"{u}\"")))?;
            let c = component(c)?;
            let inlets = &plant.units[u].inlets;
            let of_c: Vec<(usize, f64)> = inlets
                .iter()
                .filter_map(|&s| layout.flow(plant, s, c))
                .map(|i| (i, 1.0))
                .collect();
            if of_c.is_empty() {
                return Err(bad(format!(
                    "no inlet of unit \"{}\" carries \"{}\"",
                    plant.units[u].id, plant.components[c].id
                )));
            }
            let total: Vec<usize> = inlets
                .iter()
                .flat_map(|&s| layout.stream_flows(plant, s))
                .collect();
            SpecRow::ratio(of_c, total, *value)
        }
    })
}

/// The true steady state z of the loop under the specifications.
pub fn steady_state(plant: &Plant, specs: &[Spec]) -> Result<Vec<f64>, SimulateError> {
    SpecSystem::new(plant, specs)?.solve(plant, None)
}

/// The model's equations g(z) = 0 with one row per specification below them: a square system
/// when the specifications fix every degree of freedom.
pub struct SpecSystem<'a> {
    specs: &'a [Spec],
    layout: Layout,
    rows: Vec<SpecRow>,
}

impl<'a> SpecSystem<'a> {
    pub fn new(plant: &Plant, specs: &'a [Spec]) -> Result<SpecSystem<'a>, SimulateError> {
        let layout = Layout::new(plant);
        let rows: Vec<SpecRow> = specs
            .iter()
            .enumerate()
            .map(|(k, s)| resolve(plant, &layout, k, s))
            .collect::<Result<_, _>>()?;
        let (p, n) = (layout.rows.len(), layout.n);
        if p + rows.len() != n {
            return Err(SimulateError::Count {
                specs: rows.len(),
                free: n.saturating_sub(p),
            });
        }
        Ok(SpecSystem {
            specs,
            layout,
            rows,
        })
    }

    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// Row of specification k in the system.
    pub fn spec_row(&self, k: usize) -> usize {
        self.layout.rows.len() + k
    }

    /// F(z) and its Jacobian F_z (square).
    pub fn residual(&self, plant: &Plant, z: &[f64]) -> (Vec<f64>, Triplets) {
        let (p, n) = (self.layout.rows.len(), self.layout.n);
        let mut jac = Triplets::new(n, n);
        let mut f = constraints(plant, &self.layout, z, Some(&mut jac));
        for (k, row) in self.rows.iter().enumerate() {
            for &(i, a) in &row.coefs {
                jac.push(p + k, i, a);
            }
            f.push(row.residual(z));
        }
        (f, jac)
    }

    /// ∂F_{spec_row(k)}/∂v_k at z for each specification k (the only row its value enters):
    /// the column F_p of the implicit function theorem, dz/dv = −F_z⁻¹ F_p.
    pub fn value_derivatives(&self, z: &[f64]) -> Vec<f64> {
        self.rows.iter().map(|r| r.d_value(z)).collect()
    }

    /// Newton's method on F(z) = 0 from `start` (or from every flow at the mean specified
    /// flow and even splits); a solution that needs a negative flow is refused.
    pub fn solve(&self, plant: &Plant, start: Option<&[f64]>) -> Result<Vec<f64>, SimulateError> {
        let layout = &self.layout;
        let n = layout.n;
        let mut z = match start {
            Some(z) if z.len() == n => z.to_vec(),
            _ => self.default_start(plant),
        };
        let mut residual = f64::INFINITY;
        for _ in 0..50 {
            let (f, jac) = self.residual(plant, &z);
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
            // Full Newton steps: the equations are linear but for the splitter rows, and an
            // iterate may pass through negative flows on its way (a step cut at n = 0 can stall
            // far from the solution); the solution itself must have none.
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
        // Flows are kept non-negative: a steady state that needs a negative flow is none.
        for i in 0..layout.extent_start {
            if z[i] < -1e-9 * scale {
                let name = crate::equations::var_name(plant, layout, i);
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

    /// Every flow at the mean specified component flow, extents at zero, fractions at an even
    /// split.
    fn default_start(&self, plant: &Plant) -> Vec<f64> {
        let flows: Vec<f64> = self
            .specs
            .iter()
            .filter_map(|s| match s {
                Spec::ComponentFlow { value, .. } => Some(*value),
                _ => None,
            })
            .collect();
        let mean_flow = if flows.is_empty() {
            100.0
        } else {
            flows.iter().sum::<f64>() / flows.len() as f64
        };
        let mut z = vec![mean_flow; self.layout.n];
        for r in 0..plant.reactions.len() {
            z[self.layout.extent(r)] = 0.0;
        }
        for &(_, i) in &self.layout.splits {
            z[i] = 0.5;
        }
        z
    }
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::validate::parse_plant;

    fn flow(stream: &str, component: &str, value: f64) -> Spec {
        Spec::ComponentFlow {
            stream: stream.into(),
            component: component.into(),
            value,
        }
    }

    /// Every kind of specification on the purge-design loop with argon allowed in the product
    /// (so a separator split of argon is a degree of freedom): the split given by the last
    /// outlet, then a target inlet fraction instead.
    fn cases() -> (Plant, Vec<Vec<Spec>>) {
        let model = testkit::plants::PURGE_DESIGN.replace(
            "to = \"outside\"\ncomponents = [\"NH3\"]",
            "to = \"outside\"\ncomponents = [\"NH3\", \"Ar\"]",
        );
        let plant = parse_plant(&model).unwrap();
        let common = vec![
            flow("feed", "N2", 334.8),
            flow("feed", "H2", 1004.4),
            flow("feed", "Ar", 10.8),
            Spec::Conversion {
                reaction: "synthesis".into(),
                value: 0.5,
            },
            Spec::Recovery {
                stream: "product".into(),
                component: "Ar".into(),
                value: 0.2,
            },
        ];
        let mut by_last_outlet = common.clone();
        by_last_outlet.push(Spec::SplitFraction {
            stream: "recycle".into(),
            value: 0.93,
        });
        let mut by_target = common;
        by_target.push(Spec::InletFraction {
            unit: "conv".into(),
            component: "Ar".into(),
            // Between the feed's 0.8 % (everything purged) and the 2 % with no purge, where
            // all the argon leaves with the product (f_I / 0.2 at the inlet).
            value: 0.012,
        });
        (plant, vec![by_last_outlet, by_target])
    }

    /// The specification rows' Jacobian and ∂F/∂value (the what-if's F_v) against central
    /// finite differences, at the solution and at an arbitrary positive state.
    #[test]
    fn spec_rows_and_their_value_derivatives_match_finite_differences() {
        let (plant, cases) = cases();
        for specs in cases {
            let system = SpecSystem::new(&plant, &specs).unwrap();
            let solved = system.solve(&plant, None).unwrap();
            let n = system.layout().n;
            let arbitrary: Vec<f64> = (0..n).map(|i| 1.0 + (i % 7) as f64 * 13.0).collect();
            for z in [solved.clone(), arbitrary] {
                let (f, jac) = system.residual(&plant, &z);
                let dense = jac.to_dense();
                let h = 1e-6;
                for i in 0..n {
                    let (mut up, mut down) = (z.clone(), z.clone());
                    up[i] += h;
                    down[i] -= h;
                    let (fu, _) = system.residual(&plant, &up);
                    let (fd, _) = system.residual(&plant, &down);
                    for row in 0..f.len() {
                        let d = (fu[row] - fd[row]) / (2.0 * h);
                        assert!(
                            (d - dense[(row, i)]).abs() <= 1e-6 * (1.0 + d.abs()),
                            "row {row}, column {i}: {d} against {}",
                            dense[(row, i)]
                        );
                    }
                }
                let d_value = system.value_derivatives(&z);
                for k in 0..specs.len() {
                    let shifted = |dv: f64| {
                        let mut s = specs.clone();
                        match &mut s[k] {
                            Spec::ComponentFlow { value, .. }
                            | Spec::Extent { value, .. }
                            | Spec::Conversion { value, .. }
                            | Spec::SplitFraction { value, .. }
                            | Spec::Recovery { value, .. }
                            | Spec::InletFraction { value, .. } => *value += dv,
                        }
                        SpecSystem::new(&plant, &s).unwrap().residual(&plant, &z).0
                    };
                    let row = system.spec_row(k);
                    let d = (shifted(h)[row] - shifted(-h)[row]) / (2.0 * h);
                    assert!(
                        (d - d_value[k]).abs() <= 1e-6 * (1.0 + d.abs()),
                        "spec {k}: {d} against {}",
                        d_value[k]
                    );
                }
            }
            // At the solution every row is met, the target and the last outlet's split too.
            let (f, _) = system.residual(&plant, &solved);
            assert!(f.iter().all(|v| v.abs() < 1e-8), "{f:?}");
        }
    }
}
