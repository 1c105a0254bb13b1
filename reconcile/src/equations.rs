//! Variables and equations (docs/methods.md §1).
//!
//! The state z holds the component molar flows n_{s,c} (kmol/h) of every stream and component
//! it carries, the extent ξ_r (kmol/h) of every reaction, and the split fraction φ_k of every
//! splitter outlet but the last. The constraints g(z) = 0 are
//! - unit component balances Σ_in n − Σ_out n + Σ_r ν_{c,r} ξ_r = 0 (linear), and
//! - splitter outlet rows n_{k,c} − φ_k n_{in,c} = 0 (bilinear), which state the rule that every
//!   outlet has the inlet's composition without redundant equations.
//!
//! Measurement functions h_i(z) are in each meter's own uom, with analytic gradients.

use crate::model::{Meter, Plant, UnitKind};
use crate::sparse::Triplets;
use crate::uom::Quantity;

/// Denominators of fractions are floored here so that a stream with no flow never divides by 0.
const TINY_FLOW: f64 = 1e-12;

/// What a constraint row states; used to name rows and to build leak signatures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Row {
    /// Component balance of a unit.
    Balance { unit: usize, component: usize },
    /// Equal-composition row of a splitter outlet.
    Split {
        unit: usize,
        outlet: usize,
        component: usize,
    },
}

/// Where each variable lives in the state vector, with its bounds.
#[derive(Debug, Clone)]
pub struct Layout {
    /// First index of each stream's component flows; they follow the stream's component list.
    pub flow_start: Vec<usize>,
    pub extent_start: usize,
    /// Index of each splitter outlet's φ: (stream, index); the last outlet has none.
    pub splits: Vec<(usize, usize)>,
    pub n: usize,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
    pub rows: Vec<Row>,
}

/// What a variable is, for naming and reporting.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Var {
    Flow { stream: usize, component: usize },
    Extent(usize),
    Split(usize),
}

impl Layout {
    pub fn new(plant: &Plant) -> Layout {
        let mut flow_start = Vec::with_capacity(plant.streams.len());
        let mut n = 0;
        for s in &plant.streams {
            flow_start.push(n);
            n += s.components.len();
        }
        let extent_start = n;
        n += plant.reactions.len();
        let mut splits = Vec::new();
        for u in &plant.units {
            // The state a unit kind adds beyond its streams' flows and its reactions' extents:
            // a splitter's φ of every outlet but the last (docs/methods.md §1).
            match u.kind {
                UnitKind::Splitter => {
                    for &o in &u.outlets[..u.outlets.len().saturating_sub(1)] {
                        splits.push((o, n));
                        n += 1;
                    }
                }
                UnitKind::Mixer | UnitKind::Reactor | UnitKind::Separator | UnitKind::Node => {}
            }
        }
        let mut lower = vec![0.0; n];
        let mut upper = vec![f64::INFINITY; n];
        for (r, reaction) in plant.reactions.iter().enumerate() {
            if !reaction.irreversible {
                lower[extent_start + r] = f64::NEG_INFINITY;
            }
        }
        for &(_, i) in &splits {
            upper[i] = 1.0;
        }
        let rows = rows(plant);
        Layout {
            flow_start,
            extent_start,
            splits,
            n,
            lower,
            upper,
            rows,
        }
    }

    /// Index of n_{s,c}, if stream s carries component c.
    pub fn flow(&self, plant: &Plant, stream: usize, component: usize) -> Option<usize> {
        plant.streams[stream]
            .components
            .binary_search(&component)
            .ok()
            .map(|k| self.flow_start[stream] + k)
    }

    pub fn extent(&self, reaction: usize) -> usize {
        self.extent_start + reaction
    }

    pub fn split(&self, stream: usize) -> Option<usize> {
        self.splits
            .iter()
            .find(|(s, _)| *s == stream)
            .map(|(_, i)| *i)
    }

    pub fn var(&self, plant: &Plant, index: usize) -> Var {
        if index >= self.extent_start {
            if index < self.extent_start + plant.reactions.len() {
                return Var::Extent(index - self.extent_start);
            }
            let (s, _) = self
                .splits
                .iter()
                .find(|(_, i)| *i == index)
                .expect("index in layout");
            return Var::Split(*s);
        }
        let stream = self.flow_start.partition_point(|&f| f <= index) - 1;
        let component = plant.streams[stream].components[index - self.flow_start[stream]];
        Var::Flow { stream, component }
    }

