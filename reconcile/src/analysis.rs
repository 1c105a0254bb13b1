//! One period end to end: measured values → estimate → classification → tests → report.

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::estimate::Estimate;
use crate::model::Plant;
use crate::period::PeriodInput;
use crate::period_report::{fill_report, report_left_out, unmeasured_meter};
use crate::prepared::Prepared;
use crate::report::{Report, ReportStatus, CAUTION};
use crate::restarts::estimate_prepared;
use crate::solve::Measured;

/// A period's report and the estimate behind it (none when no meter gave a usable value).
pub struct Analysis {
    pub report: Report,
    pub estimate: Option<Estimate>,
}

/// Reconcile one period and build its report.
pub fn reconcile_period(plant: &Plant, input: &PeriodInput) -> Report {
    analyse_period(plant, input).report
}

/// [`reconcile_period`], given up with [`Cancelled`] once `cancel`'s deadline has passed.
pub fn reconcile_period_cancellable(
    plant: &Plant,
    input: &PeriodInput,
    cancel: &Cancel,
) -> Result<Report, Cancelled> {
    analyse_period_cancellable(plant, input, cancel).map(|a| a.report)
}

/// [`reconcile_period`], keeping the estimate for callers that need more of it than the
/// report holds (the service's meter records use its adjustment correlations).
pub fn analyse_period(plant: &Plant, input: &PeriodInput) -> Analysis {
    uncancelled(analyse_period_cancellable(plant, input, &Cancel::never()))
}

/// [`analyse_period`], given up with [`Cancelled`] once `cancel`'s deadline has passed. The
/// deadline is checked at the analysis's checkpoints (crate::cancel): every iteration of every
/// solve, each restart, the classifications, identification's rounds and solves, and between
/// the report's stages; a small loop's analysis passes a few dozen, a large network's a few
/// thousand. An analysis that finishes gives exactly the answer of [`analyse_period`].
pub fn analyse_period_cancellable(
    plant: &Plant,
    input: &PeriodInput,
    cancel: &Cancel,
) -> Result<Analysis, Cancelled> {
    analyse_period_prepared(plant, &mut Prepared::new(plant), input, cancel)
}

