//! The report of one period (docs/report.md): what users and their tools read. Values in `meters`
//! are in each meter's uom; everything else in kmol/h and mole fractions. An unobservable value
//! is `null` with `"observable": false`, never a made-up number.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum ReportStatus {
    /// Converged, and every stream flow and extent is observable.
    Solved,
    /// The iteration did not converge; the values are the last iterate's and not to be used.
    NotConverged,
    /// Converged, but some stream flows or extents cannot be determined from the meters that
    /// reported: those are null and listed in `unobservable`.
    Unobservable,
    /// The balances cannot be satisfied within the bounds (n ≥ 0, 0 ≤ φ ≤ 1).
    Infeasible,
    /// No usable reading in the period.
    NoData,
}

impl ReportStatus {
    /// Every status, in declaration order.
    pub const ALL: [ReportStatus; 5] = [
        ReportStatus::Solved,
        ReportStatus::NotConverged,
        ReportStatus::Unobservable,
        ReportStatus::Infeasible,
        ReportStatus::NoData,
    ];

    /// The word the report writes (`solved`, `no_data`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            ReportStatus::Solved => "solved",
            ReportStatus::NotConverged => "not_converged",
            ReportStatus::Unobservable => "unobservable",
            ReportStatus::Infeasible => "infeasible",
            ReportStatus::NoData => "no_data",
        }
    }

    /// The status a word names, as [`ReportStatus::as_str`] writes it.
    pub fn parse(word: &str) -> Option<ReportStatus> {
        ReportStatus::ALL.into_iter().find(|s| s.as_str() == word)
    }

    /// The run gave values that may be used: converged, with the observable ones reported
    /// (those the meters cannot determine are null).
    pub fn is_usable(self) -> bool {
        matches!(self, ReportStatus::Solved | ReportStatus::Unobservable)
    }
}

