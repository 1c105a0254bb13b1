//! The measurement functions h(z) of every quantity and unit of measure: gradients against
//! central differences, and values on hand-computed states.

use super::*;

#[test]
fn measurement_gradients_match_central_differences() {
    let p = plant();
    let l = Layout::new(&p);
    let mut rng = ChaCha8Rng::seed_from_u64(0x0062_616c);
    for trial in 0..25 {
        let z = random_state(&p, &l, &mut rng);
        for m in &p.meters {
            let (h, grad) = measurement(&p, &l, m, &z);
            assert!(h.is_finite() && h > 0.0, "{}: h = {h}", m.tag);
            let fd = fd_gradient(|w| measurement(&p, &l, m, w).0, &z);
            let what = format!(
                "meter {} ({} in {}), trial {trial}",
                m.tag,
                m.quantity.as_str(),
                m.uom
            );
            assert_gradient_close(&what, &dense(l.n, &grad), &fd);
        }
        for s in 0..p.streams.len() {
            let (_, grad) = stream_total(&p, &l, s, &z);
            let fd = fd_gradient(|w| stream_total(&p, &l, s, w).0, &z);
            assert_gradient_close(
                &format!("total of {}", p.streams[s].id),
                &dense(l.n, &grad),
                &fd,
            );
            for &c in &p.streams[s].components {
                let (_, grad) = stream_fraction(&p, &l, s, c, &z);
                let fd = fd_gradient(|w| stream_fraction(&p, &l, s, c, w).0, &z);
                let what = format!("fraction of {} in {}", p.components[c].id, p.streams[s].id);
                assert_gradient_close(&what, &dense(l.n, &grad), &fd);
            }
        }
    }
}

#[test]
fn every_quantity_and_uom_is_exercised() {
    // Guards the gradient test above against a test plant that lost a meter kind.
    let p = plant();
    let mut kinds: Vec<(&str, &str, bool)> = p
        .meters
        .iter()
        .map(|m| (m.quantity.as_str(), m.uom.as_str(), m.basis.is_some()))
        .collect();
    kinds.sort_unstable();
    kinds.dedup();
    let mut expected = vec![
        ("molar_flow", "kmol/h", false),
        ("molar_flow", "mol/s", false),
        ("mass_flow", "kg/h", false),
        ("mass_flow", "t/h", false),
        ("std_volume_flow", "Nm3/h", false),
        ("std_volume_flow", "Sm3/h", false),
        ("component_flow", "kmol/h", false),
        ("component_flow", "mol/s", false),
        ("mole_fraction", "fraction", false),
        ("mole_fraction", "%", false),
        ("mole_fraction", "ppm", false),
        ("mole_fraction", "%", true),
        ("mole_fraction", "ppm", true),
        ("mass_fraction", "fraction", false),
        ("mass_fraction", "%", false),
        ("mass_fraction", "ppm", false),
        ("molar_flow", "kmol/s", false),
        ("molar_flow", "lbmol/h", false),
        ("mass_flow", "t/d", false),
        ("mass_flow", "kg/s", false),
        ("mass_flow", "lb/h", false),
        ("mass_flow", "klb/h", false),
        ("std_volume_flow", "Nm3/d", false),
        ("std_volume_flow", "SCFH", false),
        ("std_volume_flow", "MSCFD", false),
        ("std_volume_flow", "MMSCFD", false),
        ("component_flow", "kmol/s", false),
        ("component_flow", "lbmol/h", false),
        ("mole_fraction", "mol %", false),
        ("mole_fraction", "vol %", false),
        ("mole_fraction", "ppmv", false),
        ("mole_fraction", "ppmv", true),
    ];
    expected.sort_unstable();
    assert_eq!(kinds, expected);
    // And every unit there is, on some meter.
    for u in crate::uom::Uom::ALL {
        assert!(p.meters.iter().any(|m| m.uom == u), "no meter in {u}");
    }
}

