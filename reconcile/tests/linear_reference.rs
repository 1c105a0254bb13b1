//! Linear networks against outside references: the closed-form solution of linear data
//! reconciliation, and a general-purpose QP solver when a bound is active.

use chrono::{TimeZone, Utc};
use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettingsBuilder, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
};
use nalgebra::{DMatrix, DVector};
use reconcile::period::PeriodInput;
use reconcile::{parse_plant, reconcile_period, Report, ReportStatus};
use testkit::one_reading_each;

/// Three balance nodes, six single-component streams, every stream metered; stream s3 is
/// metered in mol/s, the others in kmol/h.
const MODEL: &str = r#"
name = "linear-six"
[[component]]
id = "W"
molar_mass = 18.015
[[unit]]
id = "n1"
kind = "node"
[[unit]]
id = "n2"
kind = "node"
[[unit]]
id = "n3"
kind = "node"
[[stream]]
id = "f1"
from = "outside"
to = "n1"
[[stream]]
id = "s2"
from = "n1"
to = "n2"
[[stream]]
id = "s3"
from = "n1"
to = "n3"
[[stream]]
id = "s4"
from = "n2"
to = "n3"
[[stream]]
id = "s5"
from = "n3"
to = "outside"
[[stream]]
id = "s6"
from = "n2"
to = "outside"
[[meter]]
tag = "F1"
stream = "f1"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "F2"
stream = "s2"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "F3"
stream = "s3"
quantity = "molar_flow"
uom = "mol/s"
sigma = 0.5
[[meter]]
tag = "F4"
stream = "s4"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 5.0
[[meter]]
tag = "F5"
stream = "s5"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.5
[[meter]]
tag = "F6"
stream = "s6"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#;

/// Node incidence matrix: rows n1, n2, n3; columns f1, s2, s3, s4, s5, s6.
fn incidence() -> DMatrix<f64> {
    DMatrix::from_row_slice(
        3,
        6,
        &[
            1.0, -1.0, -1.0, 0.0, 0.0, 0.0, //
            0.0, 1.0, 0.0, -1.0, 0.0, -1.0, //
            0.0, 0.0, 1.0, 1.0, -1.0, 0.0,
        ],
    )
}

const MOL_S: f64 = 1000.0 / 3600.0; // mol/s per kmol/h

/// Run the engine on readings given in kmol/h (F3 is converted to its mol/s uom).
fn run(y: [f64; 6]) -> Report {
    let plant = parse_plant(MODEL).unwrap();
    let values = one_reading_each((0..6).map(|k| if k == 2 { y[k] * MOL_S } else { y[k] }));
    reconcile_period(
        &plant,
        &PeriodInput {
            start: Utc.with_ymd_and_hms(2026, 1, 1, 0, 0, 0).unwrap(),
            end: Utc.with_ymd_and_hms(2026, 1, 1, 1, 0, 0).unwrap(),
            values,
            left_out: Vec::new(),
        },
    )
}

/// σ of each meter in kmol/h.
fn sigmas() -> [f64; 6] {
    [2.0, 1.0, 0.5 / MOL_S, 5.0, 1.5, 1.0]
}

fn reconciled_kmol_h(report: &Report) -> Vec<f64> {
    report
        .meters
        .iter()
        .enumerate()
        .map(|(k, m)| m.reconciled.unwrap() / if k == 2 { MOL_S } else { 1.0 })
        .collect()
}

