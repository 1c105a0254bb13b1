//! Loop figures as time series: each figure of the current report of every period of a range
//! (purge fraction, inert fraction at the reactor inlet, conversions ...) with its σ, one
//! series per figure and one point per period, as JSON or as CSV for the spreadsheets and
//! trending tools engineers already use.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::text::quote;
use serde::Serialize;
use utoipa::ToSchema;

use super::balances::NO_RUN;
use super::stored::ReportPart;
use super::{rfc3339, PeriodRange, ResultsError};

/// The figures of a range, one series per figure.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigureSeriesList {
    pub plant: String,
    /// The range asked for, RFC 3339, UTC.
    pub from: String,
    pub to: String,
    pub period_seconds: i64,
    /// Periods in the range: every series has one point for each.
    pub periods: usize,
    /// Every figure name found in the range (before the name and subject filters).
    pub names: Vec<String>,
    pub series: Vec<FigureSeries>,
}

/// One figure of one subject over the range.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigureSeries {
    pub name: String,
    /// A reaction, a stream, a unit, a component, or `item:component`.
    pub subject: String,
    /// `fraction`, `ratio`, `%` or `kmol/h`.
    pub uom: String,
    /// One point per period of the range, oldest first.
    pub points: Vec<FigurePoint>,
}

/// The figure in one period. Value and σ are null where the period has no run, its run did
/// not converge, or the figure is not observable that period: a gap, never a made-up number.
#[derive(Debug, Serialize, ToSchema)]
pub struct FigurePoint {
    pub period_start: String,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
    /// The period's run status (solved, unobservable, not_converged, infeasible, no_data), or
    /// `no_run`.
    pub status: String,
}

/// The figure series of the range from the current reports of its periods (`reports`, by
/// period start, read with [`Part::Figures`](super::stored::Part::Figures)), only those of
/// `name` and `subject` when given. A name or subject that no figure of the range has is
/// refused with the ones there are; a range without any report answers empty series.
pub fn series(
    plant: &str,
    range: &PeriodRange,
    reports: &BTreeMap<DateTime<Utc>, ReportPart>,
    name: Option<&str>,
    subject: Option<&str>,
) -> Result<FigureSeriesList, ResultsError> {
    // Series in the order the reports list their figures (model order), each keyed by
    // name, subject and uom (a new model revision may change a figure's uom).
    let mut keys: Vec<(String, String, String)> = Vec::new();
    let mut index: BTreeMap<(String, String, String), usize> = BTreeMap::new();
    let mut names: Vec<String> = Vec::new();
    for report in reports.values() {
        for f in report.figures.iter().flatten() {
            if !names.contains(&f.name) {
                names.push(f.name.clone());
            }
            let key = (f.name.clone(), f.subject.clone(), f.uom.clone());
            if !index.contains_key(&key) {
                index.insert(key.clone(), keys.len());
                keys.push(key);
            }
        }
    }
    if let Some(name) = name {
        if !names.is_empty() && !names.iter().any(|n| n == name) {
            return Err(ResultsError::NoSuchFigure(format!(
                "no figure named {} in the range; the figures there are: {}",
                quote(name),
                names.join(", ")
            )));
        }
    }
    let wanted = |(n, s, _): &(String, String, String)| {
        name.is_none_or(|q| q == n) && subject.is_none_or(|q| q == s)
    };
    if let Some(subject) = subject {
        if !names.is_empty() && !keys.iter().any(wanted) {
            let mut subjects: Vec<&str> = keys
                .iter()
                .filter(|(n, _, _)| name.is_none_or(|q| q == n))
                .map(|(_, s, _)| s.as_str())
                .collect();
            subjects.sort_unstable();
            subjects.dedup();
            return Err(ResultsError::NoSuchFigure(format!(
                "no figure of subject {}{} in the range; the subjects there are: {}",
                quote(subject),
                name.map(|n| format!(" named {}", quote(n)))
                    .unwrap_or_default(),
                subjects.join(", ")
            )));
        }
    }

    // cells[series][period]: the figure's value and σ in that period, if it has the figure.
    let position: BTreeMap<DateTime<Utc>, usize> = range
        .starts
        .iter()
        .enumerate()
        .map(|(i, s)| (*s, i))
        .collect();
    let mut cells = vec![vec![None; range.starts.len()]; keys.len()];
    for (start, report) in reports {
        let Some(&p) = position.get(start) else {
            continue;
        };
        for f in report.figures.iter().flatten() {
            let key = (f.name.clone(), f.subject.clone(), f.uom.clone());
            if let Some(&k) = index.get(&key) {
                // A σ without its value would be no use to anyone.
                cells[k][p] = Some((f.value, f.value.and(f.sigma)));
            }
        }
    }
    let statuses: Vec<String> = range
        .starts
        .iter()
        .map(|start| match reports.get(start) {
            Some(r) => r.status.as_str().to_string(),
            None => NO_RUN.into(),
        })
        .collect();
    let series: Vec<FigureSeries> = keys
        .iter()
        .zip(&cells)
        .filter(|(key, _)| wanted(key))
        .map(|((name, subject, uom), row)| FigureSeries {
            name: name.clone(),
            subject: subject.clone(),
            uom: uom.clone(),
            points: range
                .starts
                .iter()
                .zip(row)
                .zip(&statuses)
                .map(|((start, cell), status)| FigurePoint {
                    period_start: rfc3339(*start),
                    value: cell.and_then(|c| c.0),
                    sigma: cell.and_then(|c| c.1),
                    status: status.clone(),
                })
                .collect(),
        })
        .collect();

    Ok(FigureSeriesList {
        plant: plant.to_string(),
        from: rfc3339(range.from),
        to: rfc3339(range.to),
        period_seconds: range.period_seconds,
        periods: range.starts.len(),
        names,
        series,
    })
}

/// The series as CSV (`text/csv`): `period_start,name,subject,uom,value,sigma`, series after
/// series, empty cells for null. Numbers are written in Rust's shortest form that reads back as
/// the same f64, so the CSV and JSON answers agree number for number; text cells that begin
/// like a formula are neutralised (crate::csv_out).
pub fn to_csv(answer: &FigureSeriesList) -> Result<Vec<u8>, csv::Error> {
    use crate::csv_out::{Cell, Table};
    let mut table = Table::new(&["period_start", "name", "subject", "uom", "value", "sigma"])?;
    for s in &answer.series {
        for p in &s.points {
            table.row(&[
                Cell::Text(&p.period_start),
                Cell::Text(&s.name),
                Cell::Text(&s.subject),
                Cell::Text(&s.uom),
                Cell::Number(p.value),
                Cell::Number(p.sigma),
            ])?;
        }
    }
    table.finish()
}