    /// Indices of a stream's component flows.
    pub fn stream_flows(&self, plant: &Plant, stream: usize) -> std::ops::Range<usize> {
        let start = self.flow_start[stream];
        start..start + plant.streams[stream].components.len()
    }
}

/// The constraint rows, in a fixed order: balances of each unit, then its splitter rows.
fn rows(plant: &Plant) -> Vec<Row> {
    let mut rows = Vec::new();
    for (ui, u) in plant.units.iter().enumerate() {
        for c in 0..plant.components.len() {
            let carried = u
                .inlets
                .iter()
                .chain(&u.outlets)
                .any(|&s| plant.streams[s].components.contains(&c));
            let reacts = u
                .reactions
                .iter()
                .any(|&r| plant.reactions[r].coefficient(c) != 0.0);
            if carried || reacts {
                rows.push(Row::Balance {
                    unit: ui,
                    component: c,
                });
            }
        }
        // The rows a unit kind adds beyond its component balances: a splitter's outlets but
        // the last carry the inlet's composition (docs/methods.md §1).
        match u.kind {
            UnitKind::Splitter => {
                let inlet = u.inlets[0];
                for &o in &u.outlets[..u.outlets.len() - 1] {
                    for &c in &plant.streams[inlet].components {
                        rows.push(Row::Split {
                            unit: ui,
                            outlet: o,
                            component: c,
                        });
                    }
                }
            }
            UnitKind::Mixer | UnitKind::Reactor | UnitKind::Separator | UnitKind::Node => {}
        }
    }
    rows
}

/// g(z) and, when `jac` is given, its Jacobian as triplets (row, column, value).
pub fn constraints(
    plant: &Plant,
    layout: &Layout,
    z: &[f64],
    mut jac: Option<&mut Triplets>,
) -> Vec<f64> {
    let mut g = Vec::with_capacity(layout.rows.len());
    for (ri, row) in layout.rows.iter().enumerate() {
        let mut value = 0.0;
        let mut put = |col: usize, coef: f64, value: &mut f64| {
            *value += coef * z[col];
            if let Some(j) = jac.as_deref_mut() {
                j.push(ri, col, coef);
            }
        };
        match *row {
            Row::Balance { unit, component } => {
                let u = &plant.units[unit];
                for &s in &u.inlets {
                    if let Some(i) = layout.flow(plant, s, component) {
                        put(i, 1.0, &mut value);
                    }
                }
                for &s in &u.outlets {
                    if let Some(i) = layout.flow(plant, s, component) {
                        put(i, -1.0, &mut value);
                    }
                }
                for &r in &u.reactions {
                    let nu = plant.reactions[r].coefficient(component);
                    if nu != 0.0 {
                        put(layout.extent(r), nu, &mut value);
                    }
                }
            }
            Row::Split {
                unit,
                outlet,
                component,
            } => {
                let inlet = plant.units[unit].inlets[0];
                let k = layout.flow(plant, outlet, component).expect("validated");
                let i = layout.flow(plant, inlet, component).expect("validated");
                let phi = layout.split(outlet).expect("layout has the outlet");
                value = z[k] - z[phi] * z[i];
                if let Some(j) = jac.as_deref_mut() {
                    j.push(ri, k, 1.0);
                    j.push(ri, i, -z[phi]);
                    j.push(ri, phi, -z[i]);
                }
            }
        }
        g.push(value);
    }
    g
}

/// h(z) of one meter in its uom, with its gradient as (column, value) pairs.
pub fn measurement(
    plant: &Plant,
    layout: &Layout,
    meter: &Meter,
    z: &[f64],
) -> (f64, Vec<(usize, f64)>) {
    let mut grad = Vec::new();
    let h = evaluate(plant, layout, meter, z, Some(&mut grad));
    (h, grad)
}

/// h(z) of one meter in its uom without the gradient (the same arithmetic as `measurement`).
pub fn measurement_value(plant: &Plant, layout: &Layout, meter: &Meter, z: &[f64]) -> f64 {
    evaluate(plant, layout, meter, z, None)
}

