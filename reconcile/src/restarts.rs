//! Finding a period's estimate (docs/methods.md §2, "Starting point"): the solve from the start
//! the meters give, and deterministic restarts when it does not converge, rests on a bound or
//! fails the global test.

use crate::cancel::{uncancelled, Cancel, Cancelled};
use crate::classify::{classify_cancellable, Classification};
use crate::equations::Layout;
use crate::estimate::Estimate;
use crate::faults::identify_at_cancellable;
use crate::model::Plant;
use crate::prepared::Prepared;
use crate::solve::{solve_with, Measured, Solution, SolveOptions, SolveStatus};
use crate::sparse::Symbolic;
use crate::start::initial_point;
use crate::stats::global_test;

/// Estimate the state from measured values.
pub fn estimate(plant: &Plant, measured: Vec<Measured>) -> Estimate {
    uncancelled(estimate_cancellable(plant, measured, &Cancel::never()))
}

/// [`estimate`], given up with [`Cancelled`] once `cancel`'s deadline has passed: checked in
/// every iteration of every solve, and before each restart and classification.
pub fn estimate_cancellable(
    plant: &Plant,
    measured: Vec<Measured>,
    cancel: &Cancel,
) -> Result<Estimate, Cancelled> {
    estimate_prepared(plant, &mut Prepared::new(plant), measured, cancel)
}

/// [`estimate_cancellable`] with what the model revision's periods share kept in `prepared`
/// (the layout, the structural zeros, the KKT matrix's symbolic analysis): the same estimate,
/// without building them again.
pub fn estimate_prepared(
    plant: &Plant,
    prepared: &mut Prepared,
    measured: Vec<Measured>,
    cancel: &Cancel,
) -> Result<Estimate, Cancelled> {
    prepared.ensure_for(plant);
    // The KKT pattern depends only on the plant and the meters measured: restarts, and the
    // periods of the revision, share its symbolic analysis.
    let mut kkt = prepared.kkt.take();
    let result = estimate_with(plant, prepared, measured, &mut kkt, cancel);
    prepared.kkt = kkt;
    result
}

fn estimate_with(
    plant: &Plant,
    prepared: &Prepared,
    measured: Vec<Measured>,
    kkt: &mut Option<Symbolic>,
    cancel: &Cancel,
) -> Result<Estimate, Cancelled> {
    let layout = &prepared.layout;
    // The solve works on the layout whose structural zeros have upper bound zero: they start
    // and stay there.
    let bounded = &prepared.solve_layout;
    let start = initial_point(plant, layout, &measured);
    let mut best = settle(
        plant,
        bounded,
        &measured,
        start.clone(),
        kkt,
        SolveOptions::default().max_iterations,
        cancel,
    );
    // Bilinear problems are not convex: from a poor start the iteration can stall or settle in
    // a local minimum. When the estimate did not converge or fails the global test, try up to
    // RESTARTS deterministic restarts around the first start and keep the best converged one;
    // when it only rests on a bound (often a genuine optimum with a small flow at zero), try
    // fewer.
    let mut restarts = 0;
    // Seeds of the perturbed starts, in the order they are used.
    let mut perturbed = 0;
    loop {
        // A solve stopped by the deadline ends as not converged: nothing to judge.
        cancel.check()?;
        let verdict = verdict(plant, prepared, &measured, &mut best, cancel)?;
        let limit = match verdict {
            Verdict::Good => break,
            Verdict::OnBound | Verdict::FailsGlobalTest => FEW_RESTARTS,
            Verdict::NotConverged => RESTARTS,
        };
        if restarts >= limit {
            break;
        }
        restarts += 1;
        // A converged estimate that fails the global test: the first restart starts from
        // the meters that identification does not suspect. A gross error corrupts the start
        // (flows are propagated from the meters), so this is the start most likely to reach
        // another minimum if there is one; where there is none (the usual case: a gross
        // error, not a poor start, fails the test) it lands on the same objective in a few
        // iterations and confirms the minimum, where a perturbed start would take many.
        let informed = match verdict {
            Verdict::FailsGlobalTest if restarts == 1 => {
                start_without_suspects(plant, layout, &measured, &best, cancel)?
            }
            _ => None,
        };
        let alternative = informed.unwrap_or_else(|| {
            perturbed += 1;
            perturbed_start(&start, layout, perturbed)
        });
        let candidate = settle(
            plant,
            bounded,
            &measured,
            alternative,
            kkt,
            RESTART_ITERATIONS,
            cancel,
        );
        cancel.check()?;
        // A converged restart that lands on the same objective confirms the minimum: a gross
        // error, not a poor start, is what fails the global test; stop looking.
        let confirms = candidate.0.status == SolveStatus::Converged
            && best.0.status == SolveStatus::Converged
            && (candidate.0.objective - best.0.objective).abs() <= 1e-6 * (1.0 + best.0.objective);
        if confirms {
            // The same minimum within rounding: the incumbent stays, with its classification.
            break;
        }
        if better(&candidate, &best) {
            best = candidate;
        }
    }
    let (solution, classification) = best;
    let classification = match classification {
        Some(c) => c,
        None => classify_free(plant, prepared, &measured, &solution, cancel)?,
    };
    Ok(Estimate {
        layout: layout.clone(),
        measured,
        solution,
        classification,
        restarts,
    })
}

