//! loopbal's shared test support: the test plants and their known states, meter values and
//! simulated readings, for the engine's tests (`reconcile/tests/`), the end-to-end and
//! reliability suites (`tests/`) and the benchmarks. A dev-dependency only (`publish = false`).
//!
//! - [`plants`]: the models of `tests/data/` (purge-design, Ombrask Flats OB-2, Vantle Cross
//!   VC-3), as text and as paths;
//! - [`purge_design`]: the purge-design loop's operating cases as simulator specifications;
//! - [`vantle`]: the Vantle loop's true state from its operating conditions;
//! - [`network`]: generated networks of any size with their true state;
//! - [`values`]: exact and noisy meter values of a state, one hourly period, and the
//!   simulator's readings as CSV;
//! - behind the `e2e` feature, [`e2e`] (the `loopbal serve` harness) and [`bench`] (what the
//!   service's benchmarks share).

#[cfg(feature = "e2e")]
pub mod bench;
#[cfg(feature = "e2e")]
pub mod e2e;
pub mod layers;
pub mod network;
pub mod plants;
pub mod purge_design;
pub mod values;
pub mod vantle;
#[cfg(feature = "e2e")]
pub mod webdriver;

pub use values::{exact_values, noisy_values, one_reading_each, period, readings_csv};
pub use vantle::{vantle_true_state, VantleConditions};
