//! `loopbal what-if`: the loop's new steady state after a change, from the reconciled base
//! case of one period of a readings file (docs/what-if.md). Reads the files as `loopbal
//! reconcile` does, reconciles the chosen period as `period_run` does, and hands the engine's
//! what-if (reconcile::whatif) to stdout as JSON, CSV or text.

use std::collections::BTreeMap;
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context;
use chrono::{DateTime, Utc};
use reconcile::whatif::{
    self, Economics, InletLimit, PointStatus, ReactionHold, Request, Sweep, WhatIf, WhatIfError,
};
use reconcile::Plant;

use crate::period_run;
use crate::BadInput;

/// How the answer is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    Json,
    Csv,
    Text,
}

/// What each reaction is held at, as the command line says it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum HoldArg {
    Conversion,
    Extent,
}

/// A range of period starts [from, to), either end open.
pub type PeriodRange = (Option<DateTime<Utc>>, Option<DateTime<Utc>>);

pub struct Options<'a> {
    pub model: &'a Path,
    pub readings: &'a Path,
    pub period: Option<DateTime<Utc>>,
    /// A range of periods [from, to) as the base case, either end open.
    pub range: Option<PeriodRange>,
    pub set: &'a [String],
    pub sweep: Option<&'a str>,
    pub free: Option<&'a str>,
    pub hold: HoldArg,
    pub format: Format,
    pub price: &'a [String],
    pub loss_value: &'a [String],
    pub recycle_cost: Option<f64>,
    pub max_inlet_fraction: Option<&'a str>,
    pub purge_range: &'a str,
}

fn bad(e: WhatIfError) -> anyhow::Error {
    BadInput::new(format!("what-if: {e}")).into()
}

pub fn what_if(opts: &Options) -> anyhow::Result<ExitCode> {
    let plant = crate::model_file::load(opts.model)?;
    let request = request(&plant, opts)?;
    let result = match opts.range {
        Some((from, to)) => {
            let file = opts.readings.display();
            let analyses: Vec<reconcile::Analysis> =
                crate::run::file_periods(&plant, opts.readings)?
                    .into_iter()
                    .filter(|(start, _)| from.is_none_or(|f| *start >= f))
                    .filter(|(start, _)| to.is_none_or(|t| *start < t))
                    .map(|(start, readings)| {
                        period_run::analyse(&plant, start, readings, Vec::new())
                    })
                    .collect();
            if analyses.is_empty() {
                return Err(BadInput::new(format!(
                    "--period-from/--period-to: {file} has no readings in that range"
                ))
                .into());
            }
            whatif::what_if_range(&plant, &analyses, &request)
        }
        None => {
            let (start, readings) =
                crate::run::one_period(&plant, opts.readings, opts.period, "base case")?;
            let analysis = period_run::analyse(&plant, start, readings, Vec::new());
            whatif::what_if(&plant, &analysis, &request)
        }
    };
    let answer = match result {
        Ok(answer) => answer,
        // A base case that did not reconcile, or leaves unobservable what the what-if needs,
        // is a failed run on good input.
        Err(e @ (WhatIfError::BaseNotSolved(_) | WhatIfError::Unobservable(_))) => {
            anyhow::bail!("what-if: {e}")
        }
        Err(e) => return Err(bad(e)),
    };
    let mut stdout = std::io::stdout().lock();
    let text = match opts.format {
        Format::Json => serde_json::to_string_pretty(&answer)? + "\n",
        Format::Csv => csv(&answer)?,
        Format::Text => text(&answer),
    };
    stdout
        .write_all(text.as_bytes())
        .and_then(|()| stdout.flush())
        .context("cannot write the what-if to standard output")?;
    Ok(ExitCode::SUCCESS)
}

/// The engine's request from the options, every item checked against the plant.
fn request(plant: &Plant, opts: &Options) -> anyhow::Result<Request> {
    let mut set = Vec::new();
    for s in opts.set {
        let (name, value) = whatif::settings::parse_assignment(s).map_err(bad)?;
        let setting = whatif::Setting::parse(plant, &name).map_err(bad)?;
        setting.check(&name, value).map_err(bad)?;
        set.push((name, value));
    }
    let sweep = opts.sweep.map(Sweep::parse).transpose().map_err(bad)?;
    let economics = economics(opts)?;
    Ok(Request {
        set,
        sweep,
        free: opts.free.map(str::to_string),
        hold: match opts.hold {
            HoldArg::Conversion => ReactionHold::Conversion,
            HoldArg::Extent => ReactionHold::Extent,
        },
        economics,
    })
}

/// `COMPONENT=VALUE` pairs of an option.
fn pairs(option: &str, items: &[String]) -> anyhow::Result<BTreeMap<String, f64>> {
    let mut out = BTreeMap::new();
    for item in items {
        let (k, v) = item
            .split_once('=')
            .ok_or_else(|| BadInput::new(format!("{option} \"{item}\": write COMPONENT=VALUE")))?;
        let v: f64 = v
            .trim()
            .parse()
            .ok()
            .filter(|v: &f64| v.is_finite())
            .ok_or_else(|| {
                BadInput::new(format!(
                    "{option} \"{item}\": the value is not a finite number"
                ))
            })?;
        out.insert(k.trim().to_string(), v);
    }
    Ok(out)
}