#[test]
fn flow_measurements_on_hand_computed_cases() {
    let p = plant();
    let l = Layout::new(&p);
    let mut z = vec![0.0; l.n];
    // 100 kmol/h of gas in the feed.
    set_stream(
        &p,
        &l,
        &mut z,
        "feed",
        &[("N2", 24.0), ("H2", 72.0), ("CH4", 1.0), ("H2O", 3.0)],
    );
    let h = |tag: &str, z: &[f64]| measurement(&p, &l, meter(&p, tag), z).0;
    // CODATA 2018: molar volume of an ideal gas at 273.15 K and 101.325 kPa is
    // 22.413 969 54 L/mol, so 100 kmol/h read 2241.396 954 Nm3/h.
    assert!(
        rel_close(h("V-Nm3h", &z), 2_241.396_954, 1e-10),
        "{}",
        h("V-Nm3h", &z)
    );
    assert!((h("V-Nm3h", &z) - 2241.3969).abs() < 1e-4);
    // Sm3/h at the ISO 13443 reference conditions (288.15 K, 101.325 kPa), ideal gas with the
    // CODATA 2018 molar gas constant: V = R T / p = 23.6449 L/mol.
    let vm_std = CODATA_R * 288.15 / P_ATM * 1000.0;
    assert!(
        rel_close(h("V-Sm3h", &z), 100.0 * vm_std, 1e-9),
        "{}",
        h("V-Sm3h", &z)
    );
    assert!(
        (h("V-Sm3h", &z) - 2364.49).abs() < 0.01,
        "{}",
        h("V-Sm3h", &z)
    );

    // Molar flow: react-in carries 30 + 90 + 60 = 180 kmol/h = 50 mol/s (1 kmol/h = 1000 mol / 3600 s).
    set_stream(
        &p,
        &l,
        &mut z,
        "react-in",
        &[("N2", 30.0), ("H2", 90.0), ("NH3", 60.0)],
    );
    assert!(rel_close(h("F-kmolh", &z), 180.0, 1e-12));
    assert!(
        rel_close(h("F-mols", &z), 50.0, 1e-12),
        "{}",
        h("F-mols", &z)
    );

    // Component flow: 7.2 kmol/h of CH4 in the purge = 2 mol/s; other components do not count.
    set_stream(
        &p,
        &l,
        &mut z,
        "purge",
        &[("CH4", 7.2), ("H2", 40.0), ("N2", 13.0)],
    );
    assert!(rel_close(h("C-kmolh", &z), 7.2, 1e-12));
    assert!(
        rel_close(h("C-mols", &z), 2.0, 1e-12),
        "{}",
        h("C-mols", &z)
    );

    // Mass flow: 30 kmol/h NH3 and 10 kmol/h water, molar masses from the IUPAC 2021 abridged
    // atomic weights: 30 (14.007 + 3·1.008) + 10 (2·1.008 + 15.999) = 510.93 + 180.15 kg/h.
    set_stream(&p, &l, &mut z, "liquid", &[("NH3", 30.0), ("H2O", 10.0)]);
    let m_nh3 = AW_N + 3.0 * AW_H;
    let m_h2o = 2.0 * AW_H + AW_O;
    let kg = 30.0 * m_nh3 + 10.0 * m_h2o;
    assert!((kg - 691.08).abs() < 1e-9);
    assert!(
        (h("M-kgh", &z) - 691.08).abs() < 1e-3 * 40.0,
        "{}",
        h("M-kgh", &z)
    );
    assert!(rel_close(h("M-kgh", &z), kg, 1e-6), "{}", h("M-kgh", &z));
    // 1 t = 1000 kg.
    assert!(
        rel_close(h("M-th", &z), kg / 1000.0, 1e-6),
        "{}",
        h("M-th", &z)
    );
    // The same flow per day in tonnes, per second in kg, and in international pounds
    // (1 lb = 0.453 592 37 kg exactly, NIST SP 811 (2008), appendix B).
    let kg_h = h("M-kgh", &z);
    assert!(rel_close(h("M-td", &z), kg_h * 24.0 / 1000.0, 1e-14));
    assert!(rel_close(h("M-kgs", &z), kg_h / 3600.0, 1e-14));
    assert!(rel_close(h("M-lbh", &z), kg_h / 0.453_592_37, 1e-14));
    assert!(rel_close(h("M-klbh", &z), kg_h / 453.592_37, 1e-14));
    assert!((h("M-lbh", &z) - 1523.6).abs() < 0.1, "{}", h("M-lbh", &z));
}

