//! One period's run, as pure computation: the period's readings (of any quality, each with
//! its out-of-range flag) in, the report, what the engine ran on and each meter's health
//! record out. No store, no clock, no async: `loopbal reconcile` on files and the service's
//! scheduler both call [`run_period`], so the same readings give the same report, warnings
//! included. (The scheduler gives a run a deadline, `reconcile::Cancel`, which can stop it but
//! never change the report of a run that finishes.)
//!
//! The steps: each meter's mean of its good and uncertain readings (bad ones are kept but not
//! used), the steadiness screen, the engine, the inputs as the engine saw them (missing and
//! unsteady tags), and per meter its figures with the counts of bad and out-of-range readings.

use std::collections::{BTreeMap, HashMap};

use chrono::{DateTime, TimeDelta, Utc};
use reconcile::plausible::Screened;
use reconcile::{
    Analysis, Cancel, Cancelled, LeftOut, PeriodInput, Plant, Prepared, Quality, Reading, Report,
};
use serde::Serialize;

use crate::health::MeterPeriod;

/// A meter whose readings within one period spread over more than this many σ makes the
/// period unsteady. The range of n independent normal readings exceeds 8σ with probability
/// well below 10⁻³ for n up to 100 (mean range of 100 readings about 5.0σ, sd near 0.4σ; from
/// memory), so a wider spread means the process moved within the period, not noise.
pub const UNSTEADY_SPREAD_SIGMAS: f64 = 8.0;

/// Smallest |ρ| kept in a meter's record.
const KEPT_CORRELATION: f64 = 0.2;

/// A reading of the period and whether it lies outside its meter's instrument range (the
/// service flags that when the reading is stored, against the revision in effect at its time).
#[derive(Debug, Clone, PartialEq)]
pub struct PeriodReading {
    pub reading: Reading,
    pub out_of_range: bool,
}

/// The period's inputs as the engine saw them, stored with every run.
#[derive(Debug, Clone, Serialize)]
pub struct RunInputs {
    pub revision: i64,
    /// Readings found in the period, of any quality.
    pub readings: usize,
    pub meters: Vec<MeterInput>,
    /// Tags of the revision with no usable reading in the period (unmeasured this period).
    pub missing: Vec<String>,
    /// Tags whose readings spread beyond the steadiness screen.
    pub unsteady: Vec<String>,
    /// Meters left out of the estimate this period (out of service), with why.
    pub left_out: Vec<LeftOutInput>,
    /// Meters with readings the plausibility screen left out of their mean.
    pub implausible: Vec<ImplausibleInput>,
}

/// A meter's readings of one period that no meter of its kind could give, left out of its
/// mean (they stay stored).
#[derive(Debug, Clone, Serialize)]
pub struct ImplausibleInput {
    pub tag: String,
    pub readings: usize,
    /// The first of them, in the meter's uom.
    pub first: f64,
    pub reason: String,
}