fn evaluate(
    plant: &Plant,
    layout: &Layout,
    meter: &Meter,
    z: &[f64],
    mut grad: Option<&mut Vec<(usize, f64)>>,
) -> f64 {
    let f = meter.uom.factor_from_base();
    let s = meter.stream;
    let stream = &plant.streams[s];
    let cols = layout.stream_flows(plant, s);
    let mass = |c: usize| plant.components[c].molar_mass;
    let mut put = |i: usize, d: f64| {
        if let Some(g) = grad.as_deref_mut() {
            g.push((i, d));
        }
    };
    match meter.quantity {
        Quantity::MolarFlow | Quantity::StdVolumeFlow => {
            let total: f64 = z[cols.clone()].iter().sum();
            cols.for_each(|i| put(i, f));
            f * total
        }
        Quantity::MassFlow => {
            let mut total = 0.0;
            for (i, &c) in cols.zip(&stream.components) {
                total += mass(c) * z[i];
                put(i, f * mass(c));
            }
            f * total
        }
        Quantity::ComponentFlow => {
            let i = layout
                .flow(plant, s, meter.component.expect("validated"))
                .expect("validated");
            put(i, f);
            f * z[i]
        }
        Quantity::MoleFraction => {
            // x = n_c / S with S = Σ_{k∈B} n_k; ∂x/∂n_k = δ_kc / S − n_c / S² for k ∈ B.
            let c = meter.component.expect("validated");
            let ic = layout.flow(plant, s, c).expect("validated");
            let in_basis = |k: usize| meter.basis.as_ref().is_none_or(|b| b.contains(&k));
            let total: f64 = cols
                .clone()
                .zip(&stream.components)
                .filter(|(_, &k)| in_basis(k))
                .map(|(i, _)| z[i])
                .sum::<f64>()
                .max(TINY_FLOW);
            let x = z[ic] / total;
            for (i, _) in cols.zip(&stream.components).filter(|(_, &k)| in_basis(k)) {
                let d = if i == ic { 1.0 / total } else { 0.0 } - x / total;
                put(i, f * d);
            }
            f * x
        }
        Quantity::MassFraction => {
            // w = M_c n_c / T with T = Σ_k M_k n_k; ∂w/∂n_k = δ_kc M_c / T − w M_k / T.
            let c = meter.component.expect("validated");
            let ic = layout.flow(plant, s, c).expect("validated");
            let total: f64 = cols
                .clone()
                .zip(&stream.components)
                .map(|(i, &k)| mass(k) * z[i])
                .sum::<f64>()
                .max(TINY_FLOW);
            let w = mass(c) * z[ic] / total;
            for (i, &k) in cols.zip(&stream.components) {
                let d = if i == ic { mass(c) / total } else { 0.0 } - w * mass(k) / total;
                put(i, f * d);
            }
            f * w
        }
    }
}

/// Total molar flow of a stream (kmol/h) and its gradient.
pub fn stream_total(
    plant: &Plant,
    layout: &Layout,
    stream: usize,
    z: &[f64],
) -> (f64, Vec<(usize, f64)>) {
    let cols = layout.stream_flows(plant, stream);
    (
        z[cols.clone()].iter().sum(),
        cols.map(|i| (i, 1.0)).collect(),
    )
}

/// Mole fraction of component c in a stream, and its gradient.
pub fn stream_fraction(
    plant: &Plant,
    layout: &Layout,
    stream: usize,
    component: usize,
    z: &[f64],
) -> (f64, Vec<(usize, f64)>) {
    let cols = layout.stream_flows(plant, stream);
    let ic = layout
        .flow(plant, stream, component)
        .expect("carried component");
    let total = z[cols.clone()].iter().sum::<f64>().max(TINY_FLOW);
    let x = z[ic] / total;
    let grad = cols
        .map(|i| (i, if i == ic { 1.0 / total } else { 0.0 } - x / total))
        .collect();
    (x, grad)
}

/// A readable name of state i, e.g. `flow of "H2" in stream "purge"`.
pub fn var_name(plant: &Plant, layout: &Layout, i: usize) -> String {
    match layout.var(plant, i) {
        Var::Flow { stream, component } => format!(
            "flow of \"{}\" in stream \"{}\"",
            plant.components[component].id, plant.streams[stream].id
        ),
        Var::Extent(r) => format!("extent of reaction \"{}\"", plant.reactions[r].id),
        Var::Split(s) => format!("split fraction of stream \"{}\"", plant.streams[s].id),
    }
}

#[cfg(test)]
#[path = "equations_tests/mod.rs"]
mod tests;