#[test]
fn customary_flow_units_on_hand_computed_cases() {
    let p = plant();
    let l = Layout::new(&p);
    let mut z = vec![0.0; l.n];
    let h = |tag: &str, z: &[f64]| measurement(&p, &l, meter(&p, tag), z).0;
    // 100 kmol/h of feed gas.
    set_stream(
        &p,
        &l,
        &mut z,
        "feed",
        &[("N2", 24.0), ("H2", 72.0), ("CH4", 1.0), ("H2O", 3.0)],
    );
    // Nm3/d: 24 × 2241.396 954 = 53 793.526 896 (CODATA 2018 molar volume).
    assert!(rel_close(h("V-Nm3d", &z), 53_793.526_896, 1e-10));
    // Standard cubic feet at 60 °F, 14.696 psia: V = R T / p with T = 519.67 × 5/9 K and
    // p = 14.696 lbf/in² (lbf = 0.453 592 37 kg × 9.806 65 m/s², in = 0.0254 m; NIST SP 811).
    let p_scf = 14.696 * 0.453_592_37 * 9.806_65 / (0.0254 * 0.0254);
    let vm_scf = CODATA_R * (519.67 * 5.0 / 9.0) / p_scf; // m³/mol
    let scf_per_kmol = vm_scf * 1000.0 / 0.3048_f64.powi(3);
    assert!(rel_close(h("V-SCFH", &z), 100.0 * scf_per_kmol, 1e-12));
    // 379.48 scf per lbmol (gas-processing handbook figure, from memory): 100 kmol/h is
    // 100 / 0.453 592 37 lbmol/h, about 83 662 SCFH, 2007.9 MSCFD and 2.0079 MMSCFD
    // (1 MMSCFD ≈ 49.8 kmol/h).
    assert!((h("V-SCFH", &z) - 379.48 * 100.0 / 0.453_592_37).abs() < 3.0);
    assert!(
        (h("V-MSCFD", &z) - 2_007.9).abs() < 0.05,
        "{}",
        h("V-MSCFD", &z)
    );
    assert!(
        (h("V-MMSCFD", &z) - 100.0 / 49.8).abs() < 2e-4,
        "{}",
        h("V-MMSCFD", &z)
    );
    assert!(rel_close(
        h("V-MMSCFD", &z) * 1000.0,
        h("V-MSCFD", &z),
        1e-14
    ));

    // 180 kmol/h = 0.05 kmol/s = 180 / 0.453 592 37 lbmol/h (1 lbmol = 453.592 37 mol).
    set_stream(
        &p,
        &l,
        &mut z,
        "react-in",
        &[("N2", 30.0), ("H2", 90.0), ("NH3", 60.0)],
    );
    assert!(rel_close(h("F-kmols", &z), 0.05, 1e-14));
    assert!(rel_close(h("F-lbmolh", &z), 180.0 / 0.453_592_37, 1e-14));
    assert!((h("F-lbmolh", &z) - 396.83).abs() < 0.01);
    // Component flow: 7.2 kmol/h of CH4 = 0.002 kmol/s = 15.873 lbmol/h.
    set_stream(
        &p,
        &l,
        &mut z,
        "purge",
        &[("CH4", 7.2), ("H2", 40.0), ("N2", 13.0)],
    );
    assert!(rel_close(h("C-kmols", &z), 0.002, 1e-14));
    assert!(rel_close(h("C-lbmolh", &z), 7.2 / 0.453_592_37, 1e-14));
}

