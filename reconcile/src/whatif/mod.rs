//! What-if steady states from the reconciled base case, with σ (docs/what-if.md).
//!
//! The base case's reconciled state calibrates a loop response model (calibrate.rs): the
//! fresh feeds, each reaction's single-pass conversion, each separator's component splits and
//! each splitter's fractions, as reconciled. Settings replace some of them (settings.rs); the
//! new steady state solves the model's own equations with those specifications by Newton
//! (simulate/steady.rs, from the base state), and its σ is carried from the base case's covariance by
//! the delta method through the implicit function theorem (propagate.rs). Sweeps repeat that
//! along one setting; an economic optimum searches the purge split (optimum.rs). When the loop
//! has no steady state, diagnose.rs says which component accumulates. The base case is one
//! period or a range combined by covariance (base.rs); holds.rs says what was held; target.rs
//! where the moving purge stands and what it can reach.

pub mod base;
pub mod calibrate;
pub mod diagnose;
pub mod holds;
pub mod optimum;
pub mod point;
pub mod propagate;
pub mod settings;
pub mod target;

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::analysis::Analysis;
use crate::estimate::Estimate;
use crate::model::Plant;
use crate::report::{ReportStatus, CAUTION};
use crate::simulate::SimulateError;

pub use base::{BaseCase, Calibrated};
pub use calibrate::ReactionHold;
pub use optimum::{Economics, InletLimit, Optimum};
pub use point::{Point, PointStatus};
pub use settings::{Set, Setting, Sweep, MAX_SWEEP_POINTS};
pub use target::free_fraction;
use target::reachable;

/// Why a what-if cannot be answered: bad input, naming the item, or a base case that cannot
/// carry it.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum WhatIfError {
    #[error("setting \"{0}\": not a setting name (split:STREAM, feed:STREAM, conversion:REACTION, inlet_fraction:UNIT:COMPONENT)")]
    BadName(String),
    #[error("setting \"{0}\": the value is not a number")]
    BadValue(String),
    #[error("setting \"{0}\": the value must be a finite number")]
    NotFinite(String),
    #[error("setting \"{name}\": {value} is outside {range}")]
    OutOfRange {
        name: String,
        value: f64,
        range: String,
    },
    #[error("setting \"{0}\" is given twice")]
    Twice(String),
    #[error("unknown stream \"{0}\"")]
    UnknownStream(String),
    #[error("stream \"{0}\" is not an outlet of a splitter")]
    NotASplitterOutlet(String),
    #[error("stream \"{0}\" is not a fresh feed (it does not come from outside)")]
    NotAFeed(String),
    #[error("unknown reaction \"{0}\"")]
    UnknownReaction(String),
    #[error("reaction \"{0}\" has no key reactant, so it has no conversion to set")]
    NoKeyReactant(String),
    #[error("unknown unit \"{0}\"")]
    UnknownUnit(String),
    #[error("unit \"{0}\" is not a reactor")]
    NotAReactor(String),
    #[error("unknown component \"{0}\"")]
    UnknownComponent(String),
    #[error("no inlet of reactor \"{unit}\" carries \"{component}\"")]
    NotCarried { unit: String, component: String },
    #[error("sweep \"{0}\": write NAME=FROM..TO:N")]
    BadSweep(String),
    #[error("sweep \"{name}\": {points} points, more than the {MAX_SWEEP_POINTS} allowed")]
    SweepTooLong { name: String, points: usize },
    #[error("free \"{0}\": write split:STREAM, STREAM an outlet of a splitter")]
    BadFree(String),
    #[error("no splitter outlet leaves the plant, so no purge can move to reach a target")]
    NoPurge,
    #[error("several splitter outlets leave the plant ({0}); say which moves with free")]
    AmbiguousFree(String),
    #[error("{0}")]
    Conflict(String),
    #[error("the base case was not reconciled (status {0}); a what-if needs a solved base case")]
    BaseNotSolved(String),
    #[error("the base case leaves the {0} unobservable, and the what-if needs it")]
    Unobservable(String),
    #[error("target \"{name}\" = {value}: {reason}")]
    Unreachable {
        name: String,
        value: f64,
        reason: String,
    },
    #[error("economics: {0}")]
    Economics(String),
    #[error("the model's specifications: {0}")]
    Model(SimulateError),
}

