//! loopbal's engine: the plant model, bilinear data reconciliation of recycle loops,
//! classification, uncertainty and the statistical tests.
//!
//! No I/O, no async, no clock: the same input gives the same output. The `server` crate turns
//! files, requests and rows into calls of [`analysis::reconcile_period`] and back. (The one
//! clock read is a caller's deadline, [`Cancel`], which can stop an analysis but never change
//! the answer of one that finishes.)

// The numerical kernels index several arrays with one index (a sparse pattern's slots and
// values, permutations, bounds beside the state), as the published algorithms are written.
#![allow(clippy::needless_range_loop)]

pub mod analysis;
pub mod cancel;
pub mod classify;
pub mod covariance;
pub mod equations;
mod estimate;
pub mod faults;
pub mod figures;
pub mod meter_value;
pub mod model;
pub mod names;
pub mod period;
pub(crate) mod period_report;
pub mod plausible;
pub mod prepared;
pub mod report;
mod restarts;
pub mod simulate;
pub mod solve;
pub mod sparse;
pub mod start;
pub mod stats;
pub mod structural_zeros;
pub mod text;
pub mod uncertainty;
pub mod uom;
mod validate;
pub mod whatif;

pub use analysis::{
    analyse_period, analyse_period_cancellable, analyse_period_prepared, reconcile_period,
    reconcile_period_cancellable, Analysis,
};
pub use cancel::{Cancel, Cancelled};
pub use estimate::Estimate;
pub use model::{ModelError, ModelProblem, ModelSpec, Plant};
pub use period::{group_readings, prepare, LeftOut, PeriodInput, Quality, Reading};
pub use prepared::Prepared;
pub use report::{Report, ReportStatus};
pub use restarts::{estimate, estimate_cancellable, estimate_prepared};
pub use validate::parse_plant;

/// Version of the engine, recorded with every report.
pub const ENGINE_VERSION: &str = env!("CARGO_PKG_VERSION");

#[cfg(test)]
mod layers {
    #[test]
    fn the_engine_has_no_import_circle() {
        let src = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
        let graph = testkit::layers::imports(&src);
        assert!(graph.contains_key("whatif") && graph["whatif"].contains("simulate"));
        assert_eq!(testkit::layers::circles(&graph), Vec::<Vec<String>>::new());
    }
}
