//! The Vantle Cross loop (tests/data/vantle-methanol.toml) with fifteen of its meters
//! re-expressed in the units plants also send (lb/h, klb/h, t/d, lbmol/h, kmol/s, SCFH, MMSCFD,
//! mol %, vol %, ppmv): the same readings in those units, with the same σ, must give
//! the same reconciled state, and every value a report gives per meter must be the original
//! one in the new unit.

use reconcile::equations::Layout;
use reconcile::uom::Uom;
use reconcile::{parse_plant, reconcile_period, ModelSpec, Plant, Report, ReportStatus};
use testkit::plants::VANTLE;
use testkit::{exact_values, noisy_values, period, vantle_true_state, VantleConditions};

/// Meter tag and its new unit.
const SWAPS: [(&str, &str); 15] = [
    ("VC3-FI-101", "MMSCFD"),  // makeup, Nm3/h, σ 1 % of reading, with a range
    ("VC3-AI-102", "mol %"),   // %, absolute σ
    ("VC3-AI-103", "vol %"),   // %
    ("VC3-AI-104", "ppmv"),    // ppm
    ("VC3-AI-105", "mol %"),   // fraction
    ("VC3-FI-110", "lb/h"),    // kg/h, σ 1 % of span
    ("VC3-FI-201", "lbmol/h"), // kmol/h, σ 2 % of reading
    ("VC3-FI-401", "t/d"),     // t/h
    ("VC3-FI-501", "lbmol/h"), // mol/s
    ("VC3-FI-510", "kmol/s"),  // kmol/h
    ("VC3-AI-511", "ppmv"),    // ppm
    ("VC3-AI-512", "vol %"),   // ppm
    ("VC3-FI-601", "SCFH"),    // Sm3/h
    ("VC3-FI-701", "klb/h"),   // kg/h
    ("VC3-FI-702", "lbmol/h"), // component flow, kmol/h
];

/// value in the new unit = ratio × value in the old one.
fn ratio(old: &str, new: &str) -> f64 {
    let (old, new) = (Uom::parse(old).unwrap(), Uom::parse(new).unwrap());
    new.factor_from_base() / old.factor_from_base()
}

/// The Vantle model with the meters of [`SWAPS`] in their new units (σ and range scaled with
/// the unit; a percentage σ is the same in any unit), written as TOML and read back, with
/// each meter's ratio new / old (1 for the meters left alone).
fn customary() -> (Plant, Vec<f64>) {
    let mut spec = ModelSpec::from_toml(VANTLE).unwrap();
    let mut ratios = vec![1.0; spec.meters.len()];
    for (tag, uom) in SWAPS {
        let i = spec.meters.iter().position(|m| m.tag == tag).unwrap();
        let m = &mut spec.meters[i];
        assert_ne!(m.uom, uom, "{tag} changes unit");
        let k = ratio(&m.uom, uom);
        m.uom = uom.into();
        m.sigma = m.sigma.map(|s| s * k);
        m.range = m.range.map(|[lo, hi]| [lo * k, hi * k]);
        ratios[i] = k;
    }
    let text = toml::to_string(&spec).unwrap();
    assert!(text.contains("uom = \"mol %\""), "{text}");
    let plant = parse_plant(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    (plant, ratios)
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()).max(1e-12)
}

#[track_caller]
fn assert_close(what: &str, a: Option<f64>, b: Option<f64>, rel: f64) {
    match (a, b) {
        (Some(a), Some(b)) => assert!(close(a, b, rel), "{what}: {a} vs {b}"),
        (None, None) => {}
        _ => panic!("{what}: {a:?} vs {b:?}"),
    }
}

