//! NaN and infinity (TOML has `nan` and `inf` literals) wherever a number goes.

use super::*;

#[test]
fn nan_and_inf_molar_mass() {
    for bad in ["nan", "inf", "-inf", "+nan"] {
        let text = edit(&[("molar_mass = 39.95", &format!("molar_mass = {bad}"))]);
        assert_only_problem(&text, "component \"Ar\"", &["molar_mass"]);
    }
    // In a component that reacts, the mass balance cannot be checked; the molar mass is
    // still the problem reported.
    let text = edit(&[("molar_mass = 17.031", "molar_mass = nan")]);
    assert_problem(&text, "component \"NH3\"", &["molar_mass"]);
}

#[test]
fn nan_and_inf_sigma() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("sigma = 2.0", &format!("sigma = {bad}"))]);
        assert_only_problem(&text, "meter \"FI-1\"", &["sigma"]);
        let text = edit(&[("sigma_pct = 1.0", &format!("sigma_pct = {bad}"))]);
        assert_only_problem(&text, "meter \"FI-4\"", &["sigma_pct"]);
        let text = edit(&[("sigma_pct_span = 1.0", &format!("sigma_pct_span = {bad}"))]);
        assert_only_problem(&text, "meter \"AI-3\"", &["sigma_pct_span"]);
    }
}

#[test]
fn nan_and_inf_stoichiometry() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("H2 = -3", &format!("H2 = {bad}"))]);
        assert_only_problem(&text, "reaction \"synth\"", &["\"H2\""]);
    }
}

#[test]
fn nan_and_inf_range() {
    for range in [
        "[0.0, nan]",
        "[nan, 100.0]",
        "[-inf, 100.0]",
        "[0.0, inf]",
        "[nan, nan]",
    ] {
        let text = edit(&[("range = [0.0, 100.0]", &format!("range = {range}"))]);
        assert_only_problem(&text, "meter \"AI-3\"", &["range"]);
        // A range on a meter with an absolute sigma is checked just the same.
        let text = edit(&[("sigma = 2.0\n", &format!("sigma = 2.0\nrange = {range}\n"))]);
        assert_only_problem(&text, "meter \"FI-1\"", &["range"]);
    }
}

#[test]
fn nan_and_inf_alpha() {
    for bad in ["nan", "inf", "-inf"] {
        let text = edit(&[("alpha = 0.05", &format!("alpha = {bad}"))]);
        assert_only_problem(&text, "model", &["alpha"]);
    }
}
