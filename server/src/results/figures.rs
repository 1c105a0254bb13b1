//! Loop figures as time series: each figure of the current report of every period of a range
//! (purge fraction, inert fraction at the reactor inlet, conversions ...) with its σ, one
//! series per figure and one point per period, as JSON or as CSV for the spreadsheets and
//! trending tools engineers already use.

use std::collections::HashMap;

use chrono::{DateTime, Utc};
use reconcile::text::quote;
use serde::Serialize;
use utoipa::ToSchema;

use super::balances::NO_RUN;
use super::{rfc3339, PeriodRange, ResultsError};
use crate::store::{FigureCell, FigureKey, PeriodOutcome, PlantRow, Store};

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
    /// With `points`: the length of the buckets the series were thinned to (each bucket's
    /// lowest and highest value kept); null when every period's point is given.
    pub bucket_seconds: Option<i64>,
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
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct FigurePoint {
    pub period_start: String,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
    /// The period's run status (solved, unobservable, not_converged, infeasible, no_data), or
    /// `no_run`.
    pub status: String,
    /// Whether the period passed the global test; null without a test (no run, no redundancy,
    /// not converged). Of a thinned series: false when any period of the point's bucket
    /// failed it.
    pub global_test_passed: Option<bool>,
}

/// What the store holds of a range for its figure series: the status and global-test
/// result of each period's current run, every figure the range has (in the order the reports
/// list them), and the values of the figures asked for.
pub struct Stored {
    pub outcomes: Vec<PeriodOutcome>,
    pub keys: Vec<FigureKey>,
    pub cells: Vec<FigureCell>,
}

impl Stored {
    /// Read from the store: the figures of `name` and `subject` only, when given.
    pub async fn read(
        store: &Store,
        plant: &PlantRow,
        range: &PeriodRange,
        name: Option<&str>,
        subject: Option<&str>,
    ) -> Result<Stored, ResultsError> {
        let (from, to) = (range.first(), range.to);
        let keys = store.figure_keys(plant, from, to).await?;
        let cells = if name.is_none() && subject.is_none() {
            store.figure_cells(plant, from, to, None).await?
        } else {
            // Each figure asked for on its own, through the index by figure.
            let mut cells = Vec::new();
            for key in keys.iter().filter(|k| {
                name.is_none_or(|q| q == k.name) && subject.is_none_or(|q| q == k.subject)
            }) {
                cells.extend(store.figure_cells(plant, from, to, Some(key)).await?);
            }
            cells
        };
        Ok(Stored {
            outcomes: store.period_outcomes(plant, from, to).await?,
            keys,
            cells,
        })
    }
}

