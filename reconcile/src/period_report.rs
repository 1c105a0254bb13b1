//! The report of a period's estimate (docs/methods.md §3–§6): reconciled values with their σ,
//! the global and measurement tests, identified faults and the loop figures.

use std::collections::BTreeMap;

use crate::cancel::{Cancel, Cancelled};
use crate::classify::{classify, Classification, SPARSE_THRESHOLD};
use crate::equations::{measurement, stream_fraction, stream_total, var_name, Layout};
use crate::estimate::Estimate;
use crate::faults::{detectable_bias, identify_at_cancellable, REPORTED_POWER};
use crate::figures::{loop_figures, raw_imbalances};
use crate::model::{Meter, Plant, UnitKind};
use crate::period::PeriodInput;
use crate::report::{
    Diagnostics, ExtentReport, MeasurementTestReport, MeterReport, Report, ReportStatus,
    SplitReport, StreamReport,
};
use crate::solve::SolveStatus;
use crate::stats::{global_test, measurement_test_critical, sidak};
use crate::uncertainty::Uncertainty;

/// The report entry of a meter without a usable value in the period.
pub(crate) fn unmeasured_meter(plant: &Plant, m: &Meter) -> MeterReport {
    MeterReport {
        tag: m.tag.clone(),
        stream: plant.streams[m.stream].id.clone(),
        quantity: m.quantity.as_str().to_string(),
        component: m.component.map(|c| plant.components[c].id.clone()),
        uom: m.uom.to_string(),
        measured: None,
        reconciled: None,
        sigma: None,
        reconciled_sigma: None,
        adjustment: None,
        adjustment_sigma: None,
        normalized_adjustment: None,
        redundant: false,
        testable: false,
        suspect: false,
        measurement_test_failed: false,
        detectable_bias: None,
        used_uncertain: false,
        readings: 0,
        used: true,
        not_used_reason: None,
    }
}

/// Mark the meters the input leaves out as not used, with their reason, and report what they
/// read (their value and readings) though the estimate never saw it. Their entries keep the
/// reconciled value the estimate gives them, when observable, and no adjustment or test.
pub(crate) fn report_left_out(input: &PeriodInput, report: &mut Report) {
    for left in &input.left_out {
        let Some(entry) = report.meters.get_mut(left.meter) else {
            continue;
        };
        entry.used = false;
        entry.not_used_reason = Some(left.reason.clone());
        if let Some(v) = input.values.iter().find(|v| v.meter == left.meter) {
            entry.measured = Some(v.value);
            entry.readings = v.readings;
            entry.used_uncertain = v.used_uncertain;
        }
    }
}

/// A value and σ of a function with gradient `grad`, or nulls when it is unobservable.
fn observed(c: &dyn Uncertainty, value: f64, grad: &[(usize, f64)]) -> (Option<f64>, Option<f64>) {
    if c.is_observable(grad) {
        (Some(value), Some(c.sigma(grad)))
    } else {
        (None, None)
    }
}

