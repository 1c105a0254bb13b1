//! What-if steady states from a reconciled base case (reconcile::whatif), against the loop's
//! mass balance solved by hand, finite differences and a Monte Carlo of the base case.
//!
//! The purge-design loop (tests/data/purge-design.toml; the case and its closed-form balance
//! are derived in reconcile/tests/purge_design.rs; numbers chosen for the tests, not from a
//! publication): fresh feed F = 375 mol/s with y_I = 0.008 argon and N2:H2 = 1:3, single-pass
//! conversion X = 0.5 of N2, all the ammonia removed, a share φ of the separator gas purged.
//! With f_N = (1 − y_I) F / 4 and f_I = y_I F (mol/s):
//!
//! - N2 at the reactor inlet n_N = f_N / (1 − (1 − φ)(1 − X)), H2 there 3 n_N;
//! - argon leaves only by the purge: n_I = f_I / φ (the steady-state inert balance: inert in
//!   with the feed = inert out with the purge);
//! - extent ξ = X n_N, ammonia made 2ξ; separator gas G = 4 n_N (1 − X) + n_I; purge φ G,
//!   recycle (1 − φ) G; argon at the reactor inlet y = n_I / (4 n_N + n_I).

use chrono::{TimeZone, Utc};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use reconcile::equations::Layout;
use reconcile::period::{MeterValue, PeriodInput};
use reconcile::simulate::{exact_values, steady_state};
use reconcile::whatif::{
    self, optimum::margin_at, BaseCase, Economics, InletLimit, PointStatus, Request, Sweep, WhatIf,
    WhatIfError,
};
use reconcile::{analyse_period, parse_plant, Analysis, Plant, ReportStatus};
use testkit::plants::{PURGE_DESIGN, VANTLE};
use testkit::purge_design::{DESIGN, MOL_S};

/// The design case's closed-form balance at purge φ, conversion X and feed F (mol/s):
/// (n_N, n_I, extent, purge, recycle, y).
fn hand(phi: f64, x: f64, feed: f64) -> (f64, f64, f64, f64, f64, f64) {
    let f_n = (1.0 - DESIGN.inert_fraction) * feed / 4.0;
    let f_i = DESIGN.inert_fraction * feed;
    let n_n = f_n / (1.0 - (1.0 - phi) * (1.0 - x));
    let n_i = f_i / phi;
    let gas = 4.0 * n_n * (1.0 - x) + n_i;
    (
        n_n,
        n_i,
        x * n_n,
        phi * gas,
        (1.0 - phi) * gas,
        n_i / (4.0 * n_n + n_i),
    )
}

fn values(plant: &Plant, z: &[f64], noise: Option<&mut ChaCha8Rng>) -> Vec<MeterValue> {
    let exact = exact_values(plant, z);
    let mut rng = noise;
    exact
        .into_iter()
        .enumerate()
        .map(|(meter, v)| {
            let sigma = plant.meters[meter].sigma_for(v).unwrap_or(0.0);
            let e: f64 = match rng.as_deref_mut() {
                Some(r) => StandardNormal.sample(r),
                None => 0.0,
            };
            MeterValue {
                meter,
                value: v + sigma * e,
                readings: 1,
                used_uncertain: false,
                spread: 0.0,
            }
        })
        .collect()
}

fn analyse(plant: &Plant, values: Vec<MeterValue>) -> Analysis {
    analyse_period(
        plant,
        &PeriodInput {
            start: Utc.with_ymd_and_hms(2026, 4, 1, 0, 0, 0).unwrap(),
            end: Utc.with_ymd_and_hms(2026, 4, 1, 1, 0, 0).unwrap(),
            values,
            left_out: Vec::new(),
        },
    )
}

fn design() -> (Plant, Analysis) {
    let plant = parse_plant(PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &DESIGN.specs()).unwrap();
    let a = analyse(&plant, values(&plant, &z, None));
    assert_eq!(a.report.status, ReportStatus::Solved);
    (plant, a)
}

fn set(pairs: &[(&str, f64)]) -> Request {
    Request {
        set: pairs.iter().map(|(n, v)| (n.to_string(), *v)).collect(),
        ..Request::default()
    }
}

fn figure(w: &WhatIf, point: usize, name: &str, subject: &str) -> (f64, f64) {
    let f = w.points[point]
        .figures
        .iter()
        .find(|f| f.name == name && f.subject == subject)
        .unwrap_or_else(|| panic!("no figure {name} of {subject}"));
    (f.value.unwrap(), f.sigma.unwrap())
}

fn flow(w: &WhatIf, point: usize, stream: &str) -> (f64, f64) {
    let s = w.points[point]
        .streams
        .iter()
        .find(|s| s.id == stream)
        .unwrap();
    (s.molar_flow.unwrap(), s.molar_flow_sigma.unwrap())
}

#[track_caller]
fn close(what: &str, got: f64, want: f64, rel: f64) {
    assert!(
        // A value that is zero up to rounding (an inert balance's σ) is compared absolutely.
        (got - want).abs() <= rel * want.abs() + 1e-12,
        "{what}: {got} against {want} (relative {:e}, allowed {rel:e})",
        (got - want).abs() / want.abs()
    );
}

mod balances;
mod purge;
mod refusals;
mod sigma;
mod textbook;