/// A meter left out of a period's estimate, by tag.
#[derive(Debug, Clone, Serialize)]
pub struct LeftOutInput {
    pub tag: String,
    pub reason: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct MeterInput {
    pub tag: String,
    /// Mean of the good and uncertain readings, in the meter's uom.
    pub value: f64,
    pub readings: usize,
    pub used_uncertain: bool,
    pub spread: f64,
}

/// What one period's run gives.
#[derive(Debug, Clone)]
pub struct PeriodRun {
    pub report: Report,
    pub inputs: RunInputs,
    /// Each meter of the report with its figures, for its health record.
    pub meters: Vec<(String, MeterPeriod)>,
}

/// Run the period of `plant` (revision number `revision`) starting at `start` on its readings,
/// without the meters of `left_out` (their readings are reported, never used).
/// Readings outside the period, or of tags the revision does not have, count in
/// [`RunInputs::readings`] but are not used. Given up with [`Cancelled`] once `cancel`'s
/// deadline has passed (the engine's checkpoints, and the per-meter correlations, which on a
/// large network cost one solve per meter); with [`Cancel::never`] it always finishes, and a
/// run that finishes gives the same answer whatever its deadline.
pub fn run_period(
    plant: &Plant,
    revision: i64,
    start: DateTime<Utc>,
    readings: Vec<PeriodReading>,
    left_out: Vec<LeftOut>,
    cancel: &Cancel,
) -> Result<PeriodRun, Cancelled> {
    let mut prepared = Prepared::new(plant);
    run_period_prepared(
        plant,
        &mut prepared,
        revision,
        start,
        readings,
        left_out,
        cancel,
    )
}

/// [`run_period`] with what the revision's periods share kept in `prepared` (one
/// [`Prepared`] per revision, handed to each of its periods): the same run.
pub fn run_period_prepared(
    plant: &Plant,
    prepared: &mut Prepared,
    revision: i64,
    start: DateTime<Utc>,
    readings: Vec<PeriodReading>,
    left_out: Vec<LeftOut>,
    cancel: &Cancel,
) -> Result<PeriodRun, Cancelled> {
    let found = readings.len();
    let screens = screens(plant, &readings);
    let mut readings: Vec<Reading> = readings.into_iter().map(|r| r.reading).collect();
    // A meter's mean is summed in time order whatever order the readings came in (a file as
    // written, the store by time), so both paths agree to the last bit.
    readings.sort_by(|a, b| a.time.cmp(&b.time).then_with(|| a.tag.cmp(&b.tag)));
    let (input, screened) = period_input(plant, &readings, start, left_out);
    let (unsteady, warnings) = steadiness(plant, &input);
    let analysis = reconcile::analyse_period_prepared(plant, prepared, &input, cancel)?;
    let correlations = correlations_by_tag(plant, &analysis, cancel)?;
    let mut report = analysis.report;
    report
        .warnings
        .extend(implausible_warnings(plant, &screened));
    report.warnings.extend(warnings);
    let mut inputs = run_inputs(plant, &input, revision, found, unsteady);
    inputs.implausible = screened
        .iter()
        .map(|s| ImplausibleInput {
            tag: plant.meters[s.meter].tag.clone(),
            readings: s.readings,
            first: s.first,
            reason: s.why.to_string(),
        })
        .collect();
    let meters = meter_rows(&report, start, &screens, correlations);
    Ok(PeriodRun {
        report,
        inputs,
        meters,
    })
}

/// The engine's analysis of the period (report and estimate) as [`run_period`] makes it, with
/// the same steadiness warnings and without the same meters: the base case of a what-if.
pub fn analyse(
    plant: &Plant,
    start: DateTime<Utc>,
    readings: Vec<PeriodReading>,
    left_out: Vec<LeftOut>,
) -> Analysis {
    let mut readings: Vec<Reading> = readings.into_iter().map(|r| r.reading).collect();
    readings.sort_by(|a, b| a.time.cmp(&b.time).then_with(|| a.tag.cmp(&b.tag)));
    let (input, screened) = period_input(plant, &readings, start, left_out);
    let (_, warnings) = steadiness(plant, &input);
    let mut analysis = reconcile::analyse_period(plant, &input);
    let report = &mut analysis.report;
    report
        .warnings
        .extend(implausible_warnings(plant, &screened));
    report.warnings.extend(warnings);
    analysis
}

/// Readings of a file grouped by the period of `plant` they fall in, each flagged when outside
/// its meter's instrument range (as ingestion flags a stored reading).
pub fn by_period(
    plant: &Plant,
    readings: Vec<Reading>,
) -> BTreeMap<DateTime<Utc>, Vec<PeriodReading>> {
    let mut periods: BTreeMap<DateTime<Utc>, Vec<PeriodReading>> = BTreeMap::new();
    for reading in readings {
        let start = reconcile::period::period_start(reading.time, plant.period_seconds);
        let out_of_range = out_of_range(plant, &reading);
        periods.entry(start).or_default().push(PeriodReading {
            reading,
            out_of_range,
        });
    }
    periods
}

/// Outside the instrument range its meter has in `plant` (a meter without one has no outside),
/// or a value no meter of its kind could give: the flag ingestion stores.
pub fn out_of_range(plant: &Plant, reading: &Reading) -> bool {
    plant.meter_index(&reading.tag).is_some_and(|i| {
        let meter = &plant.meters[i];
        meter
            .range
            .is_some_and(|[lo, hi]| !(lo..=hi).contains(&reading.value))
            || reconcile::plausible::screen(meter, reading.value).is_some()
    })
}

/// Per tag: (bad readings, readings outside the instrument range or implausible for their
/// meter), for the health screens.
fn screens(plant: &Plant, readings: &[PeriodReading]) -> HashMap<String, (i64, i64)> {
    let mut screens: HashMap<String, (i64, i64)> = HashMap::new();
    for r in readings {
        let implausible = plant
            .meter_index(&r.reading.tag)
            .and_then(|i| reconcile::plausible::screen(&plant.meters[i], r.reading.value))
            .is_some();
        let e = screens.entry(r.reading.tag.clone()).or_default();
        e.0 += i64::from(r.reading.quality == Quality::Bad);
        e.1 += i64::from(r.out_of_range || implausible);
    }
    screens
}

/// The period's input: each meter's mean of its good and uncertain readings that pass the
/// plausibility screen, and the meters left out; with the readings the screen refused.
fn period_input(
    plant: &Plant,
    readings: &[Reading],
    start: DateTime<Utc>,
    left_out: Vec<LeftOut>,
) -> (PeriodInput, Vec<Screened>) {
    let (mut input, screened) = reconcile::prepare(plant, readings)
        .into_iter()
        .find(|(p, _)| p.start == start)
        .unwrap_or_else(|| {
            let empty = PeriodInput {
                start,
                end: start + TimeDelta::seconds(plant.period_seconds),
                values: Vec::new(),
                left_out: Vec::new(),
            };
            (empty, Vec::new())
        });
    input.left_out = left_out;
    (input, screened)
}

/// One warning per meter with readings the plausibility screen refused.
fn implausible_warnings<'a>(
    plant: &'a Plant,
    screened: &'a [Screened],
) -> impl Iterator<Item = String> + 'a {
    screened.iter().map(|s| s.warning(&plant.meters[s.meter]))
}