/// [`analyse_period_cancellable`] with what the periods of `plant`'s model revision share
/// kept in `prepared` (made once per revision by [`Prepared::new`] and handed to each of its
/// periods): the same analysis, without building that again.
pub fn analyse_period_prepared(
    plant: &Plant,
    prepared: &mut Prepared,
    input: &PeriodInput,
    cancel: &Cancel,
) -> Result<Analysis, Cancelled> {
    let mut warnings = Vec::new();
    let mut measured = Vec::new();
    // A meter left out never reaches the estimate; its entry says why (`report_left_out`).
    for v in input
        .values
        .iter()
        .filter(|v| input.left_out_reason(v.meter).is_none())
    {
        let meter = &plant.meters[v.meter];
        if !v.value.is_finite() {
            warnings.push(format!(
                "meter \"{}\": value is not a finite number; not used",
                meter.tag
            ));
            continue;
        }
        match meter.sigma_for(v.value) {
            Some(sigma) => measured.push(Measured {
                meter: v.meter,
                value: v.value,
                sigma,
            }),
            None => warnings.push(format!(
                "meter \"{}\": its σ is a percentage of a reading of {}, which gives no positive σ; not used",
                meter.tag, v.value
            )),
        }
        if let Some([lo, hi]) = meter.range {
            if v.value < lo || v.value > hi {
                warnings.push(format!(
                    "meter \"{}\": value {} {} is outside its range [{lo}, {hi}]",
                    meter.tag, v.value, meter.uom
                ));
            }
        }
    }
    let mut report = Report {
        plant: plant.name.clone(),
        period_start: input
            .start
            .to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        period_end: input.end.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        status: ReportStatus::NoData,
        iterations: 0,
        objective: None,
        redundancy: 0,
        global_test: None,
        measurement_test: None,
        meters: Vec::new(),
        streams: Vec::new(),
        extents: Vec::new(),
        split_fractions: Vec::new(),
        faults: Vec::new(),
        figures: Vec::new(),
        unobservable: Vec::new(),
        diagnostics: None,
        warnings,
        caution: CAUTION.to_string(),
    };
    if measured.is_empty() {
        report
            .warnings
            .push("no usable reading in this period".into());
        report.meters = plant
            .meters
            .iter()
            .map(|m| unmeasured_meter(plant, m))
            .collect();
        report_left_out(input, &mut report);
        return Ok(Analysis {
            report,
            estimate: None,
        });
    }
    let est = estimate_prepared(plant, prepared, measured, cancel)?;
    fill_report(plant, input, &est, &mut report, cancel)?;
    report_left_out(input, &mut report);
    Ok(Analysis {
        report,
        estimate: Some(est),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::parse_plant;
    use crate::structural_zeros::tests::PLANT;

    /// Readings of the loop near 110 kmol/h of makeup (A 100, B 10), 400 kmol/h recycled and
    /// 5 kmol/h of water beside it, each off by a fraction of its σ.
    fn readings(seed: usize) -> crate::period::PeriodInput {
        let wobble = |k: usize| ((seed * 7 + k * 13) % 11) as f64 / 11.0 - 0.5;
        let values = [110.0, 510.0, 110.0, 400.0, 0.3, 5.0, 5.0]
            .iter()
            .zip([1.0, 5.0, 1.0, 4.0, 0.01, 0.1, 0.1])
            .enumerate()
            .map(|(meter, (&v, sigma))| crate::period::MeterValue {
                meter,
                value: v + sigma * wobble(meter),
                readings: 1,
                used_uncertain: false,
                spread: 0.0,
            })
            .collect();
        crate::period::PeriodInput {
            start: chrono::DateTime::from_timestamp(0, 0).expect("an instant"),
            end: chrono::DateTime::from_timestamp(3600, 0).expect("an instant"),
            values,
            left_out: Vec::new(),
        }
    }

    #[test]
    fn a_structural_zero_starts_no_restart_and_the_answer_is_the_one_found_with_restarts() {
        let plant = parse_plant(PLANT).expect("valid model");
        let mut held = Prepared::new(&plant);
        let mut free = Prepared::with_zeros(&plant, false);
        let zeros: Vec<String> = held
            .structural_zeros()
            .map(|i| crate::equations::var_name(&plant, held.layout(), i))
            .collect();
        let mut restarted_before = 0;
        for seed in 0..6 {
            let input = readings(seed);
            let now = analyse_period_prepared(&plant, &mut held, &input, &Cancel::never())
                .expect("no deadline");
            let before = analyse_period_prepared(&plant, &mut free, &input, &Cancel::never())
                .expect("no deadline");
            let (d_now, d_before) = (
                now.report.diagnostics.as_ref().expect("an estimate"),
                before.report.diagnostics.as_ref().expect("an estimate"),
            );
            // Left free, the zeros mostly come to rest on their bound and the estimate restarts
            // for them; held, it never does, and names them as resting on their bound.
            restarted_before += usize::from(d_before.restarts > 0);
            assert_eq!(d_now.restarts, 0, "seed {seed}: {d_now:?}");
            let mut at_bound = d_now.at_bound.clone();
            at_bound.sort();
            let mut expected = zeros.clone();
            expected.sort();
            assert_eq!(at_bound, expected, "seed {seed}");
            // The same minimum: objective and every reconciled value and σ.
            assert_eq!(now.report.status, before.report.status);
            let (j_now, j_before) = (
                now.report.objective.expect("solved"),
                before.report.objective.expect("solved"),
            );
            assert!(
                (j_now - j_before).abs() <= 1e-9 * (1.0 + j_before),
                "seed {seed}: {j_now} against {j_before}"
            );
            for (a, b) in now.report.meters.iter().zip(&before.report.meters) {
                for (x, y) in [
                    (a.reconciled, b.reconciled),
                    (a.reconciled_sigma, b.reconciled_sigma),
                    (a.normalized_adjustment, b.normalized_adjustment),
                ] {
                    let (Some(x), Some(y)) = (x, y) else {
                        assert_eq!(x.is_some(), y.is_some(), "seed {seed}, meter {}", a.tag);
                        continue;
                    };
                    assert!(
                        (x - y).abs() <= 1e-7 * (1.0 + y.abs()),
                        "seed {seed}, meter {}: {x} against {y}",
                        a.tag
                    );
                }
            }
        }
        assert!(
            restarted_before >= 3,
            "{restarted_before} of 6 periods restarted"
        );
    }
}
