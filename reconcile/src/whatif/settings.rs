//! The names of what-if settings (`split:STREAM`, `feed:STREAM`, `conversion:REACTION`,
//! `inlet_fraction:UNIT:COMPONENT`), resolved against the plant, their values checked, and
//! sweeps `NAME=FROM..TO:N`.

use crate::model::{Plant, UnitKind};

use super::WhatIfError;

/// Most points a sweep may ask for.
pub const MAX_SWEEP_POINTS: usize = 1000;

/// What a setting changes, by index into the plant.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Setting {
    /// The fraction of its splitter's inlet that this outlet takes.
    Split { stream: usize },
    /// The total molar flow of a fresh feed, kmol/h, its composition kept.
    Feed { stream: usize },
    /// The single-pass conversion of the reaction's key reactant.
    Conversion { reaction: usize },
    /// A target mole fraction of a component in the combined inlet of a reactor, reached by
    /// moving the free purge split.
    InletFraction { unit: usize, component: usize },
}

impl Setting {
    /// Resolve a setting name against the plant.
    pub fn parse(plant: &Plant, name: &str) -> Result<Setting, WhatIfError> {
        let bad = || WhatIfError::BadName(name.to_string());
        let (kind, rest) = name.split_once(':').ok_or_else(bad)?;
        match kind {
            "split" => {
                let stream = stream(plant, rest)?;
                let from = plant.streams[stream].from;
                if !from.is_some_and(|u| plant.units[u].kind == UnitKind::Splitter) {
                    return Err(WhatIfError::NotASplitterOutlet(rest.to_string()));
                }
                Ok(Setting::Split { stream })
            }
            "feed" => {
                let stream = stream(plant, rest)?;
                if plant.streams[stream].from.is_some() {
                    return Err(WhatIfError::NotAFeed(rest.to_string()));
                }
                Ok(Setting::Feed { stream })
            }
            "conversion" => {
                let reaction = plant
                    .reactions
                    .iter()
                    .position(|r| r.id == rest)
                    .ok_or_else(|| WhatIfError::UnknownReaction(rest.to_string()))?;
                if plant.reactions[reaction].key.is_none() {
                    return Err(WhatIfError::NoKeyReactant(rest.to_string()));
                }
                Ok(Setting::Conversion { reaction })
            }
            "inlet_fraction" => {
                let (u, c) = rest.split_once(':').ok_or_else(bad)?;
                let unit = plant
                    .units
                    .iter()
                    .position(|x| x.id == u)
                    .ok_or_else(|| WhatIfError::UnknownUnit(u.to_string()))?;
                if plant.units[unit].kind != UnitKind::Reactor {
                    return Err(WhatIfError::NotAReactor(u.to_string()));
                }
                let component = plant
                    .component_index(c)
                    .ok_or_else(|| WhatIfError::UnknownComponent(c.to_string()))?;
                let carried = plant.units[unit]
                    .inlets
                    .iter()
                    .any(|&s| plant.streams[s].components.contains(&component));
                if !carried {
                    return Err(WhatIfError::NotCarried {
                        unit: u.to_string(),
                        component: c.to_string(),
                    });
                }
                Ok(Setting::InletFraction { unit, component })
            }
            _ => Err(bad()),
        }
    }

    /// Refuse a value this setting cannot take (NaN, ∞, a fraction outside [0, 1], a
    /// negative flow).
    pub fn check(&self, name: &str, value: f64) -> Result<(), WhatIfError> {
        if !value.is_finite() {
            return Err(WhatIfError::NotFinite(name.to_string()));
        }
        let (lo, hi) = match self {
            Setting::Feed { .. } => (0.0, f64::INFINITY),
            Setting::Split { .. } | Setting::Conversion { .. } | Setting::InletFraction { .. } => {
                (0.0, 1.0)
            }
        };
        if value < lo || value > hi {
            return Err(WhatIfError::OutOfRange {
                name: name.to_string(),
                value,
                range: if hi.is_finite() {
                    format!("[{lo}, {hi}]")
                } else {
                    format!("≥ {lo}")
                },
            });
        }
        Ok(())
    }
}

fn stream(plant: &Plant, id: &str) -> Result<usize, WhatIfError> {
    plant
        .stream_index(id)
        .ok_or_else(|| WhatIfError::UnknownStream(id.to_string()))
}

/// A sweep of one setting over evenly spaced values, ends included.
#[derive(Debug, Clone, PartialEq)]
pub struct Sweep {
    pub name: String,
    pub from: f64,
    pub to: f64,
    pub points: usize,
}

impl Sweep {
    /// Parse `NAME=FROM..TO:N`.
    pub fn parse(text: &str) -> Result<Sweep, WhatIfError> {
        let bad = || WhatIfError::BadSweep(text.to_string());
        let (name, range) = text.rsplit_once('=').ok_or_else(bad)?;
        let (range, points) = range.rsplit_once(':').ok_or_else(bad)?;
        let (from, to) = range.split_once("..").ok_or_else(bad)?;
        let number = |s: &str| s.trim().parse::<f64>().map_err(|_| bad());
        let points: usize = points.trim().parse().map_err(|_| bad())?;
        Sweep::new(name.trim(), number(from)?, number(to)?, points)
    }

    pub fn new(name: &str, from: f64, to: f64, points: usize) -> Result<Sweep, WhatIfError> {
        if points == 0 {
            return Err(WhatIfError::BadSweep(format!(
                "{name}: a sweep needs at least one point"
            )));
        }
        if points > MAX_SWEEP_POINTS {
            return Err(WhatIfError::SweepTooLong {
                name: name.to_string(),
                points,
            });
        }
        if !from.is_finite() || !to.is_finite() {
            return Err(WhatIfError::NotFinite(name.to_string()));
        }
        Ok(Sweep {
            name: name.to_string(),
            from,
            to,
            points,
        })
    }

    /// The values, evenly spaced from `from` to `to`.
    pub fn values(&self) -> Vec<f64> {
        if self.points == 1 {
            return vec![self.from];
        }
        let step = (self.to - self.from) / (self.points - 1) as f64;
        (0..self.points)
            .map(|k| {
                if k + 1 == self.points {
                    self.to
                } else {
                    self.from + step * k as f64
                }
            })
            .collect()
    }
}

/// A setting with its name as the user wrote it and its value.
#[derive(Debug, Clone, PartialEq)]
pub struct Set {
    pub name: String,
    pub setting: Setting,
    pub value: f64,
}

/// Parse `NAME=VALUE`.
pub fn parse_assignment(text: &str) -> Result<(String, f64), WhatIfError> {
    let (name, value) = text
        .split_once('=')
        .ok_or_else(|| WhatIfError::BadName(text.to_string()))?;
    let value: f64 = value
        .trim()
        .parse()
        .map_err(|_| WhatIfError::BadValue(text.to_string()))?;
    Ok((name.trim().to_string(), value))
}
