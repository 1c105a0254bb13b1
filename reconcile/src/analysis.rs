//! One period end to end: measured values → estimate → classification → tests → report.

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::estimate::Estimate;
use crate::model::Plant;
use crate::period::PeriodInput;
use crate::period_report::{fill_report, report_left_out, unmeasured_meter};
use crate::report::{Report, ReportStatus, CAUTION};
use crate::restarts::estimate_cancellable;
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
    let est = estimate_cancellable(plant, measured, cancel)?;
    fill_report(plant, input, &est, &mut report, cancel)?;
    report_left_out(input, &mut report);
    Ok(Analysis {
        report,
        estimate: Some(est),
    })
}
