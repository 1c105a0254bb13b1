//! The tests (docs/methods.md §4): the global test on the objective and the measurement test on the
//! normalised adjustments, with the Šidák correction.

use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};

/// Upper critical value χ²_{1−α}(ν) of the chi-squared distribution.
pub fn chi2_critical(alpha: f64, dof: usize) -> f64 {
    if dof == 0 {
        return 0.0;
    }
    ChiSquared::new(dof as f64)
        .expect("positive dof")
        .inverse_cdf(1.0 - alpha)
}

/// Upper-tail probability of χ²(ν) beyond `x`.
pub fn chi2_p_value(x: f64, dof: usize) -> f64 {
    if dof == 0 {
        return 1.0;
    }
    1.0 - ChiSquared::new(dof as f64)
        .expect("positive dof")
        .cdf(x.max(0.0))
}

/// Standard normal quantile z_p.
pub fn normal_quantile(p: f64) -> f64 {
    Normal::new(0.0, 1.0)
        .expect("standard normal")
        .inverse_cdf(p)
}

/// Šidák-corrected per-test level β = 1 − (1 − α)^{1/m} for m tests at family level α.
pub fn sidak(alpha: f64, tests: usize) -> f64 {
    if tests == 0 {
        return alpha;
    }
    1.0 - (1.0 - alpha).powf(1.0 / tests as f64)
}

/// Critical value of the two-sided measurement test over `tests` redundant meters at family
/// level α (Mah & Tamhane 1982): z_{1−β/2} with β the Šidák level.
pub fn measurement_test_critical(alpha: f64, tests: usize) -> f64 {
    normal_quantile(1.0 - sidak(alpha, tests.max(1)) / 2.0)
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
pub struct GlobalTest {
    /// Minimised objective J = Σ((y − ŷ)/σ)².
    pub statistic: f64,
    /// χ²_{1−α}(ν).
    pub critical: f64,
    pub alpha: f64,
    /// Degrees of freedom ν (the degree of redundancy).
    pub dof: usize,
    pub p_value: f64,
    pub passed: bool,
}

/// The global test (Ripps 1965; Almasy & Sztano 1975): without gross errors the minimised
/// objective follows χ²(ν); the data fail when it exceeds χ²_{1−α}(ν).
pub fn global_test(objective: f64, dof: usize, alpha: f64) -> GlobalTest {
    let critical = chi2_critical(alpha, dof);
    GlobalTest {
        statistic: objective,
        critical,
        alpha,
        dof,
        p_value: chi2_p_value(objective, dof),
        passed: dof == 0 || objective <= critical,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chi2_critical_values_match_nist_table() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.4, upper critical values
        // of the chi-square distribution at probability 0.95 (table given to 3 decimals).
        for (dof, table) in [
            (1, 3.841),
            (2, 5.991),
            (3, 7.815),
            (5, 11.070),
            (10, 18.307),
            (20, 31.410),
        ] {
            let v = chi2_critical(0.05, dof);
            assert!((v - table).abs() < 6e-4, "ν={dof}: {v} vs {table}");
        }
    }

    #[test]
    fn normal_quantiles_match_nist_table() {
        // NIST/SEMATECH e-Handbook, §1.3.6.7.1: z_0.975 = 1.959964, z_0.995 = 2.575829.
        assert!((normal_quantile(0.975) - 1.959964).abs() < 1e-6);
        assert!((normal_quantile(0.995) - 2.575829).abs() < 1e-6);
    }

    #[test]
    fn sidak_level() {
        // One test: β = α. Ten tests at α = 0.05: β = 1 − 0.95^{0.1} = 0.005116 (closed form).
        assert!((sidak(0.05, 1) - 0.05).abs() < 1e-15);
        assert!((sidak(0.05, 10) - 0.005_116_196).abs() < 1e-8);
        // The family level is recovered: 1 − (1 − β)^m = α.
        let b = sidak(0.05, 7);
        assert!((1.0 - (1.0 - b).powi(7) - 0.05).abs() < 1e-12);
        assert!((measurement_test_critical(0.05, 1) - 1.959964).abs() < 1e-6);
    }

    #[test]
    fn global_test_decision() {
        let t = global_test(3.9, 5, 0.05);
        assert!(t.passed && (t.critical - 11.070).abs() < 1e-3);
        assert!(!global_test(12.0, 5, 0.05).passed);
        assert!((global_test(11.0705, 5, 0.05).p_value - 0.05).abs() < 1e-4);
    }
}