#[test]
fn fully_measured_linear_network_matches_the_closed_form() {
    let y = [100.8, 60.9, 39.5, 30.2, 71.4, 29.1];
    let report = run(y);
    assert_eq!(report.status, ReportStatus::Solved);

    // Classical linear reconciliation (Kuehn & Davidson 1961):
    // x̂ = y − V Aᵀ (A V Aᵀ)⁻¹ A y, cov(x̂) = V − V Aᵀ (A V Aᵀ)⁻¹ A V,
    // J = (A y)ᵀ (A V Aᵀ)⁻¹ (A y) with ν = rank A = 3 degrees of freedom.
    let a = incidence();
    let v = DMatrix::from_diagonal(&DVector::from_iterator(6, sigmas().iter().map(|s| s * s)));
    let yv = DVector::from_row_slice(&y);
    let s_inv = (&a * &v * a.transpose()).try_inverse().unwrap();
    let xhat = &yv - &v * a.transpose() * &s_inv * &a * &yv;
    let cov = &v - &v * a.transpose() * &s_inv * &a * &v;
    let ay = &a * &yv;
    let j = (ay.transpose() * &s_inv * &ay)[(0, 0)];

    let x = reconciled_kmol_h(&report);
    for k in 0..6 {
        assert!(
            (x[k] - xhat[k]).abs() < 1e-9 * xhat[k].abs(),
            "meter {k}: {} vs {}",
            x[k],
            xhat[k]
        );
        let scale = if k == 2 { MOL_S } else { 1.0 };
        let sd = report.meters[k].reconciled_sigma.unwrap() / scale;
        assert!(
            (sd - cov[(k, k)].sqrt()).abs() < 1e-9 * sd,
            "σ of meter {k}"
        );
        // Adjustment covariance V − cov(x̂): the normalised adjustment divides by its root.
        let va = v[(k, k)] - cov[(k, k)];
        let d = (xhat[k] - y[k]) / va.sqrt();
        assert!(
            (report.meters[k].normalized_adjustment.unwrap() - d).abs() < 1e-7,
            "d of meter {k}"
        );
    }
    assert_eq!(report.redundancy, 3);
    assert!((report.objective.unwrap() - j).abs() < 1e-9 * j.max(1.0));
    let gt = report.global_test.unwrap();
    // χ²_0.95(3) = 7.815 (NIST/SEMATECH, e-Handbook of Statistical Methods, 2012, §1.3.6.7.4,
    // table of the chi-square distribution).
    assert!((gt.critical - 7.815).abs() < 1e-3);
    assert_eq!(gt.passed, j <= gt.critical);
}

#[test]
fn active_non_negativity_matches_a_general_qp_solver() {
    // s4 reads almost nothing with a loose σ, while s2 < s6: the unconstrained estimate of s4
    // is negative, so the bound s4 ≥ 0 is active.
    let y = [100.0, 30.0, 70.5, 0.5, 70.0, 33.0];
    let unconstrained = {
        let a = incidence();
        let v = DMatrix::from_diagonal(&DVector::from_iterator(6, sigmas().iter().map(|s| s * s)));
        let yv = DVector::from_row_slice(&y);
        let s_inv = (&a * &v * a.transpose()).try_inverse().unwrap();
        &yv - &v * a.transpose() * s_inv * &a * &yv
    };
    assert!(
        unconstrained[3] < -1.0,
        "the case must push s4 below zero: {}",
        unconstrained[3]
    );

    // Reference: Clarabel (interior-point conic solver, crates.io `clarabel`) on
    // minimise ½ xᵀ V⁻¹ x − (V⁻¹ y)ᵀ x  subject to  A x = 0,  x ≥ 0.
    let s = sigmas();
    let p = CscMatrix::new(
        6,
        6,
        (0..=6).collect(),
        (0..6).collect(),
        s.iter().map(|s| 1.0 / (s * s)).collect(),
    );
    let q: Vec<f64> = (0..6).map(|k| -y[k] / (s[k] * s[k])).collect();
    let a = incidence();
    let mut rows = Vec::new();
    let mut cols = Vec::new();
    let mut vals = Vec::new();
    for r in 0..3 {
        for c in 0..6 {
            if a[(r, c)] != 0.0 {
                rows.push(r);
                cols.push(c);
                vals.push(a[(r, c)]);
            }
        }
    }
    for c in 0..6 {
        rows.push(3 + c);
        cols.push(c);
        vals.push(-1.0);
    }
    let constraints = CscMatrix::new_from_triplets(9, 6, rows, cols, vals);
    let b = vec![0.0; 9];
    let cones = [
        SupportedConeT::ZeroConeT(3),
        SupportedConeT::NonnegativeConeT(6),
    ];
    let settings = DefaultSettingsBuilder::default()
        .verbose(false)
        .tol_gap_abs(1e-12)
        .tol_gap_rel(1e-12)
        .tol_feas(1e-12)
        .build()
        .unwrap();
    let mut solver = DefaultSolver::new(&p, &q, &constraints, &b, &cones, settings).unwrap();
    solver.solve();
    assert_eq!(solver.solution.status, SolverStatus::Solved);
    let reference = solver.solution.x.clone();

    let report = run(y);
    assert_eq!(report.status, ReportStatus::Solved, "{:?}", report.warnings);
    let x = reconciled_kmol_h(&report);
    for k in 0..6 {
        assert!(
            (x[k] - reference[k]).abs() < 1e-6 * (1.0 + reference[k].abs()),
            "meter {k}: {} vs {}",
            x[k],
            reference[k]
        );
    }
    assert_eq!(x[3], 0.0, "s4 sits on its bound");
    assert!(report
        .diagnostics
        .unwrap()
        .at_bound
        .iter()
        .any(|v| v.contains("\"s4\"")));
}
