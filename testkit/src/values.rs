//! Meter values of a known state: exact, with seeded noise, and as one hourly period.

use chrono::{TimeZone, Utc};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use reconcile::equations::{measurement, Layout};
use reconcile::period::{MeterValue, PeriodInput};
use reconcile::Plant;

/// Every meter's exact value at state z, in its own uom.
pub fn exact_values(plant: &Plant, layout: &Layout, z: &[f64]) -> Vec<MeterValue> {
    one_reading_each(
        plant
            .meters
            .iter()
            .map(|meter| measurement(plant, layout, meter, z).0),
    )
}

/// Meter values in the order of the plant's meters, each the one good reading of its meter in
/// the period.
pub fn one_reading_each(values: impl IntoIterator<Item = f64>) -> Vec<MeterValue> {
    values
        .into_iter()
        .enumerate()
        .map(|(meter, value)| MeterValue {
            meter,
            value,
            readings: 1,
            used_uncertain: false,
            spread: 0.0,
        })
        .collect()
}

/// The exact values with Gaussian noise of each meter's σ (σ of a percent-of-reading meter
/// taken at the exact value), from a fixed seed.
pub fn noisy_values(plant: &Plant, exact: &[MeterValue], seed: u64) -> Vec<MeterValue> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    exact
        .iter()
        .map(|v| {
            let sigma = plant.meters[v.meter].sigma_for(v.value).unwrap_or(0.0);
            let e: f64 = StandardNormal.sample(&mut rng);
            MeterValue {
                value: v.value + sigma * e,
                ..*v
            }
        })
        .collect()
}

/// One hourly period holding `values`.
pub fn period(values: Vec<MeterValue>) -> PeriodInput {
    PeriodInput {
        start: Utc.with_ymd_and_hms(2026, 3, 2, 5, 0, 0).unwrap(),
        end: Utc.with_ymd_and_hms(2026, 3, 2, 6, 0, 0).unwrap(),
        values,
        left_out: Vec::new(),
    }
}

/// The simulator's readings of state `z` under `plan` as CSV (`tag,time,value,quality`, every
/// reading `good`), less those `skip(tag, hour)` names (hour counted from `plan.start`).
pub fn readings_csv(
    plant: &Plant,
    z: &[f64],
    plan: &reconcile::simulate::ReadingPlan,
    skip: &dyn Fn(&str, usize) -> bool,
) -> String {
    let mut csv = String::from("tag,time,value,quality\n");
    for r in reconcile::simulate::readings(plant, z, plan) {
        let hour = ((r.time - plan.start).num_seconds() / 3600) as usize;
        if !skip(&r.tag, hour) {
            csv += &format!("{},{},{},good\n", r.tag, r.time.to_rfc3339(), r.value);
        }
    }
    csv
}