/// Tags whose readings within the period spread beyond the screen, with a warning for each.
fn steadiness(plant: &Plant, input: &PeriodInput) -> (Vec<String>, Vec<String>) {
    let mut unsteady = Vec::new();
    let mut warnings = Vec::new();
    // A meter left out does not move the estimate, so its spread does not make it unsteady.
    for v in input
        .values
        .iter()
        .filter(|v| input.left_out_reason(v.meter).is_none())
    {
        let meter = &plant.meters[v.meter];
        let Some(sigma) = meter.sigma_for(v.value) else {
            continue;
        };
        if v.readings >= 2 && v.spread > UNSTEADY_SPREAD_SIGMAS * sigma {
            warnings.push(format!(
                "unsteady: meter \"{}\" spread {:.4} {} within the period, {:.1} σ (screen {} σ); \
                 the period is reconciled on its mean, but the loop was moving",
                meter.tag,
                v.spread,
                meter.uom,
                v.spread / sigma,
                UNSTEADY_SPREAD_SIGMAS
            ));
            unsteady.push(meter.tag.clone());
        }
    }
    (unsteady, warnings)
}

fn run_inputs(
    plant: &Plant,
    input: &PeriodInput,
    revision: i64,
    readings: usize,
    unsteady: Vec<String>,
) -> RunInputs {
    let meters: Vec<MeterInput> = input
        .values
        .iter()
        .map(|v| MeterInput {
            tag: plant.meters[v.meter].tag.clone(),
            value: v.value,
            readings: v.readings,
            used_uncertain: v.used_uncertain,
            spread: v.spread,
        })
        .collect();
    let missing = plant
        .meters
        .iter()
        .filter(|m| !meters.iter().any(|v| v.tag == m.tag))
        .map(|m| m.tag.clone())
        .collect();
    let left_out = input
        .left_out
        .iter()
        .filter_map(|l| {
            Some(LeftOutInput {
                tag: plant.meters.get(l.meter)?.tag.clone(),
                reason: l.reason.clone(),
            })
        })
        .collect();
    RunInputs {
        revision,
        readings,
        meters,
        missing,
        unsteady,
        left_out,
        implausible: Vec::new(),
    }
}

