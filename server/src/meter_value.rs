//! `loopbal meter-value`: what each meter is worth to a figure and which new meter would help
//! it most, for one period of a readings file (docs/meter-value.md). Reads the files as
//! `loopbal reconcile` does, reconciles the chosen period as `period_run` does, and writes the
//! engine's answer (reconcile::meter_value) as JSON, the same as the service's route.

use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context;
use chrono::{DateTime, Utc};
use reconcile::meter_value::{Accuracies, Request, WeightedFigure};

use crate::period_run;
use crate::results::meter_value::{of_period, PeriodValue};
use crate::results::ResultsError;
use crate::BadInput;

pub struct Options<'a> {
    pub model: &'a Path,
    pub readings: &'a Path,
    pub period: Option<DateTime<Utc>>,
    /// `NAME:SUBJECT[=WEIGHT]`, one or more.
    pub figures: &'a [String],
    pub add_best: Option<usize>,
    pub flow_sigma_pct: Option<f64>,
    pub flow_sigma: Option<f64>,
    pub analyser_sigma: Option<f64>,
}

/// One figure as written `NAME:SUBJECT` or `NAME:SUBJECT=WEIGHT` (the subject may itself hold
/// a colon: `component_flow:STREAM:COMPONENT`).
pub fn parse_figure(text: &str) -> Result<WeightedFigure, String> {
    let shape = || format!("figure \"{text}\": write NAME:SUBJECT or NAME:SUBJECT=WEIGHT");
    let (figure, weight) = match text.rsplit_once('=') {
        Some((figure, weight)) => {
            let w: f64 = weight.trim().parse().map_err(|_| {
                format!("figure \"{text}\": the weight \"{weight}\" is not a number")
            })?;
            (figure, w)
        }
        None => (text, 1.0),
    };
    let (name, subject) = figure.split_once(':').ok_or_else(shape)?;
    if name.trim().is_empty() || subject.trim().is_empty() {
        return Err(shape());
    }
    Ok(WeightedFigure {
        name: name.trim().to_string(),
        subject: subject.trim().to_string(),
        weight,
    })
}

/// The engine's request from what was asked, the accuracies defaulted where not given.
pub fn request(
    figures: &[String],
    add_best: Option<usize>,
    flow_sigma_pct: Option<f64>,
    flow_sigma: Option<f64>,
    analyser_sigma: Option<f64>,
) -> Result<Request, String> {
    let defaults = Accuracies::default();
    Ok(Request {
        figures: figures
            .iter()
            .map(|f| parse_figure(f))
            .collect::<Result<_, _>>()?,
        accuracies: Accuracies {
            flow_sigma_pct: flow_sigma_pct.unwrap_or(defaults.flow_sigma_pct),
            flow_sigma,
            analyser_sigma: analyser_sigma.unwrap_or(defaults.analyser_sigma),
        },
        add_best,
    })
}

pub fn meter_value(opts: &Options) -> anyhow::Result<ExitCode> {
    let plant = crate::model_file::load(opts.model)?;
    let request = request(
        opts.figures,
        opts.add_best,
        opts.flow_sigma_pct,
        opts.flow_sigma,
        opts.analyser_sigma,
    )
    .map_err(|e| BadInput::new(format!("meter-value: {e}")))?;
    let (start, readings) = crate::run::one_period(&plant, opts.readings, opts.period, "period")?;
    // A file has no technicians' notes: no meter is out of service.
    let analysis = period_run::analyse(&plant, start, readings, Vec::new());
    let answer: PeriodValue = match of_period(&plant, start, &analysis, &request) {
        Ok(answer) => answer,
        // A period that did not reconcile is a failed run on good input.
        Err(ResultsError::NotReconciled(e)) => anyhow::bail!("meter-value: {e}"),
        Err(e) => return Err(BadInput::new(format!("meter-value: {e}")).into()),
    };
    let mut stdout = std::io::stdout().lock();
    serde_json::to_writer_pretty(&mut stdout, &answer)
        .map_err(anyhow::Error::from)
        .and_then(|()| writeln!(stdout).map_err(anyhow::Error::from))
        .context("cannot write the meter value to standard output")?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::parse_figure;

    #[test]
    fn a_figure_is_name_subject_and_an_optional_weight() {
        let f = parse_figure("purge_fraction:purge").unwrap();
        assert_eq!(
            (f.name.as_str(), f.subject.as_str(), f.weight),
            ("purge_fraction", "purge", 1.0)
        );
        let f = parse_figure("component_flow:purge:CH4=2.5").unwrap();
        assert_eq!(
            (f.name.as_str(), f.subject.as_str(), f.weight),
            ("component_flow", "purge:CH4", 2.5)
        );
        for bad in ["purge_fraction", ":purge", "purge_fraction:", "a:b=heavy"] {
            let e = parse_figure(bad).unwrap_err();
            assert!(e.contains(bad), "{e}");
        }
    }
}
