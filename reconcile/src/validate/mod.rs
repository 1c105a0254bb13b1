//! Validation of a [`ModelSpec`] into a [`Plant`] (docs/model.md): every problem is collected,
//! each naming the item at fault.

mod meters;
mod problems;

use meters::validate_meters;
use problems::{index_ids, Problems};

use crate::model::{
    parse_period, Component, ModelError, ModelSpec, Plant, Reaction, Stream, Unit, UnitKind,
    OUTSIDE,
};
use crate::names;
use crate::text::quote;

/// Parse and validate in one step: TOML unless the text looks like a JSON object.
pub fn parse_plant(text: &str) -> Result<Plant, ModelError> {
    let spec = if text.trim_start().starts_with('{') {
        ModelSpec::from_json(text)?
    } else {
        ModelSpec::from_toml(text)?
    };
    Plant::new(spec)
}

impl Plant {
    /// Validate a model; every problem found is returned, each naming its item. Its name and
    /// every id must be safe names ([`names`]).
    pub fn new(spec: ModelSpec) -> Result<Plant, ModelError> {
        validate(spec, Names::Checked)
    }

    /// Validate a model that was admitted before: every rule but the one on names. A model
    /// stored before that rule keeps working as it did; wherever its names are written they
    /// are quoted or neutralised, as any text is.
    pub fn revalidate(spec: ModelSpec) -> Result<Plant, ModelError> {
        validate(spec, Names::AsAdmitted)
    }
}

/// Whether the names of a model are held to [`names`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Names {
    Checked,
    AsAdmitted,
}

/// Relative tolerance on Σ ν_c M_c for a reaction to count as conserving mass.
pub const MASS_BALANCE_TOLERANCE: f64 = 1e-6;

