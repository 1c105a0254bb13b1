//! Recycle-loop figures (docs/methods.md §6) from the reconciled state, each with σ propagated
//! through its gradient (σ² = ∇fᵀ P ∇f), and the raw imbalance of every unit before
//! reconciliation.
//!
//! Most figures are ratios of two linear functions of the state, f = aᵀz / bᵀz, whose
//! gradient is (a − f b) / bᵀz.

use std::collections::BTreeMap;

use crate::equations::Layout;
use crate::estimate::Estimate;
use crate::model::{Plant, UnitKind};
use crate::report::Figure;
use crate::uncertainty::Uncertainty;
use crate::uom::Quantity;

/// A sparse linear function of the state.
#[derive(Debug, Clone, Default)]
pub(crate) struct Linear(pub(crate) BTreeMap<usize, f64>);

impl Linear {
    pub(crate) fn add(mut self, i: usize, v: f64) -> Self {
        *self.0.entry(i).or_insert(0.0) += v;
        self
    }

    pub(crate) fn plus(mut self, other: &Linear, scale: f64) -> Self {
        for (&i, &v) in &other.0 {
            *self.0.entry(i).or_insert(0.0) += scale * v;
        }
        self
    }

    fn value(&self, z: &[f64]) -> f64 {
        self.0.iter().map(|(&i, &v)| v * z[i]).sum()
    }

    fn grad(&self) -> Vec<(usize, f64)> {
        self.0
            .iter()
            .map(|(&i, &v)| (i, v))
            .filter(|(_, v)| *v != 0.0)
            .collect()
    }
}

/// Builds figures of a state z with σ from an [`Uncertainty`]; the what-if adds its own
/// figures with it.
pub(crate) struct Builder<'a> {
    pub(crate) plant: &'a Plant,
    pub(crate) layout: &'a Layout,
    pub(crate) z: &'a [f64],
    pub(crate) unc: &'a dyn Uncertainty,
    pub(crate) out: Vec<Figure>,
}

impl Builder<'_> {
    fn z(&self) -> &[f64] {
        self.z
    }

    /// n_{s,c} for each stream in `streams` that carries c.
    pub(crate) fn component(&self, streams: &[usize], c: usize) -> Linear {
        streams.iter().fold(Linear::default(), |acc, &s| {
            match self.layout.flow(self.plant, s, c) {
                Some(i) => acc.add(i, 1.0),
                None => acc,
            }
        })
    }

    /// Total molar flow of the streams.
    pub(crate) fn total(&self, streams: &[usize]) -> Linear {
        (0..self.plant.components.len()).fold(Linear::default(), |acc, c| {
            acc.plus(&self.component(streams, c), 1.0)
        })
    }

    fn push(
        &mut self,
        name: &str,
        subject: String,
        uom: &str,
        value: f64,
        grad: Vec<(usize, f64)>,
    ) {
        let c = self.unc;
        let (value, sigma) = if value.is_finite() && c.is_observable(&grad) {
            (Some(value), Some(c.sigma(&grad)))
        } else {
            (None, None)
        };
        self.out.push(Figure {
            name: name.into(),
            subject,
            uom: uom.into(),
            value,
            sigma,
        });
    }

    pub(crate) fn linear(
        &mut self,
        name: &str,
        subject: String,
        uom: &str,
        f: &Linear,
        scale: f64,
    ) {
        self.affine(name, subject, uom, f, 0.0, scale);
    }

    /// scale × (fᵀz + constant).
    fn affine(
        &mut self,
        name: &str,
        subject: String,
        uom: &str,
        f: &Linear,
        constant: f64,
        scale: f64,
    ) {
        let value = scale * (f.value(self.z()) + constant);
        let grad = f.grad().into_iter().map(|(i, v)| (i, scale * v)).collect();
        self.push(name, subject, uom, value, grad);
    }

    /// scale × aᵀz / bᵀz; null when the denominator vanishes.
    pub(crate) fn ratio(
        &mut self,
        name: &str,
        subject: String,
        uom: &str,
        a: &Linear,
        b: &Linear,
        scale: f64,
    ) {
        let den = b.value(self.z());
        if den.abs() < 1e-12 {
            self.push(name, subject, uom, f64::NAN, Vec::new());
            return;
        }
        let f = a.value(self.z()) / den;
        let grad: Vec<(usize, f64)> = a
            .clone()
            .plus(b, -f)
            .grad()
            .into_iter()
            .map(|(i, v)| (i, scale * v / den))
            .collect();
        let c = self.unc;
        if c.by_parts() && f.is_finite() && c.is_observable(&grad) {
            // Var(a/b) = (aᵀPa − 2f aᵀPb + f² bᵀPb) / b², in parts: a denominator such as the
            // fresh-feed total recurs in many figures, and its P b is solved for once.
            let (ga, gb) = (a.grad(), b.grad());
            let var = c.covariance(&ga, &ga) - 2.0 * f * c.covariance(&ga, &gb)
                + f * f * c.covariance(&gb, &gb);
            self.out.push(Figure {
                name: name.into(),
                subject,
                uom: uom.into(),
                value: Some(scale * f),
                sigma: Some((scale / den).abs() * var.max(0.0).sqrt()),
            });
            return;
        }
        self.push(name, subject, uom, scale * f, grad);
    }
}