/// What to compute.
#[derive(Debug, Clone, Default)]
pub struct Request {
    /// Settings `NAME=VALUE`, by name.
    pub set: Vec<(String, f64)>,
    pub sweep: Option<Sweep>,
    /// `split:STREAM`: the splitter outlet that moves to reach an inlet-fraction target or
    /// the optimum (default: the one splitter outlet that leaves the plant).
    pub free: Option<String>,
    pub hold: ReactionHold,
    pub economics: Option<Economics>,
}

/// The base case a what-if starts from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Base {
    /// The period's start (of a range: its first reconciled period's).
    pub period_start: String,
    /// `solved`, or `unobservable` when some value the what-if does not need is unknown.
    pub status: ReportStatus,
    /// Of a range: the start of its last reconciled period.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub period_last: Option<String>,
    /// Of a range: the number of periods combined.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub periods: Option<usize>,
    /// Of a range: periods left out because they were not reconciled.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub skipped: Vec<String>,
}

/// The answer: the base case, what was held, each point, the optimum when asked.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct WhatIf {
    pub base: Base,
    pub holds: Vec<String>,
    pub points: Vec<Point>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub optimum: Option<Optimum>,
    pub caution: String,
}

/// The base case's estimate, refused unless it was reconciled.
pub fn base_estimate(analysis: &Analysis) -> Result<&Estimate, WhatIfError> {
    let status = analysis.report.status;
    match (&analysis.estimate, status) {
        (Some(est), ReportStatus::Solved | ReportStatus::Unobservable) => Ok(est),
        _ => Err(WhatIfError::BaseNotSolved(status.as_str().to_string())),
    }
}

/// The settings resolved and checked.
pub fn resolve_sets(plant: &Plant, set: &[(String, f64)]) -> Result<Vec<Set>, WhatIfError> {
    let mut out: Vec<Set> = Vec::new();
    for (name, value) in set {
        let setting = Setting::parse(plant, name)?;
        setting.check(name, *value)?;
        if out.iter().any(|s| s.setting == setting) {
            return Err(WhatIfError::Twice(name.clone()));
        }
        out.push(Set {
            name: name.clone(),
            setting,
            value: *value,
        });
    }
    let targets = out
        .iter()
        .filter(|s| matches!(s.setting, Setting::InletFraction { .. }))
        .count();
    if targets > 1 {
        return Err(WhatIfError::Conflict(
            "only one inlet-fraction target at a time: one purge split moves to reach it".into(),
        ));
    }
    Ok(out)
}

/// The `free` choice resolved to a splitter outlet.
pub fn resolve_free(plant: &Plant, free: Option<&str>) -> Result<Option<usize>, WhatIfError> {
    let Some(text) = free else { return Ok(None) };
    let Some(("split", _)) = text.split_once(':') else {
        return Err(WhatIfError::BadFree(text.to_string()));
    };
    match Setting::parse(plant, text)? {
        Setting::Split { stream } => Ok(Some(stream)),
        _ => Err(WhatIfError::BadFree(text.to_string())),
    }
}

/// The what-if of `request` from the base case `analysis`.
pub fn what_if(
    plant: &Plant,
    analysis: &Analysis,
    request: &Request,
) -> Result<WhatIf, WhatIfError> {
    let est = base_estimate(analysis)?;
    let base = BaseCase {
        estimates: vec![est],
    };
    let label = Base {
        period_start: analysis.report.period_start.clone(),
        status: analysis.report.status,
        period_last: None,
        periods: None,
        skipped: Vec::new(),
    };
    run(plant, &base, label, request)
}