#[test]
fn composition_measurements_on_hand_computed_cases() {
    let p = plant();
    let l = Layout::new(&p);
    let mut z = vec![0.0; l.n];
    let h = |tag: &str, z: &[f64]| measurement(&p, &l, meter(&p, tag), z).0;
    // Gas: 100 kmol/h with 4 NH3, 15 CH4 and 0.001 water.
    set_stream(
        &p,
        &l,
        &mut z,
        "gas",
        &[
            ("N2", 20.0),
            ("H2", 60.0),
            ("NH3", 4.0),
            ("CH4", 15.0),
            ("H2O", 0.001),
            ("CO", 0.999),
        ],
    );
    assert!(
        rel_close(h("X-frac", &z), 0.04, 1e-12),
        "{}",
        h("X-frac", &z)
    );
    assert!(rel_close(h("X-pct", &z), 15.0, 1e-12), "{}", h("X-pct", &z));
    // 0.001 / 100 = 1e-5 = 10 ppm.
    assert!(rel_close(h("X-ppm", &z), 10.0, 1e-9), "{}", h("X-ppm", &z));
    // The same mole fractions in mol %, vol % and ppmv (an ideal gas: volume fraction =
    // mole fraction).
    assert!(rel_close(h("X-molpct", &z), 4.0, 1e-12));
    assert!(rel_close(h("X-volpct", &z), 15.0, 1e-12));
    assert!(rel_close(h("X-ppmv", &z), 10.0, 1e-9));

    // Dry basis: feed 24 N2, 70 H2, 2 CH4, 4 H2O; water is left out: 24 / 96 = 25 %.
    set_stream(
        &p,
        &l,
        &mut z,
        "feed",
        &[("N2", 24.0), ("H2", 70.0), ("CH4", 2.0), ("H2O", 4.0)],
    );
    assert!(
        rel_close(h("X-dry-pct", &z), 25.0, 1e-12),
        "{}",
        h("X-dry-pct", &z)
    );
    // The wet basis would read 24 %: the water changes the dry reading not at all.
    let mut wetter = z.clone();
    wetter[flow_ix(&p, &l, "feed", "H2O")] = 40.0;
    assert!(rel_close(h("X-dry-pct", &wetter), 25.0, 1e-12));

    // react-out: 50 ppm CO on a dry basis: 0.005 CO in 100 kmol/h dry, plus 25 kmol/h water.
    set_stream(
        &p,
        &l,
        &mut z,
        "react-out",
        &[
            ("N2", 20.0),
            ("H2", 60.0),
            ("NH3", 15.0),
            ("CH4", 4.995),
            ("CO", 0.005),
            ("H2O", 25.0),
        ],
    );
    assert!(
        rel_close(h("X-dry-ppm", &z), 50.0, 1e-9),
        "{}",
        h("X-dry-ppm", &z)
    );
    assert!(rel_close(h("X-dry-ppmv", &z), 50.0, 1e-9));

    // Mass fractions of the liquid: 30 kmol/h NH3 and 10 kmol/h water (IUPAC 2021 weights).
    set_stream(&p, &l, &mut z, "liquid", &[("NH3", 30.0), ("H2O", 10.0)]);
    let (m_nh3, m_h2o) = (AW_N + 3.0 * AW_H, 2.0 * AW_H + AW_O);
    let w_nh3 = 30.0 * m_nh3 / (30.0 * m_nh3 + 10.0 * m_h2o);
    assert!((w_nh3 - 510.93 / 691.08).abs() < 1e-12);
    assert!(
        rel_close(h("W-frac", &z), w_nh3, 1e-6),
        "{}",
        h("W-frac", &z)
    );
    assert!(
        rel_close(h("W-pct", &z), 100.0 * (1.0 - w_nh3), 1e-6),
        "{}",
        h("W-pct", &z)
    );
    // Mass fraction of CO in react-out, in ppm, with every component's mass.
    let masses = [
        (20.0, 2.0 * AW_N),
        (60.0, 2.0 * AW_H),
        (15.0, AW_N + 3.0 * AW_H),
        (4.995, AW_C + 4.0 * AW_H),
        (0.005, AW_C + AW_O),
        (25.0, 2.0 * AW_H + AW_O),
    ];
    let total: f64 = masses.iter().map(|(n, m)| n * m).sum();
    let w_co = 0.005 * (AW_C + AW_O) / total * 1e6;
    assert!(
        rel_close(h("W-ppm", &z), w_co, 1e-6),
        "{} against {w_co}",
        h("W-ppm", &z)
    );
}

#[test]
fn fractions_of_an_empty_stream_stay_finite() {
    let p = plant();
    let l = Layout::new(&p);
    let z = vec![0.0; l.n];
    for m in &p.meters {
        let (h, grad) = measurement(&p, &l, m, &z);
        assert!(h.is_finite() && h == 0.0, "{}: {h}", m.tag);
        assert!(grad.iter().all(|(_, v)| v.is_finite()), "{}", m.tag);
    }
}