fn validate(spec: ModelSpec, rule: Names) -> Result<Plant, ModelError> {
    let mut p = Problems(Vec::new());
    let checked = rule == Names::Checked;

    if spec.name.trim().is_empty() {
        p.add("model", "has an empty name");
    } else if let Some(why) = checked.then(|| names::fault(&spec.name)).flatten() {
        p.add("model", format!("name {} {why}", quote(&spec.name)));
    }
    let period_seconds = parse_period(&spec.period).unwrap_or_else(|| {
        p.add(
            "model",
            format!(
                "period {} is not a length such as 15m, 1h or 1d that divides a day \
                 (or whole days, at most 366d)",
                quote(&spec.period)
            ),
        );
        3600
    });
    if !(spec.alpha.is_finite() && spec.alpha > 0.0 && spec.alpha < 0.5) {
        p.add(
            "model",
            format!("alpha {} must lie strictly between 0 and 0.5", spec.alpha),
        );
    }

    let comp_ix = index_ids(
        "component",
        spec.components.iter().map(|c| c.id.as_str()),
        checked,
        &mut p.0,
    );
    let unit_ix = index_ids(
        "unit",
        spec.units.iter().map(|u| u.id.as_str()),
        checked,
        &mut p.0,
    );
    let stream_ix = index_ids(
        "stream",
        spec.streams.iter().map(|s| s.id.as_str()),
        checked,
        &mut p.0,
    );
    let _ = index_ids(
        "reaction",
        spec.reactions.iter().map(|r| r.id.as_str()),
        checked,
        &mut p.0,
    );
    let _ = index_ids(
        "meter",
        spec.meters.iter().map(|m| m.tag.as_str()),
        checked,
        &mut p.0,
    );

    if spec.components.is_empty() {
        p.add("model", "has no components");
    }
    if spec.streams.is_empty() {
        p.add("model", "has no streams");
    }

    let components: Vec<Component> = spec
        .components
        .iter()
        .map(|c| {
            if !(c.molar_mass.is_finite() && c.molar_mass > 0.0) {
                p.add(
                    format!("component {}", quote(&c.id)),
                    format!(
                        "molar_mass {} must be a positive number (g/mol)",
                        c.molar_mass
                    ),
                );
            }
            Component {
                id: c.id.clone(),
                molar_mass: c.molar_mass,
                inert: c.inert,
            }
        })
        .collect();

    let mut units: Vec<Unit> = spec
        .units
        .iter()
        .map(|u| {
            if u.id == OUTSIDE {
                p.add(
                    "unit \"outside\"",
                    "\"outside\" is reserved for the plant boundary",
                );
            }
            Unit {
                id: u.id.clone(),
                kind: u.kind,
                inlets: Vec::new(),
                outlets: Vec::new(),
                reactions: Vec::new(),
            }
        })
        .collect();

    let mut streams = Vec::with_capacity(spec.streams.len());
    for (si, s) in spec.streams.iter().enumerate() {
        let item = format!("stream {}", quote(&s.id));
        let mut end = |name: &str, which: &str| -> Option<usize> {
            if name == OUTSIDE {
                return None;
            }
            match unit_ix.get(name) {
                Some(&u) => Some(u),
                None => {
                    p.add(
                        &item,
                        format!("{which} unit {} is not a unit of the model", quote(name)),
                    );
                    None
                }
            }
        };
        let from = end(&s.from, "its from");
        let to = end(&s.to, "its to");
        if s.from == OUTSIDE && s.to == OUTSIDE {
            p.add(
                &item,
                "joins the outside to the outside: it touches no unit",
            );
        }
        if from.is_some() && from == to {
            p.add(
                &item,
                format!("leaves and enters the same unit {}", quote(&s.from)),
            );
        }
        let comps = match &s.components {
            None => (0..components.len()).collect(),
            Some(list) => {
                if list.is_empty() {
                    p.add(&item, "lists no components");
                }
                let mut v: Vec<usize> = Vec::new();
                // A set beside the list: a list may be as long as the model has components.
                let mut listed = vec![false; components.len()];
                for c in list {
                    match comp_ix.get(c) {
                        Some(&ci) if listed[ci] => {
                            p.add(&item, format!("lists component {} twice", quote(c)))
                        }
                        Some(&ci) => {
                            listed[ci] = true;
                            v.push(ci)
                        }
                        None => p.add(&item, format!("lists unknown component {}", quote(c))),
                    }
                }
                v.sort_unstable();
                v
            }
        };
        if let Some(u) = from {
            units[u].outlets.push(si);
        }
        if let Some(u) = to {
            units[u].inlets.push(si);
        }
        streams.push(Stream {
            id: s.id.clone(),
            from,
            to,
            components: comps,
        });
    }

    let mut reactions = Vec::with_capacity(spec.reactions.len());
    for (ri, r) in spec.reactions.iter().enumerate() {
        let item = format!("reaction {}", quote(&r.id));
        let unit = match unit_ix.get(&r.unit) {
            Some(&u) => {
                match units[u].kind {
                    UnitKind::Reactor => {}
                    UnitKind::Mixer | UnitKind::Splitter | UnitKind::Separator | UnitKind::Node => {
                        p.add(
                            &item,
                            format!(
                                "is attached to unit {}, a {}, not a reactor",
                                quote(&r.unit),
                                units[u].kind
                            ),
                        );
                    }
                }
                units[u].reactions.push(ri);
                u
            }
            None => {
                p.add(
                    &item,
                    format!("is attached to unknown unit {}", quote(&r.unit)),
                );
                usize::MAX
            }
        };
        if r.stoichiometry.is_empty() {
            p.add(&item, "has an empty stoichiometry");
        }
        let mut stoich = Vec::new();
        let (mut net, mut scale) = (0.0, 0.0);
        let mut mass_known = true;
        for (c, &nu) in &r.stoichiometry {
            if !nu.is_finite() {
                p.add(
                    &item,
                    format!("coefficient of {} is {nu}, not a finite number", quote(c)),
                );
                mass_known = false;
                continue;
            }
            if nu == 0.0 {
                p.add(
                    &item,
                    format!("coefficient of {} is zero; leave it out", quote(c)),
                );
                continue;
            }
            match comp_ix.get(c) {
                Some(&ci) => {
                    stoich.push((ci, nu));
                    let m = components[ci].molar_mass;
                    net += nu * m;
                    scale += (nu * m).abs();
                }
                None => {
                    p.add(&item, format!("names unknown component {}", quote(c)));
                    mass_known = false;
                }
            }
        }
        stoich.sort_by_key(|(c, _)| *c);
        if mass_known
            && scale.is_finite()
            && scale > 0.0
            && net.abs() > MASS_BALANCE_TOLERANCE * scale
        {
            p.add(
                &item,
                format!(
                    "does not conserve mass: Σ ν·M = {net:.6} g/mol against {scale:.6} g/mol moved \
                     (tolerance {MASS_BALANCE_TOLERANCE} relative)"
                ),
            );
        }
        let key = r.key.as_ref().and_then(|k| match comp_ix.get(k) {
            Some(&ci) if stoich.iter().any(|&(c, nu)| c == ci && nu < 0.0) => Some(ci),
            Some(_) => {
                p.add(
                    &item,
                    format!(
                        "key {} is not a reactant (negative coefficient) of it",
                        quote(k)
                    ),
                );
                None
            }
            None => {
                p.add(
                    &item,
                    format!("key {} is not a component of the model", quote(k)),
                );
                None
            }
        });
        reactions.push(Reaction {
            id: r.id.clone(),
            unit,
            stoichiometry: stoich,
            key,
            irreversible: r.irreversible,
        });
    }

    for u in &units {
        let item = format!("unit {}", quote(&u.id));
        if u.inlets.is_empty() {
            p.add(&item, "has no inlet stream");
        }
        if u.outlets.is_empty() {
            p.add(&item, "has no outlet stream");
        }
        match u.kind {
            UnitKind::Splitter => {
                if u.inlets.len() > 1 {
                    p.add(
                        &item,
                        "is a splitter with more than one inlet; put a mixer before it",
                    );
                }
                if u.outlets.len() < 2 {
                    p.add(
                        &item,
                        format!(
                            "is a splitter with {} outlet(s); it needs two or more",
                            u.outlets.len()
                        ),
                    );
                }
                if let Some(&inlet) = u.inlets.first() {
                    for &o in &u.outlets {
                        if streams[o].components != streams[inlet].components {
                            p.add(
                                format!("stream {}", quote(&streams[o].id)),
                                format!(
                                    "leaves splitter {} but does not carry the same components as its inlet {}",
                                    quote(&u.id),
                                    quote(&streams[inlet].id)
                                ),
                            );
                        }
                    }
                }
            }
            UnitKind::Reactor => {
                if u.reactions.is_empty() {
                    p.add(&item, "is a reactor without any reaction");
                }
            }
            UnitKind::Mixer | UnitKind::Separator | UnitKind::Node => {}
        }
        // Every component a reaction touches must be carried by a stream of the unit, or its
        // balance forces the extent to zero.
        for &ri in &u.reactions {
            for &(c, _) in &reactions[ri].stoichiometry {
                let carried = u
                    .inlets
                    .iter()
                    .chain(&u.outlets)
                    .any(|&s| streams[s].components.contains(&c));
                if !carried {
                    p.add(
                        format!("reaction {}", quote(&reactions[ri].id)),
                        format!(
                            "involves {} but no stream of unit {} carries it",
                            quote(&components[c].id),
                            quote(&u.id)
                        ),
                    );
                }
            }
        }
    }

    let meters = validate_meters(&spec, &comp_ix, &stream_ix, &streams, &mut p);

    if !p.0.is_empty() {
        return Err(ModelError::Invalid(p.0));
    }
    Ok(Plant {
        name: spec.name.clone(),
        period_seconds,
        alpha: spec.alpha,
        spec,
        components,
        units,
        reactions,
        streams,
        meters,
    })
}
