//! A plant simulator: the true steady state of a loop from its operating specifications
//! (steady.rs), and the readings its meters would send (true value + Gaussian noise at each
//! meter's σ, with optional bias, drift, frozen value, dropout and bad quality). Deterministic
//! from a seed. Tests, benchmarks, the demo and the what-if use it.

use chrono::{DateTime, Duration, Utc};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};

use crate::equations::{measurement, Layout};
use crate::model::Plant;
use crate::period::{Quality, Reading};

mod steady;

pub use steady::{accumulation_diagnosis, steady_state, SimulateError, Spec, SpecSystem};

/// What goes wrong with one meter, from a period on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "fault", rename_all = "snake_case")]
pub enum MeterFault {
    /// Reads high by a constant, in the meter's uom.
    Bias {
        tag: String,
        from_hour: usize,
        value: f64,
    },
    /// Reads high by a growing amount, uom per hour since `from_hour`.
    Drift {
        tag: String,
        from_hour: usize,
        per_hour: f64,
    },
    /// Repeats the value it had at `from_hour`.
    Frozen { tag: String, from_hour: usize },
    /// Sends nothing in [from_hour, to_hour).
    Dropout {
        tag: String,
        from_hour: usize,
        to_hour: usize,
    },
    /// Marks its readings bad in [from_hour, to_hour).
    BadQuality {
        tag: String,
        from_hour: usize,
        to_hour: usize,
    },
}

/// How to produce readings.
#[derive(Debug, Clone, PartialEq)]
pub struct ReadingPlan {
    pub start: DateTime<Utc>,
    pub hours: usize,
    /// Readings per meter per hour, spread evenly in the hour.
    pub per_hour: usize,
    pub seed: u64,
    pub faults: Vec<MeterFault>,
}

/// The readings the plant's meters send for `plan.hours` hours of the steady state z.
pub fn readings(plant: &Plant, z: &[f64], plan: &ReadingPlan) -> Vec<Reading> {
    let layout = Layout::new(plant);
    let mut rng = ChaCha8Rng::seed_from_u64(plan.seed);
    let mut out = Vec::new();
    let per_hour = plan.per_hour.max(1);
    let truth: Vec<f64> = plant
        .meters
        .iter()
        .map(|m| measurement(plant, &layout, m, z).0)
        .collect();
    let mut frozen: Vec<Option<f64>> = vec![None; plant.meters.len()];
    for hour in 0..plan.hours {
        for k in 0..per_hour {
            let time = plan.start + Duration::seconds((hour * 3600 + k * 3600 / per_hour) as i64);
            for (mi, meter) in plant.meters.iter().enumerate() {
                let sigma = meter.sigma_for(truth[mi]).unwrap_or(0.0);
                let noise = if sigma > 0.0 {
                    Normal::new(0.0, sigma)
                        .expect("positive σ")
                        .sample(&mut rng)
                } else {
                    0.0
                };
                let mut value = truth[mi] + noise;
                let mut quality = Quality::Good;
                let mut send = true;
                for fault in plan.faults.iter() {
                    match fault {
                        MeterFault::Bias {
                            tag,
                            from_hour,
                            value: b,
                        } if *tag == meter.tag && hour >= *from_hour => value += b,
                        MeterFault::Drift {
                            tag,
                            from_hour,
                            per_hour: d,
                        } if *tag == meter.tag && hour >= *from_hour => {
                            value += d * (hour - from_hour) as f64
                        }
                        MeterFault::Frozen { tag, from_hour }
                            if *tag == meter.tag && hour >= *from_hour =>
                        {
                            value = *frozen[mi].get_or_insert(value);
                        }
                        MeterFault::Dropout {
                            tag,
                            from_hour,
                            to_hour,
                        } if *tag == meter.tag && (*from_hour..*to_hour).contains(&hour) => {
                            send = false
                        }
                        MeterFault::BadQuality {
                            tag,
                            from_hour,
                            to_hour,
                        } if *tag == meter.tag && (*from_hour..*to_hour).contains(&hour) => {
                            quality = Quality::Bad
                        }
                        _ => {}
                    }
                }
                // The noise is drawn whatever the faults, so a fault never shifts the noise
                // of the other meters: the same seed gives the same clean readings.
                if send {
                    out.push(Reading {
                        tag: meter.tag.clone(),
                        time,
                        value,
                        quality,
                    });
                }
            }
        }
    }
    out
}

/// Exact (noise-free) meter values of state z, in meter order.
pub fn exact_values(plant: &Plant, z: &[f64]) -> Vec<f64> {
    let layout = Layout::new(plant);
    plant
        .meters
        .iter()
        .map(|m| measurement(plant, &layout, m, z).0)
        .collect()
}