/// Fill `report` from the period's estimate: status and diagnostics, every meter with its
/// measurement test, streams, extents and split fractions with their σ (null when
/// unobservable), faults and loop figures. Given up with [`Cancelled`] once `cancel` has
/// passed: checked between these stages and within identification.
pub(crate) fn fill_report(
    plant: &Plant,
    input: &PeriodInput,
    est: &Estimate,
    report: &mut Report,
    cancel: &Cancel,
) -> Result<(), Cancelled> {
    let sol = &est.solution;
    let c = &est.classification;
    let z = &sol.z;
    let layout = &est.layout;
    // The tests judge the adjustments the estimate made. With a state held at a bound those
    // adjustments respect the bound, so their covariance must too: the tests (global and
    // measurement tests, identification) classify with the active bounds fixed, while the σ
    // of states keep the free classification (a state resting on a bound is not thereby
    // known). Without it the normalised adjustments of such a period are not N(0, 1).
    // (Dense only: a large network on a bound keeps the free classification for its tests
    // rather than a dense one of thousands of states.)
    let fixed;
    let t: &Classification = if layout.n < SPARSE_THRESHOLD && sol.at_bound.iter().any(|&b| b) {
        cancel.check()?;
        fixed = classify(plant, layout, &est.measured, z, &sol.at_bound);
        &fixed
    } else {
        c
    };
    report.iterations = sol.iterations;
    report.objective = Some(sol.objective);
    report.redundancy = t.redundancy;
    report.diagnostics = Some(Diagnostics {
        constraint_residual: sol.constraint_residual,
        last_step: sol.last_step,
        states: layout.n,
        equations: layout.rows.len(),
        at_bound: (0..layout.n)
            .filter(|&i| sol.at_bound[i])
            .map(|i| var_name(plant, layout, i))
            .collect(),
        restarts: est.restarts,
    });
    report.status = match sol.status {
        SolveStatus::Converged => ReportStatus::Solved,
        SolveStatus::NotConverged => ReportStatus::NotConverged,
        SolveStatus::Infeasible => ReportStatus::Infeasible,
    };
    if sol.status != SolveStatus::Converged {
        report.warnings.push(format!(
            "the estimate did not converge in {} iterations (constraint residual {:.3e} kmol/h); values are not to be used",
            sol.iterations, sol.constraint_residual
        ));
    }

    // Meters and the measurement test.
    let redundant: Vec<bool> = (0..est.measured.len()).map(|k| t.is_redundant(k)).collect();
    let tests = redundant.iter().filter(|&&r| r).count();
    let critical = measurement_test_critical(plant.alpha, tests);
    let gt = global_test(sol.objective, t.redundancy, plant.alpha);
    report.global_test = Some(gt);
    report.measurement_test = Some(MeasurementTestReport {
        critical,
        alpha_per_test: sidak(plant.alpha, tests.max(1)),
        tests,
    });
    let by_meter: BTreeMap<usize, usize> = est
        .measured
        .iter()
        .enumerate()
        .map(|(k, m)| (m.meter, k))
        .collect();
    for (mi, meter) in plant.meters.iter().enumerate() {
        let mut entry = unmeasured_meter(plant, meter);
        let (h, grad) = measurement(plant, layout, meter, z);
        let (value, sigma) = observed(c, h, &grad);
        entry.reconciled = value;
        entry.reconciled_sigma = sigma;
        if let Some(&k) = by_meter.get(&mi) {
            let m = &est.measured[k];
            let v = input
                .values
                .iter()
                .find(|v| v.meter == mi)
                .expect("measured from input");
            entry.measured = Some(m.value);
            entry.sigma = Some(m.sigma);
            entry.readings = v.readings;
            entry.used_uncertain = v.used_uncertain;
            entry.redundant = redundant[k];
            entry.testable = redundant[k];
            // A measured meter's reconciled value always exists: the data determine it.
            entry.reconciled = Some(h);
            entry.reconciled_sigma = Some(m.sigma * c.leverage(k).sqrt());
            if redundant[k] {
                let adjustment = h - m.value;
                let sd = m.sigma * t.adjustment_variance(k).sqrt();
                entry.adjustment = Some(adjustment);
                entry.adjustment_sigma = Some(sd);
                let d = adjustment / sd;
                entry.normalized_adjustment = Some(d);
                entry.measurement_test_failed = d.abs() > critical;
                entry.detectable_bias =
                    detectable_bias(m.sigma, t.adjustment_variance(k), critical, REPORTED_POWER);
            } else {
                // A non-redundant meter keeps its raw value: no adjustment, nothing to test.
                entry.reconciled = Some(m.value);
                entry.adjustment = Some(0.0);
                entry.adjustment_sigma = Some(0.0);
            }
        }
        report.meters.push(entry);
    }

    // Streams.
    cancel.check()?;
    for (s, stream) in plant.streams.iter().enumerate() {
        let entry = stream_report(plant, layout, s, z, c);
        let molar_flow = entry.molar_flow;
        if molar_flow.is_none() {
            report
                .unobservable
                .push(format!("flow of stream \"{}\"", stream.id));
        }
        report.streams.push(entry);
    }

    for (r, reaction) in plant.reactions.iter().enumerate() {
        let i = layout.extent(r);
        let (value, sigma) = observed(c, z[i], &[(i, 1.0)]);
        if value.is_none() {
            report
                .unobservable
                .push(format!("extent of reaction \"{}\"", reaction.id));
        }
        report.extents.push(ExtentReport {
            reaction: reaction.id.clone(),
            unit: plant.units[reaction.unit].id.clone(),
            value,
            sigma,
            observable: value.is_some(),
        });
    }

    for u in &plant.units {
        match u.kind {
            UnitKind::Splitter => {
                let mut rest: Vec<(usize, f64)> = Vec::new();
                let mut rest_value = 1.0;
                for (k, &o) in u.outlets.iter().enumerate() {
                    // The last outlet's fraction is 1 − Σ of the others.
                    let (value, grad) = if k + 1 < u.outlets.len() {
                        let i = layout.split(o).expect("split var");
                        rest.push((i, -1.0));
                        rest_value -= z[i];
                        (z[i], vec![(i, 1.0)])
                    } else {
                        (rest_value, rest.clone())
                    };
                    let (value, sigma) = observed(c, value, &grad);
                    if value.is_none() {
                        report.unobservable.push(format!(
                            "split fraction of stream \"{}\"",
                            plant.streams[o].id
                        ));
                    }
                    report.split_fractions.push(SplitReport {
                        stream: plant.streams[o].id.clone(),
                        unit: u.id.clone(),
                        value,
                        sigma,
                        observable: value.is_some(),
                    });
                }
            }
            UnitKind::Mixer | UnitKind::Reactor | UnitKind::Separator | UnitKind::Node => {}
        }
    }

    if sol.status == SolveStatus::Converged {
        cancel.check()?;
        let identified =
            identify_at_cancellable(plant, &est.layout, &est.measured, &sol.z, t, cancel)?;
        for entry in report.meters.iter_mut() {
            entry.suspect = identified.suspect_tags.contains(&entry.tag);
        }
        report.faults = identified.faults;
        cancel.check()?;
        report.figures = loop_figures(plant, est);
        report.figures.extend(raw_imbalances(plant, est));
    }

    let any_flow_or_extent_unobservable = report.streams.iter().any(|s| !s.observable)
        || report.extents.iter().any(|e| !e.observable);
    if report.status == ReportStatus::Solved && any_flow_or_extent_unobservable {
        report.status = ReportStatus::Unobservable;
    }
    Ok(())
}