/// The economics when any value is given.
fn economics(opts: &Options) -> anyhow::Result<Option<Economics>> {
    let product_price = pairs("--price", opts.price)?;
    let loss_value = pairs("--loss-value", opts.loss_value)?;
    if product_price.is_empty() && loss_value.is_empty() && opts.recycle_cost.is_none() {
        if opts.max_inlet_fraction.is_some() {
            return Err(BadInput::new(
                "--max-inlet-fraction: an optimum needs values (--price, --loss-value, --recycle-cost)".into(),
            )
            .into());
        }
        return Ok(None);
    }
    let inlet_limit = match opts.max_inlet_fraction {
        Some(text) => {
            let bad = || {
                BadInput::new(format!(
                    "--max-inlet-fraction \"{text}\": write UNIT:COMPONENT=MAX"
                ))
            };
            let (name, max) = text.split_once('=').ok_or_else(bad)?;
            let (unit, component) = name.split_once(':').ok_or_else(bad)?;
            let max: f64 = max.trim().parse().map_err(|_| bad())?;
            Some(InletLimit {
                unit: unit.to_string(),
                component: component.to_string(),
                max,
            })
        }
        None => None,
    };
    let bad = || {
        BadInput::new(format!(
            "--purge-range \"{}\": write LO..HI",
            opts.purge_range
        ))
    };
    let (lo, hi) = opts.purge_range.split_once("..").ok_or_else(bad)?;
    let lo: f64 = lo.trim().parse().map_err(|_| bad())?;
    let hi: f64 = hi.trim().parse().map_err(|_| bad())?;
    Ok(Some(Economics {
        product_price,
        loss_value,
        recycle_cost: opts.recycle_cost.unwrap_or(0.0),
        inlet_limit,
        range: [lo, hi],
    }))
}

/// One line per point and figure, then per point and stream flow; written as every CSV of
/// loopbal is (crate::csv_out: text cells that begin like a formula neutralised, numbers as
/// they are).
fn csv(answer: &WhatIf) -> anyhow::Result<String> {
    use crate::csv_out::{Cell, Table};
    use Cell::{Number, Text};
    let mut t = Table::new(&[
        "point", "settings", "status", "kind", "name", "subject", "uom", "value", "sigma",
    ])?;
    for (k, p) in answer.points.iter().enumerate() {
        let k = k.to_string();
        let settings = p
            .settings
            .iter()
            .map(|(n, v)| format!("{n}={v}"))
            .collect::<Vec<_>>()
            .join(" ");
        let status = match p.status {
            PointStatus::Solved => "solved",
            PointStatus::NoSteadyState => "no_steady_state",
        };
        if let Some(reason) = &p.reason {
            t.row(&[
                Text(&k),
                Text(&settings),
                Text(status),
                Text("reason"),
                Text(""),
                Text(""),
                Text(""),
                Text(reason),
                Text(""),
            ])?;
        }
        for f in &p.figures {
            t.row(&[
                Text(&k),
                Text(&settings),
                Text(status),
                Text("figure"),
                Text(&f.name),
                Text(&f.subject),
                Text(&f.uom),
                Number(f.value),
                Number(f.sigma),
            ])?;
        }
        for s in &p.streams {
            t.row(&[
                Text(&k),
                Text(&settings),
                Text(status),
                Text("stream"),
                Text("molar_flow"),
                Text(&s.id),
                Text("kmol/h"),
                Number(s.molar_flow),
                Number(s.molar_flow_sigma),
            ])?;
        }
    }
    if let Some(o) = &answer.optimum {
        t.row(&[
            Text("optimum"),
            Text(&format!("{}={}", o.setting, o.value)),
            Text("solved"),
            Text("optimum"),
            Text("margin"),
            Text(""),
            Text("per h"),
            Number(Some(o.margin)),
            Number(Some(o.margin_sigma)),
        ])?;
    }
    Ok(String::from_utf8(t.finish()?)?)
}

/// A short table for people: the purge-decision figures of each point with ± σ.
fn text(answer: &WhatIf) -> String {
    const SHOWN: [&str; 7] = [
        "purge_fraction",
        "purge_flow",
        "inert_fraction_reactor_inlet",
        "product_made",
        "reactant_lost_in_purge",
        "recycle_flow",
        "recycle_ratio",
    ];
    let mut out = format!(
        "what-if from the base case of {} (status {})\n",
        answer.base.period_start,
        answer.base.status.as_str()
    );
    out += "held:\n";
    for h in &answer.holds {
        out += &format!("  - {h}\n");
    }
    for p in &answer.points {
        let settings = p
            .settings
            .iter()
            .map(|(n, v)| format!("{n} = {v}"))
            .collect::<Vec<_>>()
            .join(", ");
        out += &format!(
            "\n{}:\n",
            if settings.is_empty() {
                "nothing set (the base case)".to_string()
            } else {
                settings
            }
        );
        if let Some(reason) = &p.reason {
            out += &format!("  no steady state: {reason}\n");
            continue;
        }
        for f in p
            .figures
            .iter()
            .filter(|f| SHOWN.contains(&f.name.as_str()))
        {
            out += &format!(
                "  {:<30} {:<18} {:>14} ± {:<12} {}\n",
                f.name,
                f.subject,
                f.value.map_or("—".into(), |v| format!("{v:.6}")),
                f.sigma.map_or("—".into(), |v| format!("{v:.6}")),
                f.uom
            );
        }
    }
    if let Some(o) = &answer.optimum {
        out += &format!(
            "\noptimum: {} = {:.6}, margin {:.3} ± {:.3} per hour{}\n",
            o.setting,
            o.value,
            o.margin,
            o.margin_sigma,
            o.bound
                .as_ref()
                .map_or(String::new(), |b| format!(" (on {b})"))
        );
    }
    out += &format!("\n{}\n", answer.caution);
    out
}