/// Every loop figure of the estimate.
pub fn loop_figures(plant: &Plant, est: &Estimate) -> Vec<Figure> {
    loop_figures_of(plant, &est.layout, &est.solution.z, &est.classification)
}

/// Every loop figure of state z, σ from `unc`.
pub fn loop_figures_of(
    plant: &Plant,
    layout: &Layout,
    z: &[f64],
    unc: &dyn Uncertainty,
) -> Vec<Figure> {
    let mut b = Builder {
        plant,
        layout,
        z,
        unc,
        out: Vec::new(),
    };
    let feeds: Vec<usize> = (0..plant.streams.len())
        .filter(|&s| plant.streams[s].from.is_none())
        .collect();
    let products: Vec<usize> = (0..plant.streams.len())
        .filter(|&s| plant.streams[s].to.is_none())
        .collect();
    let inerts: Vec<usize> = (0..plant.components.len())
        .filter(|&c| plant.components[c].inert)
        .collect();
    let reactants: Vec<usize> = (0..plant.components.len())
        .filter(|&c| plant.reactions.iter().any(|r| r.coefficient(c) < 0.0))
        .collect();

    for (r, reaction) in plant.reactions.iter().enumerate() {
        let Some(key) = reaction.key else { continue };
        let inlets = &plant.units[reaction.unit].inlets;
        let consumed = Linear::default().add(layout.extent(r), reaction.coefficient(key).abs());
        let inlet_key = b.component(inlets, key);
        b.ratio(
            "single_pass_conversion",
            reaction.id.clone(),
            "fraction",
            &consumed,
            &inlet_key,
            1.0,
        );
        let fresh_key = b.component(&feeds, key);
        if !fresh_key.0.is_empty() {
            b.ratio(
                "overall_conversion",
                reaction.id.clone(),
                "fraction",
                &consumed,
                &fresh_key,
                1.0,
            );
        }
        // Reactant ratio at the reactor inlet against stoichiometric (an excess reactant
        // behaves like an inert and needs purging too).
        for &(c, nu) in &reaction.stoichiometry {
            if nu < 0.0 && c != key {
                let stoich = nu.abs() / reaction.coefficient(key).abs();
                let other = b.component(inlets, c);
                let subject = format!("{}:{}", reaction.id, plant.components[c].id);
                b.ratio(
                    "reactant_ratio_vs_stoichiometric",
                    subject,
                    "ratio",
                    &other,
                    &inlet_key,
                    1.0 / stoich,
                );
            }
        }
    }

    for (u, unit) in plant.units.iter().enumerate() {
        match unit.kind {
            UnitKind::Reactor => {
                let inlet_total = b.total(&unit.inlets);
                for &c in &inerts {
                    let x = b.component(&unit.inlets, c);
                    let subject = format!("{}:{}", unit.id, plant.components[c].id);
                    b.ratio(
                        "inert_fraction_reactor_inlet",
                        subject,
                        "fraction",
                        &x,
                        &inlet_total,
                        1.0,
                    );
                }
            }
            UnitKind::Splitter => {
                let purges: Vec<usize> = unit
                    .outlets
                    .iter()
                    .copied()
                    .filter(|&o| plant.streams[o].to.is_none())
                    .collect();
                if purges.is_empty() {
                    continue;
                }
                let fresh_total = b.total(&feeds);
                let recycles: Vec<usize> = unit
                    .outlets
                    .iter()
                    .copied()
                    .filter(|&o| plant.streams[o].to.is_some())
                    .collect();
                if !recycles.is_empty() {
                    let recycle = b.total(&recycles);
                    b.ratio(
                        "recycle_ratio",
                        plant.units[u].id.clone(),
                        "ratio",
                        &recycle,
                        &fresh_total,
                        1.0,
                    );
                }
                for &o in &purges {
                    let id = plant.streams[o].id.clone();
                    // φ of the last outlet is 1 − Σ of the others.
                    let (phi, constant) = split_fraction(layout, unit, o);
                    b.affine(
                        "purge_fraction",
                        id.clone(),
                        "fraction",
                        &phi,
                        constant,
                        1.0,
                    );
                    let purge_total = b.total(&[o]);
                    b.linear("purge_flow", id.clone(), "kmol/h", &purge_total, 1.0);
                    for &c in &reactants {
                        let lost = b.component(&[o], c);
                        let subject = format!("{id}:{}", plant.components[c].id);
                        b.linear(
                            "reactant_lost_in_purge",
                            subject.clone(),
                            "kmol/h",
                            &lost,
                            1.0,
                        );
                        let fresh = b.component(&feeds, c);
                        if !fresh.0.is_empty() {
                            b.ratio(
                                "reactant_lost_in_purge_pct_of_feed",
                                subject,
                                "%",
                                &lost,
                                &fresh,
                                100.0,
                            );
                        }
                    }
                    for &c in &inerts {
                        let x = b.component(&[o], c);
                        let subject = format!("{id}:{}", plant.components[c].id);
                        b.ratio(
                            "inert_fraction_purge",
                            subject,
                            "fraction",
                            &x,
                            &purge_total,
                            1.0,
                        );
                    }
                }
            }
            UnitKind::Mixer | UnitKind::Separator | UnitKind::Node => {}
        }
    }

    for &c in &inerts {
        let id = plant.components[c].id.clone();
        let inflow = b.component(&feeds, c);
        let outflow = b.component(&products, c);
        b.linear("inert_in", id.clone(), "kmol/h", &inflow, 1.0);
        b.linear("inert_out", id.clone(), "kmol/h", &outflow, 1.0);
        let balance = inflow.clone().plus(&outflow, -1.0);
        b.linear("inert_in_minus_out", id, "kmol/h", &balance, 1.0);
    }
    b.out
}