/// Restarts tried when the estimate did not converge.
const RESTARTS: usize = 6;
/// Restarts tried when the estimate converged but rests on a bound or fails the global test.
const FEW_RESTARTS: usize = 2;
/// Iteration limit of a restart: a good start converges in a handful.
const RESTART_ITERATIONS: usize = 40;

enum Verdict {
    Good,
    OnBound,
    FailsGlobalTest,
    NotConverged,
}

/// A solution with its classification, computed only when needed (the global test of
/// `acceptable`, or the estimate finally kept).
type Settled = (Solution, Option<Classification>);

fn settle(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    start: Vec<f64>,
    kkt: &mut Option<Symbolic>,
    max_iterations: usize,
    cancel: &Cancel,
) -> Settled {
    let options = SolveOptions {
        max_iterations,
        cancel: *cancel,
        ..SolveOptions::default()
    };
    (
        solve_with(plant, layout, measured, start, options, kkt),
        None,
    )
}

/// Classification and covariance ignore the bounds (common practice): a variable resting on
/// a bound is not thereby known, and treating it as known would call unobservable states
/// observable.
fn classify_free(
    plant: &Plant,
    prepared: &Prepared,
    measured: &[Measured],
    solution: &Solution,
    cancel: &Cancel,
) -> Result<Classification, Cancelled> {
    let layout = &prepared.layout;
    classify_cancellable(
        plant,
        layout,
        measured,
        &solution.z,
        &vec![false; layout.n],
        cancel,
    )
}

fn verdict(
    plant: &Plant,
    prepared: &Prepared,
    measured: &[Measured],
    best: &mut Settled,
    cancel: &Cancel,
) -> Result<Verdict, Cancelled> {
    let solution = &best.0;
    if solution.status != SolveStatus::Converged {
        return Ok(Verdict::NotConverged);
    }
    let classification = match &mut best.1 {
        Some(c) => c,
        slot => slot.insert(classify_free(plant, prepared, measured, solution, cancel)?),
    };
    Ok(
        if !global_test(solution.objective, classification.redundancy, plant.alpha).passed {
            Verdict::FailsGlobalTest
        } else if solution
            .at_bound
            .iter()
            .zip(&prepared.structural_zero)
            .any(|(&b, &zero)| b && !zero)
        {
            // A state resting on a bound is also suspect: from a poor start the iteration can pin
            // a flow at zero and settle in a minimum of the boundary. Not a structural zero,
            // which rests there in every state the model means.
            Verdict::OnBound
        } else {
            Verdict::Good
        },
    )
}

fn better(a: &Settled, b: &Settled) -> bool {
    let converged = |x: &Settled| x.0.status == SolveStatus::Converged;
    match (converged(a), converged(b)) {
        (true, false) => true,
        (false, true) => false,
        _ => a.0.objective < b.0.objective,
    }
}

/// The initial point from the measured meters less those that identification (on `best`, a
/// converged estimate with its classification) names in a fault group; `None` when it names
/// no meter.
fn start_without_suspects(
    plant: &Plant,
    layout: &Layout,
    measured: &[Measured],
    best: &Settled,
    cancel: &Cancel,
) -> Result<Option<Vec<f64>>, Cancelled> {
    let Some(classification) = best.1.as_ref() else {
        return Ok(None);
    };
    let found =
        identify_at_cancellable(plant, layout, measured, &best.0.z, classification, cancel)?;
    if found.suspect_tags.is_empty() {
        return Ok(None);
    }
    let trusted: Vec<Measured> = measured
        .iter()
        .filter(|m| !found.suspect_tags.contains(&plant.meters[m.meter].tag))
        .copied()
        .collect();
    Ok(Some(initial_point(plant, layout, &trusted)))
}

/// The start with every flow scaled by a factor in [1/3, 3] and split fractions redrawn, from
/// a small deterministic generator (SplitMix64), so that the same input gives the same output.
fn perturbed_start(start: &[f64], layout: &Layout, seed: u64) -> Vec<f64> {
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    let mut next = move || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut x = state;
        x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((x ^ (x >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut z = start.to_vec();
    for v in z.iter_mut().take(layout.extent_start) {
        *v *= 3f64.powf(2.0 * next() - 1.0);
    }
    for &(_, i) in &layout.splits {
        z[i] = 0.05 + 0.9 * next();
    }
    z
}