/// The what-if of `request` from a range of periods, their calibrated values combined by
/// their covariance (base.rs). Periods that were not reconciled are skipped and listed.
pub fn what_if_range(
    plant: &Plant,
    analyses: &[Analysis],
    request: &Request,
) -> Result<WhatIf, WhatIfError> {
    let mut estimates = Vec::new();
    let mut used = Vec::new();
    let mut skipped = Vec::new();
    for a in analyses {
        match base_estimate(a) {
            Ok(est) => {
                estimates.push(est);
                used.push(a);
            }
            Err(_) => skipped.push(a.report.period_start.clone()),
        }
    }
    let (Some(first), Some(last)) = (used.first(), used.last()) else {
        return Err(WhatIfError::BaseNotSolved(
            "no period of the range was reconciled".into(),
        ));
    };
    let all_solved = used.iter().all(|a| a.report.status == ReportStatus::Solved);
    let label = Base {
        period_start: first.report.period_start.clone(),
        status: if all_solved {
            ReportStatus::Solved
        } else {
            ReportStatus::Unobservable
        },
        period_last: Some(last.report.period_start.clone()),
        periods: Some(used.len()),
        skipped,
    };
    run(plant, &BaseCase { estimates }, label, request)
}

fn run(
    plant: &Plant,
    base: &BaseCase,
    label: Base,
    request: &Request,
) -> Result<WhatIf, WhatIfError> {
    let sets = resolve_sets(plant, &request.set)?;
    let free = resolve_free(plant, request.free.as_deref())?;
    let sweep = match &request.sweep {
        Some(sweep) => {
            let setting = Setting::parse(plant, &sweep.name)?;
            setting.check(&sweep.name, sweep.from)?;
            setting.check(&sweep.name, sweep.to)?;
            if sets.iter().any(|s| s.setting == setting) {
                return Err(WhatIfError::Twice(sweep.name.clone()));
            }
            Some((setting, sweep))
        }
        None => None,
    };
    let values: Vec<Option<f64>> = match &sweep {
        Some((_, s)) => s.values().into_iter().map(Some).collect(),
        None => vec![None],
    };
    let mut start = base.start().to_vec();
    let mut points = Vec::with_capacity(values.len());
    let mut holds: Option<Vec<String>> = None;
    for v in values {
        let mut point_sets = sets.clone();
        if let (Some((setting, s)), Some(v)) = (&sweep, v) {
            point_sets.push(Set {
                name: s.name.clone(),
                setting: *setting,
                value: v,
            });
        }
        resolve_sets(
            plant,
            &point_sets
                .iter()
                .map(|s| (s.name.clone(), s.value))
                .collect::<Vec<_>>(),
        )?;
        let calibrated = base.calibrated(plant, &point_sets, free, request.hold)?;
        if holds.is_none() {
            holds = Some(calibrate::holds(&calibrated.params));
        }
        let mut solved = point::solve(plant, &calibrated, &start)?;
        // A target is reached by moving the free purge split, which must stay in [0, 1].
        if let Some(t) = point_sets
            .iter()
            .find(|s| matches!(s.setting, Setting::InletFraction { .. }))
        {
            let purge = calibrate::free_outlet(plant, free)?;
            let reason = match &solved {
                Ok(s) => {
                    let phi = free_fraction(plant, base.layout(), purge, &s.z);
                    (!(-1e-12..=1.0 + 1e-12).contains(&phi)).then(|| {
                        format!(
                            "reaching it needs split:{} = {phi:.6}, outside [0, 1]",
                            plant.streams[purge].id
                        )
                    })
                }
                Err(reason) => Some(reason.clone()),
            };
            if let Some(reason) = reason {
                let reason = match reachable(plant, base, &point_sets, t, purge, request.hold)? {
                    Some(range) => range,
                    None => reason,
                };
                if sweep.is_none() {
                    return Err(WhatIfError::Unreachable {
                        name: t.name.clone(),
                        value: t.value,
                        reason,
                    });
                }
                solved = Err(format!(
                    "no purge reaches {} = {}: {reason}",
                    t.name, t.value
                ));
            }
        }
        // Continuation along a sweep: each point starts from the last one solved.
        if let Ok(s) = &solved {
            start = s.z.clone();
        }
        let settings: BTreeMap<String, f64> = point_sets
            .iter()
            .map(|s| (s.name.clone(), s.value))
            .collect();
        points.push(point::report(plant, base.layout(), settings, &solved));
    }
    let optimum = match &request.economics {
        Some(e) => Some(optimum::optimum(plant, base, &sets, free, request.hold, e)?),
        None => None,
    };
    Ok(WhatIf {
        base: label,
        holds: holds.unwrap_or_default(),
        points,
        optimum,
        caution: CAUTION.to_string(),
    })
}