/// Each meter's figures of a report, for its health record.
fn meter_rows(
    report: &Report,
    start: DateTime<Utc>,
    screens: &HashMap<String, (i64, i64)>,
    mut correlations: HashMap<String, BTreeMap<String, f64>>,
) -> Vec<(String, MeterPeriod)> {
    report
        .meters
        .iter()
        .map(|m| {
            let (bad, out) = screens.get(&m.tag).copied().unwrap_or_default();
            (
                m.tag.clone(),
                MeterPeriod {
                    period_start: start,
                    measured: m.measured,
                    reconciled: m.reconciled,
                    sigma: m.sigma,
                    adjustment: m.adjustment,
                    adjustment_sigma: m.adjustment_sigma,
                    normalized: m.normalized_adjustment,
                    redundant: m.redundant,
                    flagged: m.suspect || m.measurement_test_failed,
                    readings: m.readings as i64,
                    bad_readings: bad,
                    out_of_range_readings: out,
                    correlations: correlations.remove(&m.tag).unwrap_or_default(),
                },
            )
        })
        .collect()
}

/// Each measured meter's adjustment correlations this period, by tag (see
/// `reconcile::Estimate::adjustment_correlations`): how a bias in it would show elsewhere,
/// which is how meter health tells the biased meter from those its balances drag along.
fn correlations_by_tag(
    plant: &Plant,
    analysis: &Analysis,
    cancel: &Cancel,
) -> Result<HashMap<String, BTreeMap<String, f64>>, Cancelled> {
    let mut out: HashMap<String, BTreeMap<String, f64>> = HashMap::new();
    let Some(est) = &analysis.estimate else {
        return Ok(out);
    };
    let tag = |k: usize| plant.meters[est.measured[k].meter].tag.clone();
    for (i, j, rho) in est.adjustment_correlations_cancellable(KEPT_CORRELATION, cancel)? {
        out.entry(tag(i)).or_default().insert(tag(j), rho);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use chrono::TimeZone;
    use reconcile::period::MeterValue;

    use super::*;

    use crate::test_plants::{tee, FlowMeter};

    /// The tee with a ranged meter on its feed and an unranged one on its outlet.
    fn plant() -> reconcile::Plant {
        reconcile::parse_plant(&tee(&[
            FlowMeter("F-1", "in", Some([0.0, 200.0])),
            FlowMeter("F-2", "out", None),
        ]))
        .unwrap()
    }

    fn start() -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2026, 3, 2, 5, 0, 0).unwrap()
    }

    #[test]
    fn a_spread_beyond_eight_sigma_makes_the_period_unsteady() {
        let plant = plant();
        let value = |meter, spread| MeterValue {
            meter,
            value: 100.0,
            readings: 4,
            used_uncertain: false,
            spread,
        };
        let input = PeriodInput {
            start: start(),
            end: start(),
            values: vec![value(0, 7.9), value(1, 8.1)],
            left_out: Vec::new(),
        };
        let (unsteady, warnings) = steadiness(&plant, &input);
        assert_eq!(unsteady, ["F-2"]);
        assert!(
            warnings[0].contains("F-2") && warnings[0].contains("8.1 σ"),
            "{warnings:?}"
        );
        // One reading has no spread to judge.
        let input = PeriodInput {
            start: start(),
            end: start(),
            values: vec![MeterValue {
                readings: 1,
                ..value(0, 50.0)
            }],
            left_out: Vec::new(),
        };
        assert!(steadiness(&plant, &input).0.is_empty());
    }

    #[test]
    fn run_inputs_list_the_missing_tags() {
        let plant = plant();
        let input = PeriodInput {
            start: start(),
            end: start(),
            values: vec![MeterValue {
                meter: 1,
                value: 3.0,
                readings: 2,
                used_uncertain: true,
                spread: 0.1,
            }],
            left_out: Vec::new(),
        };
        let inputs = run_inputs(&plant, &input, 4, 3, vec![]);
        assert_eq!(inputs.missing, ["F-1"]);
        assert_eq!(inputs.meters[0].tag, "F-2");
        assert_eq!(inputs.revision, 4);
    }

    fn reading(tag: &str, minute: i64, value: f64, quality: Quality) -> PeriodReading {
        PeriodReading {
            reading: Reading {
                tag: tag.into(),
                time: start() + TimeDelta::minutes(minute),
                value,
                quality,
            },
            out_of_range: false,
        }
    }

    #[test]
    fn a_run_screens_counts_and_warns_whatever_the_order_of_its_readings() {
        let plant = plant();
        let mut readings = vec![
            reading("F-1", 0, 100.1, Quality::Good),
            reading("F-1", 20, 99.7, Quality::Uncertain),
            reading("F-1", 40, 250.0, Quality::Bad),
            reading("F-2", 0, 100.0, Quality::Good),
            reading("F-2", 20, 112.0, Quality::Good),
            // Not of this period: counted as found, never used.
            reading("F-2", 60, 1.0, Quality::Good),
        ];
        readings[2].out_of_range = out_of_range(&plant, &readings[2].reading);
        assert!(readings[2].out_of_range);
        assert!(
            !out_of_range(&plant, &readings[4].reading),
            "F-2 has no range"
        );
        let run = run_period(
            &plant,
            3,
            start(),
            readings.clone(),
            Vec::new(),
            &Cancel::never(),
        )
        .unwrap();
        assert_eq!(run.inputs.readings, 6);
        assert_eq!(run.inputs.unsteady, ["F-2"]);
        assert!(run.inputs.meters[0].used_uncertain);
        assert_eq!(
            run.inputs.meters[0].readings, 2,
            "the bad reading is not used"
        );
        assert!(
            run.report
                .warnings
                .iter()
                .any(|w| w.starts_with("unsteady: meter \"F-2\"")),
            "{:?}",
            run.report.warnings
        );
        let f1 = &run.meters.iter().find(|(t, _)| t == "F-1").unwrap().1;
        assert_eq!((f1.bad_readings, f1.out_of_range_readings), (1, 1));
        assert_eq!(run.report.status, reconcile::ReportStatus::Solved);
        readings.reverse();
        let reversed =
            run_period(&plant, 3, start(), readings, Vec::new(), &Cancel::never()).unwrap();
        assert_eq!(
            serde_json::to_value(&reversed.report).unwrap(),
            serde_json::to_value(&run.report).unwrap()
        );
    }

    #[test]
    fn one_meters_absurd_readings_cost_no_other_meter_its_period() {
        let plant = plant();
        // F-1's two absurd readings would overflow its mean (2 × 1.7e308 is past the largest
        // double); F-2's single one would be a finite but absurd mean.
        let readings = vec![
            reading("F-1", 0, 100.0, Quality::Good),
            reading("F-1", 20, 1.7e308, Quality::Good),
            reading("F-1", 40, 1.7e308, Quality::Uncertain),
            reading("F-2", 0, 100.6, Quality::Good),
        ];
        let run = run_period(
            &plant,
            1,
            start(),
            readings.clone(),
            Vec::new(),
            &Cancel::never(),
        )
        .unwrap();
        assert_eq!(run.report.status, reconcile::ReportStatus::Solved);
        let f1 = run.inputs.meters.iter().find(|m| m.tag == "F-1").unwrap();
        assert_eq!(
            (f1.value, f1.readings),
            (100.0, 1),
            "the mean of the others"
        );
        assert_eq!(run.inputs.implausible.len(), 1);
        assert_eq!(run.inputs.implausible[0].tag, "F-1");
        assert_eq!(run.inputs.implausible[0].readings, 2);
        assert!(
            run.report.warnings.iter().any(|w| w.starts_with(
                "implausible: meter \"F-1\": 2 reading(s) left out of the period's mean"
            )),
            "{:?}",
            run.report.warnings
        );
        let measured: Vec<_> = run
            .report
            .meters
            .iter()
            .filter_map(|m| m.measured)
            .collect();
        assert_eq!(measured, [100.0, 100.6]);
        let health = &run.meters.iter().find(|(t, _)| t == "F-1").unwrap().1;
        assert_eq!(
            health.out_of_range_readings, 2,
            "flagged for the technicians"
        );

        // A meter with only absurd readings has no value; the other is still reconciled.
        let readings = vec![
            reading("F-1", 0, 1e300, Quality::Good),
            reading("F-2", 0, 100.6, Quality::Good),
        ];
        let run = run_period(&plant, 1, start(), readings, Vec::new(), &Cancel::never()).unwrap();
        assert_eq!(run.inputs.missing, ["F-1"]);
        assert!(run.report.warnings[0].contains("the meter has no value this period"));
        let f2 = run.report.meters.iter().find(|m| m.tag == "F-2").unwrap();
        assert!((f2.reconciled.unwrap() - 100.6).abs() < 1e-9, "{f2:?}");
    }
}
