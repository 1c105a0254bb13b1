//! The meters of a model: stream, quantity with its uom (uom.rs), the component and basis it
//! measures, its σ rule and range.

use std::collections::HashMap;

use super::problems::Problems;
use crate::model::{Meter, ModelSpec, Sigma, Stream};
use crate::text::quote;
use crate::uom::{Quantity, Uom};

pub(super) fn validate_meters(
    spec: &ModelSpec,
    comp_ix: &HashMap<String, usize>,
    stream_ix: &HashMap<String, usize>,
    streams: &[Stream],
    p: &mut Problems,
) -> Vec<Meter> {
    let mut meters = Vec::with_capacity(spec.meters.len());
    for m in &spec.meters {
        let item = format!("meter {}", quote(&m.tag));
        let stream = stream_ix.get(&m.stream).copied();
        if stream.is_none() {
            p.add(&item, format!("is on unknown stream {}", quote(&m.stream)));
        }
        let carried = |ci: usize| stream.is_none_or(|s| streams[s].components.contains(&ci));
        let uom = Uom::parse(&m.uom);
        match uom {
            None => {
                let hint = Uom::near_miss(&m.uom, m.quantity)
                    .map(|u| format!(" (spelled exactly: did you mean \"{u}\"?)"))
                    .unwrap_or_default();
                p.add(
                    &item,
                    format!(
                        "uom {} is not one of {} for {}{hint}",
                        quote(&m.uom),
                        Uom::allowed_list(m.quantity),
                        m.quantity.as_str()
                    ),
                )
            }
            Some(u) if !u.fits(m.quantity) => {
                let note = u
                    .misfit_note(m.quantity)
                    .map(|n| format!("; {n}"))
                    .unwrap_or_default();
                p.add(
                    &item,
                    format!(
                        "uom {} does not fit {}; use one of {}{note}",
                        quote(&m.uom),
                        m.quantity.as_str(),
                        Uom::allowed_list(m.quantity)
                    ),
                )
            }
            Some(_) => {}
        }
        let component = match (&m.component, m.quantity.needs_component()) {
            (None, true) => {
                p.add(
                    &item,
                    format!("measures {} but names no component", m.quantity.as_str()),
                );
                None
            }
            (Some(c), false) => {
                p.add(
                    &item,
                    format!(
                        "names component {} but measures {}, a whole-stream quantity",
                        quote(c),
                        m.quantity.as_str()
                    ),
                );
                None
            }
            (None, false) => None,
            (Some(c), true) => match comp_ix.get(c) {
                None => {
                    p.add(&item, format!("names unknown component {}", quote(c)));
                    None
                }
                Some(&ci) if !carried(ci) => {
                    p.add(
                        &item,
                        format!(
                            "measures component {}, which stream {} does not carry",
                            quote(c),
                            quote(&m.stream)
                        ),
                    );
                    None
                }
                Some(&ci) => Some(ci),
            },
        };
        let basis = m.basis.as_ref().map(|list| {
            let may_have_basis = match m.quantity {
                Quantity::MoleFraction => true,
                Quantity::MolarFlow
                | Quantity::MassFlow
                | Quantity::StdVolumeFlow
                | Quantity::ComponentFlow
                | Quantity::MassFraction => false,
            };
            if !may_have_basis {
                p.add(
                    &item,
                    "gives a basis, which only a mole_fraction meter may have",
                );
            }
            let mut v = Vec::new();
            for c in list {
                match comp_ix.get(c) {
                    Some(&ci) if carried(ci) => {
                        if !v.contains(&ci) {
                            v.push(ci)
                        }
                    }
                    Some(_) => p.add(
                        &item,
                        format!(
                            "basis component {} is not carried by stream {}",
                            quote(c),
                            quote(&m.stream)
                        ),
                    ),
                    None => p.add(&item, format!("basis names unknown component {}", quote(c))),
                }
            }
            if let Some(ci) = component {
                if !v.contains(&ci) {
                    p.add(
                        &item,
                        "its basis does not include the component it measures",
                    );
                }
            }
            v.sort_unstable();
            v
        });
        if let Some([lo, hi]) = m.range {
            if !(lo.is_finite() && hi.is_finite() && lo < hi) {
                p.add(
                    &item,
                    format!("range [{lo}, {hi}] must be two finite numbers, low before high"),
                );
            }
        }
        let given = [m.sigma, m.sigma_pct, m.sigma_pct_span];
        let count = given.iter().filter(|s| s.is_some()).count();
        if count != 1 {
            p.add(
                &item,
                "must give exactly one of sigma, sigma_pct or sigma_pct_span",
            );
        }
        for (name, v) in ["sigma", "sigma_pct", "sigma_pct_span"].iter().zip(given) {
            if let Some(v) = v {
                if !(v.is_finite() && v > 0.0) {
                    p.add(&item, format!("{name} {v} must be a positive number"));
                }
            }
        }
        if m.sigma_pct_span.is_some() && m.range.is_none() {
            p.add(
                &item,
                "gives sigma_pct_span but no range to take the span from",
            );
        }
        let sigma = match (m.sigma, m.sigma_pct, m.sigma_pct_span) {
            (Some(s), _, _) => Sigma::Absolute(s),
            (_, Some(s), _) => Sigma::PercentOfReading(s),
            (_, _, Some(s)) => Sigma::PercentOfSpan(s),
            _ => Sigma::Absolute(f64::NAN),
        };
        meters.push(Meter {
            tag: m.tag.clone(),
            stream: stream.unwrap_or(usize::MAX),
            quantity: m.quantity,
            component,
            basis,
            uom: uom.unwrap_or(Uom::Fraction),
            sigma,
            range: m.range,
        });
    }
    meters
}
