//! Conservation of mass by each reaction, within the tolerance.

use super::*;

/// The ammonia synthesis N2 + 3 H2 → 2 NH3 with the molar mass of NH3 set so that
/// Σ ν·M = r · Σ |ν·M|.
fn synthesis_off_by(r: f64) -> String {
    // IUPAC 2021 abridged atomic weights: N 14.007, H 1.008.
    let (m_n2, m_h2) = (2.0 * 14.007, 2.0 * 1.008);
    // Σ ν M = 2 M − (m_n2 + 3 m_h2) and Σ |ν M| = 2 M + m_n2 + 3 m_h2; solve for M.
    let reactants = m_n2 + 3.0 * m_h2;
    let m_nh3 = reactants * (1.0 + r) / (2.0 * (1.0 - r));
    let net = 2.0 * m_nh3 - reactants;
    let scale = 2.0 * m_nh3 + reactants;
    assert!((net / scale - r).abs() < 1e-3 * r.abs(), "construction");
    edit(&[("molar_mass = 17.031", &format!("molar_mass = {m_nh3:?}"))])
}

#[test]
fn reaction_conserving_mass_within_the_tolerance_passes() {
    // The tolerance is 1e-6 relative to Σ|ν·M| (docs/model.md, reactions).
    for r in [0.9e-6, -0.9e-6, 0.5e-6] {
        let text = synthesis_off_by(r);
        if let Err(e) = parse_plant(&text) {
            panic!("relative imbalance {r:e} is inside the tolerance: {e}");
        }
    }
}

#[test]
fn reaction_not_conserving_mass_is_refused() {
    for r in [1.1e-6, -1.1e-6, 1e-3] {
        let text = synthesis_off_by(r);
        assert_only_problem(&text, "reaction \"synth\"", &["mass"]);
    }
    // A plainly wrong stoichiometry: N2 + H2 → NH3.
    let text = edit(&[("N2 = -1, H2 = -3, NH3 = 2", "N2 = -1, H2 = -1, NH3 = 1")]);
    assert_only_problem(&text, "reaction \"synth\"", &["mass"]);
}

#[test]
fn zero_coefficient_and_empty_stoichiometry() {
    let text = edit(&[("NH3 = 2 }", "NH3 = 2, Ar = 0 }")]);
    assert_only_problem(&text, "reaction \"synth\"", &["\"Ar\"", "zero"]);
    let text = edit(&[(
        "stoichiometry = { N2 = -1, H2 = -3, NH3 = 2 }\nkey = \"N2\"",
        "stoichiometry = {}",
    )]);
    assert_only_problem(&text, "reaction \"synth\"", &["empty"]);
}