/// The reconciled state (streams, extents, split fractions, all in the engine's units) and
/// every per-meter value (each in its meter's unit, times its ratio) agree to `rel`.
fn assert_same_reconciliation(a: &Report, b: &Report, ratios: &[f64], rel: f64) {
    assert_eq!(a.status, ReportStatus::Solved, "{:?}", a.warnings);
    assert_eq!(b.status, a.status, "{:?}", b.warnings);
    assert_eq!(a.redundancy, b.redundancy);
    for (sa, sb) in a.streams.iter().zip(&b.streams) {
        assert_eq!(sa.id, sb.id);
        assert_close(&sa.id, sa.molar_flow, sb.molar_flow, rel);
        assert_close(&sa.id, sa.mass_flow, sb.mass_flow, rel);
        for (c, v) in &sa.component_flows {
            assert_close(&format!("{} {c}", sa.id), *v, sb.component_flows[c], rel);
        }
        for (c, v) in &sa.composition_sigma {
            let what = format!("σ of x {} {c}", sa.id);
            assert_close(&what, *v, sb.composition_sigma[c], 1e-7);
        }
    }
    for (ea, eb) in a.extents.iter().zip(&b.extents) {
        assert_close(&ea.reaction, ea.value, eb.value, rel);
    }
    for (fa, fb) in a.split_fractions.iter().zip(&b.split_fractions) {
        assert_close(&fa.stream, fa.value, fb.value, rel);
    }
    for ((ma, mb), k) in a.meters.iter().zip(&b.meters).zip(ratios) {
        assert_eq!(ma.tag, mb.tag);
        let scaled = |v: Option<f64>| v.map(|v| v * k);
        assert_close(&ma.tag, scaled(ma.measured), mb.measured, 1e-12);
        assert_close(&ma.tag, scaled(ma.sigma), mb.sigma, 1e-12);
        assert_close(&ma.tag, scaled(ma.reconciled), mb.reconciled, rel);
        assert_close(
            &ma.tag,
            scaled(ma.reconciled_sigma),
            mb.reconciled_sigma,
            1e-7,
        );
        // The adjustment's size in σ is unit-free.
        let (na, nb) = (ma.normalized_adjustment, mb.normalized_adjustment);
        match (na, nb) {
            (Some(x), Some(y)) => assert!((x - y).abs() < 1e-6, "{}: {x} vs {y}", ma.tag),
            _ => assert_eq!(na, nb, "{}", ma.tag),
        }
        assert_eq!(ma.suspect, mb.suspect, "{}", ma.tag);
        assert_eq!(
            mb.uom,
            b.meters.iter().find(|m| m.tag == mb.tag).unwrap().uom
        );
    }
    let (oa, ob) = (a.objective.unwrap(), b.objective.unwrap());
    assert!(
        (oa - ob).abs() <= 1e-9 * oa.max(1.0),
        "objective {oa} vs {ob}"
    );
}

#[test]
fn exact_readings_in_customary_units_reconcile_to_the_same_state() {
    let original = parse_plant(VANTLE).unwrap();
    let (plant, ratios) = customary();
    let layout = Layout::new(&plant);
    assert_eq!(layout.n, Layout::new(&original).n);
    let z = vantle_true_state(&original, &layout, &VantleConditions::default());
    // Readings simulated in each model's own units from the same true state: each customary
    // value is the original one times its ratio (the conversions agree with the measurement
    // functions).
    let in_si = exact_values(&original, &layout, &z);
    let in_customary = exact_values(&plant, &layout, &z);
    for ((a, b), k) in in_si.iter().zip(&in_customary).zip(&ratios) {
        let tag = &plant.meters[b.meter].tag;
        assert!(
            close(a.value * k, b.value, 1e-12),
            "{tag}: {} vs {}",
            a.value * k,
            b.value
        );
    }
    let a = reconcile_period(&original, &period(in_si));
    let b = reconcile_period(&plant, &period(in_customary));
    assert!(b.objective.unwrap() < 1e-12);
    assert_same_reconciliation(&a, &b, &ratios, 1e-9);
    // The report gives each meter's values in its own unit, spelled as the model spells it.
    let uom = |tag: &str| b.meters.iter().find(|m| m.tag == tag).unwrap().uom.clone();
    assert_eq!(uom("VC3-FI-101"), "MMSCFD");
    assert_eq!(uom("VC3-AI-102"), "mol %");
    assert_eq!(uom("VC3-AI-104"), "ppmv");
    assert_eq!(uom("VC3-FI-110"), "lb/h");
}

#[test]
fn noisy_readings_in_customary_units_reconcile_to_the_same_state() {
    // Noisy readings give a state the balances pull away from the readings: the adjustments
    // and the state must not depend on the unit either.
    let original = parse_plant(VANTLE).unwrap();
    let (plant, ratios) = customary();
    let layout = Layout::new(&original);
    let z = vantle_true_state(&original, &layout, &VantleConditions::default());
    for seed in [3, 17, 2024] {
        let in_si = noisy_values(&original, &exact_values(&original, &layout, &z), seed);
        let mut in_customary = in_si.clone();
        for (v, k) in in_customary.iter_mut().zip(&ratios) {
            v.value *= k;
        }
        let a = reconcile_period(&original, &period(in_si));
        let b = reconcile_period(&plant, &period(in_customary));
        assert!(a.objective.unwrap() > 1.0, "the noise moves the state");
        assert_same_reconciliation(&a, &b, &ratios, 1e-9);
    }
}