/// The figure series of the range from the current runs of its periods, only those of
/// `name` and `subject` when given. A name or subject that no figure of the range has is
/// refused with the ones there are; a range without any run answers empty series.
pub fn series(
    plant: &str,
    range: &PeriodRange,
    stored: &Stored,
    name: Option<&str>,
    subject: Option<&str>,
) -> Result<FigureSeriesList, ResultsError> {
    let keys = &stored.keys;
    let mut names: Vec<String> = Vec::new();
    for k in keys {
        if !names.contains(&k.name) {
            names.push(k.name.clone());
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
    let wanted =
        |k: &FigureKey| name.is_none_or(|q| q == k.name) && subject.is_none_or(|q| q == k.subject);
    if let Some(subject) = subject {
        if !names.is_empty() && !keys.iter().any(wanted) {
            let mut subjects: Vec<&str> = keys
                .iter()
                .filter(|k| name.is_none_or(|q| q == k.name))
                .map(|k| k.subject.as_str())
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

    // The series asked for, and cells[series][period]: the figure's value and σ in that
    // period, if it has the figure.
    let shown: Vec<&FigureKey> = keys.iter().filter(|k| wanted(k)).collect();
    let index: HashMap<&FigureKey, usize> =
        shown.iter().enumerate().map(|(i, &k)| (k, i)).collect();
    let position: HashMap<DateTime<Utc>, usize> = range
        .starts
        .iter()
        .enumerate()
        .map(|(i, s)| (*s, i))
        .collect();
    let mut cells = vec![vec![None; range.starts.len()]; shown.len()];
    for c in &stored.cells {
        if let (Some(&p), Some(&k)) = (position.get(&c.period_start), index.get(&c.key)) {
            // A σ without its value would be no use to anyone.
            cells[k][p] = Some((c.value, c.value.and(c.sigma)));
        }
    }
    let mut statuses: Vec<(&str, Option<bool>)> = vec![(NO_RUN, None); range.starts.len()];
    for o in &stored.outcomes {
        if let Some(&p) = position.get(&o.period_start) {
            statuses[p] = (o.status.as_str(), o.global_test_passed);
        }
    }
    let series: Vec<FigureSeries> = shown
        .iter()
        .zip(&cells)
        .map(|(key, row)| FigureSeries {
            name: key.name.clone(),
            subject: key.subject.clone(),
            uom: key.uom.clone(),
            points: range
                .starts
                .iter()
                .zip(row)
                .zip(&statuses)
                .map(|((start, cell), (status, passed))| FigurePoint {
                    period_start: rfc3339(*start),
                    value: cell.and_then(|c| c.0),
                    sigma: cell.and_then(|c| c.1),
                    status: status.to_string(),
                    global_test_passed: *passed,
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
        bucket_seconds: None,
    })
}

/// Thin every series to at most `points` points when the range has more periods: the periods
/// are cut into `points / 2` buckets of equal length, and each bucket keeps its lowest and its
/// highest value (in time order, once when they are the same point), each with its own σ and
/// status, so that a chart of the thinned series shows every excursion of the full one. A
/// bucket with a period without a value also keeps that period's null point, so that gaps
/// stay gaps; a bucket where any period failed the global test says so on all its points.
pub fn thin(answer: &mut FigureSeriesList, points: usize) {
    let periods = answer.periods;
    let buckets = (points / 2).max(1);
    if periods <= points.max(2) {
        return;
    }
    let per_bucket = periods.div_ceil(buckets);
    answer.bucket_seconds = Some(per_bucket as i64 * answer.period_seconds);
    for series in &mut answer.series {
        let full = std::mem::take(&mut series.points);
        let mut kept = Vec::with_capacity(2 * buckets + 1);
        for chunk in full.chunks(per_bucket) {
            let failed = chunk.iter().any(|p| p.global_test_passed == Some(false));
            let with_value = chunk
                .iter()
                .enumerate()
                .filter_map(|(i, p)| p.value.map(|v| (i, v)));
            let low = with_value.clone().min_by(|a, b| a.1.total_cmp(&b.1));
            let high = with_value.max_by(|a, b| a.1.total_cmp(&b.1));
            let gap = chunk.iter().position(|p| p.value.is_none());
            let mut chosen: Vec<usize> = [low.map(|l| l.0), high.map(|h| h.0), gap]
                .into_iter()
                .flatten()
                .collect();
            chosen.sort_unstable();
            chosen.dedup();
            for i in chosen {
                let mut point = chunk[i].clone();
                if failed {
                    point.global_test_passed = Some(false);
                }
                kept.push(point);
            }
        }
        series.points = kept;
    }
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

#[cfg(test)]
mod tests {
    use super::*;

    /// A year-like series of `n` hourly points: a slow wave, one spike, a gap, one period
    /// failing the global test.
    fn series_of(n: usize) -> FigureSeriesList {
        let points = (0..n)
            .map(|i| {
                let gap = (200..210).contains(&i);
                let value = match i {
                    537 => 9.0,
                    _ => (i as f64 / 50.0).sin(),
                };
                FigurePoint {
                    period_start: format!("period {i:05}"),
                    value: (!gap).then_some(value),
                    sigma: (!gap).then_some(0.01 + i as f64 * 1e-6),
                    status: if gap { NO_RUN.into() } else { "solved".into() },
                    global_test_passed: if gap { None } else { Some(i != 800) },
                }
            })
            .collect();
        FigureSeriesList {
            plant: "p".into(),
            from: "a".into(),
            to: "b".into(),
            period_seconds: 3600,
            periods: n,
            names: vec!["purge_fraction".into()],
            series: vec![FigureSeries {
                name: "purge_fraction".into(),
                subject: "purge".into(),
                uom: "fraction".into(),
                points,
            }],
            bucket_seconds: None,
        }
    }

    #[test]
    fn thinning_keeps_every_excursion_gap_and_failed_test_in_time_order() {
        let full = series_of(1000);
        let mut thinned = series_of(1000);
        thin(&mut thinned, 100);
        assert_eq!(thinned.bucket_seconds, Some(20 * 3600));
        let kept = &thinned.series[0].points;
        // Two per bucket, and the one bucket with a gap keeps its null as well.
        assert!(kept.len() <= 100 + 1, "{}", kept.len());
        assert!(kept.len() >= 90, "{}", kept.len());
        assert!(kept
            .windows(2)
            .all(|w| w[0].period_start < w[1].period_start));
        let values = |p: &[FigurePoint]| p.iter().filter_map(|p| p.value).collect::<Vec<_>>();
        let max = |v: Vec<f64>| v.into_iter().fold(f64::MIN, f64::max);
        let min = |v: Vec<f64>| v.into_iter().fold(f64::MAX, f64::min);
        assert_eq!(max(values(kept)), 9.0, "the spike survives");
        assert_eq!(min(values(kept)), min(values(&full.series[0].points)));
        assert!(
            kept.iter().any(|p| p.value.is_none()),
            "the gap stays a gap"
        );
        // The bucket holding period 800 (periods 800..820) is marked failed, no other is.
        let failed: Vec<&str> = kept
            .iter()
            .filter(|p| p.global_test_passed == Some(false))
            .map(|p| p.period_start.as_str())
            .collect();
        assert!(!failed.is_empty());
        assert!(
            failed
                .iter()
                .all(|s| ("period 00800"..="period 00819").contains(s)),
            "{failed:?}"
        );
        // Each kept point is a real period's, σ and all.
        for p in kept {
            let i: usize = p.period_start[7..].parse().unwrap();
            assert_eq!(p.value, full.series[0].points[i].value);
            assert_eq!(p.sigma, full.series[0].points[i].sigma);
        }
    }

    #[test]
    fn a_series_within_the_points_is_left_whole() {
        let mut answer = series_of(300);
        thin(&mut answer, 300);
        assert_eq!(answer.series[0].points.len(), 300);
        assert_eq!(answer.bucket_seconds, None);
    }
}