impl std::fmt::Display for ReportStatus {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The global test as reported.
pub type GlobalTestReport = crate::stats::GlobalTest;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct MeasurementTestReport {
    /// Critical |normalised adjustment|: z_{1−β/2} with β = 1 − (1 − α)^{1/m_r}.
    pub critical: f64,
    /// Per-test level β after the Šidák correction.
    pub alpha_per_test: f64,
    /// m_r: number of redundant meters tested.
    pub tests: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct MeterReport {
    pub tag: String,
    pub stream: String,
    pub quantity: String,
    pub component: Option<String>,
    pub uom: String,
    /// Mean of the period's good and uncertain readings; null when the meter did not report.
    pub measured: Option<f64>,
    /// Reconciled value in the meter's uom; null when unobservable.
    pub reconciled: Option<f64>,
    /// σ of the measurement used this period.
    pub sigma: Option<f64>,
    pub reconciled_sigma: Option<f64>,
    /// Reconciled − measured.
    pub adjustment: Option<f64>,
    /// σ of the adjustment, sqrt(V_a,ii).
    pub adjustment_sigma: Option<f64>,
    /// Adjustment / its σ; null for a non-redundant meter (untestable).
    pub normalized_adjustment: Option<f64>,
    pub redundant: bool,
    /// False when the meter did not report or its adjustment has no variance.
    pub testable: bool,
    /// A candidate of a fault the identification accepted (see `faults`).
    pub suspect: bool,
    /// |normalised adjustment| beyond the Šidák-corrected critical value of the measurement
    /// test.
    pub measurement_test_failed: bool,
    /// Smallest bias (in the uom) the measurement test would detect with 90 % probability at
    /// the model's alpha; null for a non-redundant meter, whose faults cannot be seen.
    pub detectable_bias: Option<f64>,
    /// The period's value used readings of quality "uncertain".
    pub used_uncertain: bool,
    /// Number of readings averaged.
    pub readings: usize,
    /// The estimate used the meter's value. False when the caller left the meter out (out of
    /// service): its measured value and readings are still reported, but it has no adjustment
    /// and no test. Reports stored before the field existed read back as used.
    #[serde(default = "used_by_default")]
    pub used: bool,
    /// Why the meter was not used; null when it was.
    #[serde(default)]
    pub not_used_reason: Option<String>,
}

fn used_by_default() -> bool {
    true
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct StreamReport {
    pub id: String,
    pub from: String,
    pub to: String,
    /// kmol/h.
    pub molar_flow: Option<f64>,
    pub molar_flow_sigma: Option<f64>,
    /// kg/h.
    pub mass_flow: Option<f64>,
    pub mass_flow_sigma: Option<f64>,
    /// Mole fractions per carried component; null where unobservable.
    pub composition: BTreeMap<String, Option<f64>>,
    pub composition_sigma: BTreeMap<String, Option<f64>>,
    /// kmol/h per carried component; null where unobservable.
    pub component_flows: BTreeMap<String, Option<f64>>,
    pub component_flows_sigma: BTreeMap<String, Option<f64>>,
    /// The total flow is observable.
    pub observable: bool,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct ExtentReport {
    pub reaction: String,
    pub unit: String,
    /// kmol/h.
    pub value: Option<f64>,
    pub sigma: Option<f64>,
    pub observable: bool,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct SplitReport {
    /// The outlet stream.
    pub stream: String,
    pub unit: String,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
    pub observable: bool,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum FaultKind {
    MeterBias,
    Leak,
    /// A group whose members include both meter biases and leaks that the data cannot tell
    /// apart.
    MeterBiasOrLeak,
}

/// One member of a fault group, with its own estimate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct FaultCandidate {
    pub kind: FaultKind,
    /// Meter tag or unit id.
    pub id: String,
    /// Structurally equivalent to the group's first candidate: no amount of data from this
    /// meter set can tell them apart (otherwise only this period's data cannot).
    pub equivalent: bool,
    /// Bias in the meter's uom (reads high when positive), or leak in kmol/h (lost when
    /// positive).
    pub magnitude: f64,
    pub magnitude_sigma: f64,
    /// Generalised likelihood ratio statistic.
    pub statistic: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Fault {
    pub kind: FaultKind,
    /// Meters (tags) or units (ids) that the data cannot tell apart: one of them is probably
    /// at fault, and no amount of data from this meter set can say which.
    pub candidates: Vec<String>,
    /// Estimate for the first candidate (each member's own is in `members`).
    pub magnitude: f64,
    pub magnitude_sigma: f64,
    /// Generalised likelihood ratio statistic (χ²(1) without the fault).
    pub statistic: f64,
    pub members: Vec<FaultCandidate>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Figure {
    pub name: String,
    /// What the figure is of: a reaction, a stream, a unit, a component, or `item:component`.
    pub subject: String,
    /// `fraction`, `ratio`, `%` or `kmol/h`.
    pub uom: String,
    pub value: Option<f64>,
    pub sigma: Option<f64>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Diagnostics {
    /// ‖g‖∞ at the solution, kmol/h.
    pub constraint_residual: f64,
    /// Largest relative change of a state in the last iteration.
    pub last_step: f64,
    /// Number of states (component flows, extents, split fractions).
    pub states: usize,
    /// Number of constraint rows.
    pub equations: usize,
    /// States held at a bound at the solution (e.g. a zero flow).
    pub at_bound: Vec<String>,
    /// Restarts from perturbed starting points tried because the first estimate did not
    /// converge, rested on a bound or failed the global test.
    pub restarts: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct Report {
    pub plant: String,
    pub period_start: String,
    pub period_end: String,
    pub status: ReportStatus,
    pub iterations: usize,
    pub objective: Option<f64>,
    /// Degrees of redundancy ν.
    pub redundancy: usize,
    pub global_test: Option<GlobalTestReport>,
    pub measurement_test: Option<MeasurementTestReport>,
    pub meters: Vec<MeterReport>,
    pub streams: Vec<StreamReport>,
    pub extents: Vec<ExtentReport>,
    pub split_fractions: Vec<SplitReport>,
    pub faults: Vec<Fault>,
    pub figures: Vec<Figure>,
    /// Names of the quantities that cannot be determined this period.
    pub unobservable: Vec<String>,
    pub diagnostics: Option<Diagnostics>,
    pub warnings: Vec<String>,
    /// The standing caution (README.md, "Caution").
    pub caution: String,
}

/// The caution every report carries.
pub const CAUTION: &str = "Reconciled values are statistical estimates with the stated \
uncertainty; a suspect meter is a candidate for inspection, not proof of a fault. Purge and \
operating changes follow the site's procedures, local codes and licensed engineering practice.";

#[cfg(test)]
mod tests {
    use super::ReportStatus;

    #[test]
    fn each_status_word_is_the_one_serde_writes_and_reads_back() {
        for status in ReportStatus::ALL {
            let json = serde_json::to_value(status).expect("serialises");
            assert_eq!(json, serde_json::Value::from(status.as_str()));
            assert_eq!(ReportStatus::parse(status.as_str()), Some(status));
        }
        assert_eq!(ReportStatus::parse("Solved"), None);
        assert_eq!(ReportStatus::parse("pending"), None);
    }
}