/// φ of a splitter outlet as linear part and constant: its own variable, or 1 − Σ of the
/// others for the last outlet.
pub(crate) fn split_fraction(
    layout: &Layout,
    unit: &crate::model::Unit,
    outlet: usize,
) -> (Linear, f64) {
    match layout.split(outlet) {
        Some(i) => (Linear::default().add(i, 1.0), 0.0),
        None => (
            unit.outlets
                .iter()
                .filter_map(|&o| layout.split(o))
                .fold(Linear::default(), |acc, i| acc.add(i, -1.0)),
            1.0,
        ),
    }
}

/// A raw component flow (kmol/h) and its σ from the period's readings, where the meters give
/// it: a component-flow meter, or a total-flow meter with a mole-fraction analyser.
fn raw_component_flow(
    plant: &Plant,
    values: &BTreeMap<usize, (f64, f64)>,
    on_stream: &[Vec<usize>],
    s: usize,
    c: usize,
) -> Option<(f64, f64)> {
    if !plant.streams[s].components.contains(&c) {
        return Some((0.0, 0.0));
    }
    let on = |q: Quantity, comp: Option<usize>| {
        on_stream[s].iter().find_map(|&mi| {
            let m = &plant.meters[mi];
            let fits = m.quantity == q && m.component == comp && m.basis.is_none();
            let (v, sd) = values.get(&mi).copied()?;
            let f = m.uom.factor_from_base();
            fits.then_some((v / f, sd / f))
        })
    };
    if let Some(v) = on(Quantity::ComponentFlow, Some(c)) {
        return Some(v);
    }
    let total = on(Quantity::MolarFlow, None).or_else(|| on(Quantity::StdVolumeFlow, None))?;
    if plant.streams[s].components.len() == 1 {
        return Some(total);
    }
    let (x, sx) = on(Quantity::MoleFraction, Some(c))?;
    let (f, sf) = total;
    Some((f * x, ((x * sf).powi(2) + (f * sx).powi(2)).sqrt()))
}

/// The imbalance in − out of every unit and component that the raw readings determine (kmol/h),
/// with σ from the meters' σ. Components that react in the unit are left out: their balance
/// needs the extent, which no meter reads.
pub fn raw_imbalances(plant: &Plant, est: &Estimate) -> Vec<Figure> {
    let values: BTreeMap<usize, (f64, f64)> = est
        .measured
        .iter()
        .map(|m| (m.meter, (m.value, m.sigma)))
        .collect();
    // The meters of each stream, in model order (the first that fits is used).
    let mut on_stream: Vec<Vec<usize>> = vec![Vec::new(); plant.streams.len()];
    for (mi, m) in plant.meters.iter().enumerate() {
        on_stream[m.stream].push(mi);
    }
    let mut out = Vec::new();
    for unit in &plant.units {
        for (c, comp) in plant.components.iter().enumerate() {
            let reacts = unit
                .reactions
                .iter()
                .any(|&r| plant.reactions[r].coefficient(c) != 0.0);
            let touches = unit
                .inlets
                .iter()
                .chain(&unit.outlets)
                .any(|&s| plant.streams[s].components.contains(&c));
            if reacts || !touches {
                continue;
            }
            let mut total = 0.0;
            let mut var = 0.0;
            let mut known = true;
            for (&s, sign) in unit
                .inlets
                .iter()
                .map(|s| (s, 1.0))
                .chain(unit.outlets.iter().map(|s| (s, -1.0)))
            {
                match raw_component_flow(plant, &values, &on_stream, s, c) {
                    Some((v, sd)) => {
                        total += sign * v;
                        var += sd * sd;
                    }
                    None => known = false,
                }
            }
            if known {
                out.push(Figure {
                    name: "raw_imbalance".into(),
                    subject: format!("{}:{}", unit.id, comp.id),
                    uom: "kmol/h".into(),
                    value: Some(total),
                    sigma: Some(var.sqrt()),
                });
            }
        }
    }
    out
}