/// A stream's flows and composition at state z with σ from `unc` (null where unobservable).
pub(crate) fn stream_report(
    plant: &Plant,
    layout: &Layout,
    s: usize,
    z: &[f64],
    unc: &dyn Uncertainty,
) -> StreamReport {
    let stream = &plant.streams[s];
    let (f, grad) = stream_total(plant, layout, s, z);
    let (molar_flow, molar_flow_sigma) = observed(unc, f, &grad);
    let mass_grad: Vec<(usize, f64)> = layout
        .stream_flows(plant, s)
        .zip(&stream.components)
        .map(|(i, &k)| (i, plant.components[k].molar_mass))
        .collect();
    let mass: f64 = mass_grad.iter().map(|&(i, m)| m * z[i]).sum();
    let (mass_flow, mass_flow_sigma) = observed(unc, mass, &mass_grad);
    let mut entry = StreamReport {
        id: stream.id.clone(),
        from: stream
            .from
            .map_or("outside".into(), |u| plant.units[u].id.clone()),
        to: stream
            .to
            .map_or("outside".into(), |u| plant.units[u].id.clone()),
        molar_flow,
        molar_flow_sigma,
        mass_flow,
        mass_flow_sigma,
        composition: BTreeMap::new(),
        composition_sigma: BTreeMap::new(),
        component_flows: BTreeMap::new(),
        component_flows_sigma: BTreeMap::new(),
        observable: molar_flow.is_some(),
    };
    for &k in &stream.components {
        let id = plant.components[k].id.clone();
        let (x, grad) = stream_fraction(plant, layout, s, k, z);
        let (x, xs) = observed(unc, x, &grad);
        entry.composition.insert(id.clone(), x);
        entry.composition_sigma.insert(id.clone(), xs);
        let i = layout.flow(plant, s, k).expect("carried");
        let (n, ns) = observed(unc, z[i], &[(i, 1.0)]);
        entry.component_flows.insert(id.clone(), n);
        entry.component_flows_sigma.insert(id, ns);
    }
    entry
}
