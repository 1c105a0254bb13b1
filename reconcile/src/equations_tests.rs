//! Jacobians of the constraints g(z) and of every measurement function h(z) against central
//! finite differences, and their values on hand-computed cases.

use super::*;
use crate::model::Plant;
use crate::validate::parse_plant;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// IUPAC 2021 abridged standard atomic weights (Pure Appl. Chem. 94 (2022) 573), g/mol.
const AW_H: f64 = 1.008;
const AW_C: f64 = 12.011;
const AW_N: f64 = 14.007;
const AW_O: f64 = 15.999;

/// Molar gas constant, J/(mol K): CODATA 2018 (exact since the 2019 SI redefinition).
const CODATA_R: f64 = 8.314_462_618;
/// Standard atmosphere, Pa (exact by definition, also the ISO 13443 reference pressure).
const P_ATM: f64 = 101_325.0;

/// A small invented plant: a mixer, a reactor with two reactions, a separator that drops a
/// liquid of ammonia and water, and a splitter with three outlets (two split fractions).
const SMALL_PLANT: &str = r#"
name = "tern-bay-test"

[[component]]
id = "N2"
molar_mass = 28.014
[[component]]
id = "H2"
molar_mass = 2.016
[[component]]
id = "NH3"
molar_mass = 17.031
[[component]]
id = "CH4"
molar_mass = 16.043
[[component]]
id = "H2O"
molar_mass = 18.015
[[component]]
id = "CO"
molar_mass = 28.010

[[unit]]
id = "blend"
kind = "mixer"
[[unit]]
id = "react"
kind = "reactor"
[[unit]]
id = "flash"
kind = "separator"
[[unit]]
id = "tee"
kind = "splitter"

[[reaction]]
id = "ammonia"
unit = "react"
stoichiometry = { N2 = -1, H2 = -3, NH3 = 2 }
key = "N2"
[[reaction]]
id = "reforming"
unit = "react"
stoichiometry = { CH4 = -1, H2O = -1, CO = 1, H2 = 3 }

[[stream]]
id = "feed"
from = "outside"
to = "blend"
components = ["N2", "H2", "CH4", "H2O"]
[[stream]]
id = "react-in"
from = "blend"
to = "react"
[[stream]]
id = "react-out"
from = "react"
to = "flash"
[[stream]]
id = "liquid"
from = "flash"
to = "outside"
components = ["H2O", "NH3"]
[[stream]]
id = "gas"
from = "flash"
to = "tee"
[[stream]]
id = "purge"
from = "tee"
to = "outside"
[[stream]]
id = "bleed"
from = "tee"
to = "outside"
[[stream]]
id = "recycle"
from = "tee"
to = "blend"

[[meter]]
tag = "F-kmolh"
stream = "react-in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "F-mols"
stream = "react-in"
quantity = "molar_flow"
uom = "mol/s"
sigma = 1.0
[[meter]]
tag = "M-kgh"
stream = "liquid"
quantity = "mass_flow"
uom = "kg/h"
sigma = 1.0
[[meter]]
tag = "M-th"
stream = "liquid"
quantity = "mass_flow"
uom = "t/h"
sigma = 0.01
[[meter]]
tag = "V-Nm3h"
stream = "feed"
quantity = "std_volume_flow"
uom = "Nm3/h"
sigma = 10.0
[[meter]]
tag = "V-Sm3h"
stream = "feed"
quantity = "std_volume_flow"
uom = "Sm3/h"
sigma = 10.0
[[meter]]
tag = "C-kmolh"
stream = "purge"
quantity = "component_flow"
component = "CH4"
uom = "kmol/h"
sigma = 0.1
[[meter]]
tag = "C-mols"
stream = "purge"
quantity = "component_flow"
component = "CH4"
uom = "mol/s"
sigma = 0.1
[[meter]]
tag = "X-frac"
stream = "gas"
quantity = "mole_fraction"
component = "NH3"
uom = "fraction"
sigma = 0.001
[[meter]]
tag = "X-pct"
stream = "gas"
quantity = "mole_fraction"
component = "CH4"
uom = "%"
sigma = 0.1
[[meter]]
tag = "X-ppm"
stream = "gas"
quantity = "mole_fraction"
component = "H2O"
uom = "ppm"
sigma = 1.0
[[meter]]
tag = "X-dry-pct"
stream = "feed"
quantity = "mole_fraction"
component = "N2"
basis = ["N2", "H2", "CH4"]
uom = "%"
sigma = 0.1
[[meter]]
tag = "X-dry-ppm"
stream = "react-out"
quantity = "mole_fraction"
component = "CO"
basis = ["CO", "N2", "H2", "NH3", "CH4"]
uom = "ppm"
sigma = 5.0
[[meter]]
tag = "W-frac"
stream = "liquid"
quantity = "mass_fraction"
component = "NH3"
uom = "fraction"
sigma = 0.001
[[meter]]
tag = "W-pct"
stream = "liquid"
quantity = "mass_fraction"
component = "H2O"
uom = "%"
sigma = 0.1
[[meter]]
tag = "W-ppm"
stream = "react-out"
quantity = "mass_fraction"
component = "CO"
uom = "ppm"
sigma = 5.0
[[meter]]
tag = "F-kmols"
stream = "react-in"
quantity = "molar_flow"
uom = "kmol/s"
sigma = 0.001
[[meter]]
tag = "F-lbmolh"
stream = "react-in"
quantity = "molar_flow"
uom = "lbmol/h"
sigma = 2.0
[[meter]]
tag = "M-td"
stream = "liquid"
quantity = "mass_flow"
uom = "t/d"
sigma = 0.2
[[meter]]
tag = "M-kgs"
stream = "liquid"
quantity = "mass_flow"
uom = "kg/s"
sigma = 0.01
[[meter]]
tag = "M-lbh"
stream = "liquid"
quantity = "mass_flow"
uom = "lb/h"
sigma = 2.0
[[meter]]
tag = "M-klbh"
stream = "liquid"
quantity = "mass_flow"
uom = "klb/h"
sigma = 0.002
[[meter]]
tag = "V-Nm3d"
stream = "feed"
quantity = "std_volume_flow"
uom = "Nm3/d"
sigma = 240.0
[[meter]]
tag = "V-SCFH"
stream = "feed"
quantity = "std_volume_flow"
uom = "SCFH"
sigma = 400.0
[[meter]]
tag = "V-MSCFD"
stream = "feed"
quantity = "std_volume_flow"
uom = "MSCFD"
sigma = 10.0
[[meter]]
tag = "V-MMSCFD"
stream = "feed"
quantity = "std_volume_flow"
uom = "MMSCFD"
sigma = 0.01
[[meter]]
tag = "C-kmols"
stream = "purge"
quantity = "component_flow"
component = "CH4"
uom = "kmol/s"
sigma = 0.0001
[[meter]]
tag = "C-lbmolh"
stream = "purge"
quantity = "component_flow"
component = "CH4"
uom = "lbmol/h"
sigma = 0.2
[[meter]]
tag = "X-molpct"
stream = "gas"
quantity = "mole_fraction"
component = "NH3"
uom = "mol %"
sigma = 0.1
[[meter]]
tag = "X-volpct"
stream = "gas"
quantity = "mole_fraction"
component = "CH4"
uom = "vol %"
sigma = 0.1
[[meter]]
tag = "X-ppmv"
stream = "gas"
quantity = "mole_fraction"
component = "H2O"
uom = "ppmv"
sigma = 1.0
[[meter]]
tag = "X-dry-ppmv"
stream = "react-out"
quantity = "mole_fraction"
component = "CO"
basis = ["CO", "N2", "H2", "NH3", "CH4"]
uom = "ppmv"
sigma = 5.0
"#;

fn plant() -> Plant {
    parse_plant(SMALL_PLANT).expect("the test plant is valid")
}

fn comp(plant: &Plant, id: &str) -> usize {
    plant
        .component_index(id)
        .expect("component of the test plant")
}

fn stream(plant: &Plant, id: &str) -> usize {
    plant.stream_index(id).expect("stream of the test plant")
}

fn meter<'a>(plant: &'a Plant, tag: &str) -> &'a Meter {
    &plant.meters[plant.meter_index(tag).expect("meter of the test plant")]
}

fn reaction(plant: &Plant, id: &str) -> usize {
    plant
        .reactions
        .iter()
        .position(|r| r.id == id)
        .expect("reaction of the test plant")
}

/// Index of n_{s,c} by ids.
fn flow_ix(plant: &Plant, layout: &Layout, s: &str, c: &str) -> usize {
    layout
        .flow(plant, stream(plant, s), comp(plant, c))
        .unwrap_or_else(|| panic!("stream {s} carries {c}"))
}

/// Set a stream's flows; components not named are set to zero.
fn set_stream(plant: &Plant, layout: &Layout, z: &mut [f64], s: &str, flows: &[(&str, f64)]) {
    for i in layout.stream_flows(plant, stream(plant, s)) {
        z[i] = 0.0;
    }
    for &(c, v) in flows {
        z[flow_ix(plant, layout, s, c)] = v;
    }
}

/// A random positive state: flows log-uniform from 1 to about 300 kmol/h, extents and split
/// fractions positive. (Wider spreads make the finite differences, not the Jacobian, the weak
/// link: round-off grows as ε·|h|/step.)
fn random_state(plant: &Plant, layout: &Layout, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let mut z = vec![0.0; layout.n];
    for v in z.iter_mut().take(layout.extent_start) {
        *v = 10f64.powf(rng.gen_range(0.0..2.5));
    }
    for r in 0..plant.reactions.len() {
        z[layout.extent(r)] = rng.gen_range(0.1..80.0);
    }
    for &(_, i) in &layout.splits {
        z[i] = rng.gen_range(0.05..0.6);
    }
    z
}

/// Central-difference gradient of a scalar function; the step is ε^(1/3) relative to the
/// variable (the step that balances truncation against round-off), made exactly representable.
fn fd_gradient(f: impl Fn(&[f64]) -> f64, z: &[f64]) -> Vec<f64> {
    let mut w = z.to_vec();
    (0..z.len())
        .map(|j| {
            let x = z[j];
            let h0 = f64::EPSILON.cbrt() * x.abs().max(1.0);
            let h = (x + h0) - x;
            w[j] = x + h;
            let up = f(&w);
            w[j] = x - h;
            let down = f(&w);
            w[j] = x;
            (up - down) / (2.0 * h)
        })
        .collect()
}

/// Sum sparse (column, value) pairs into a dense row; duplicates add up.
fn dense(n: usize, pairs: &[(usize, f64)]) -> Vec<f64> {
    let mut row = vec![0.0; n];
    for &(i, v) in pairs {
        row[i] += v;
    }
    row
}

/// Every entry within 1e-6 relative; entries below 1e-6 of the row's largest are compared
/// against that floor instead, so that structural zeros must come out (nearly) zero.
fn assert_gradient_close(what: &str, analytic: &[f64], fd: &[f64]) {
    assert_eq!(analytic.len(), fd.len());
    let scale = fd
        .iter()
        .chain(analytic)
        .fold(0.0_f64, |m, v| m.max(v.abs()));
    assert!(scale > 0.0, "{what}: gradient is identically zero");
    for (j, (a, d)) in analytic.iter().zip(fd).enumerate() {
        let denom = a.abs().max(d.abs()).max(1e-6 * scale);
        let rel = (a - d).abs() / denom;
        assert!(
            rel <= 1e-6,
            "{what}: column {j}: analytic {a:e}, finite difference {d:e}, relative error {rel:e}"
        );
    }
}

fn rel_close(actual: f64, expected: f64, tol: f64) -> bool {
    (actual - expected).abs() <= tol * expected.abs().max(f64::MIN_POSITIVE)
}

#[test]
fn fixture_molar_masses_match_iupac_2021_atomic_weights() {
    // IUPAC 2021 abridged standard atomic weights: H 1.008, C 12.011, N 14.007, Ar 39.95.
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../tests/data/ombrask-loop.toml"
    ))
    .expect("fixture readable");
    let ombrask = parse_plant(&text).expect("fixture valid");
    let expected = [
        ("N2", 2.0 * AW_N),
        ("H2", 2.0 * AW_H),
        ("NH3", AW_N + 3.0 * AW_H),
        ("CH4", AW_C + 4.0 * AW_H),
        ("Ar", 39.95),
    ];
    for (id, m) in expected {
        let c = &ombrask.components[ombrask.component_index(id).expect(id)];
        assert!(
            (c.molar_mass - m).abs() <= 1e-3,
            "{id}: fixture {} g/mol, IUPAC sum {m} g/mol",
            c.molar_mass
        );
    }
    // The same atomic weights for the test plant of this file.
    let p = plant();
    for (id, m) in [
        ("N2", 2.0 * AW_N),
        ("H2", 2.0 * AW_H),
        ("NH3", AW_N + 3.0 * AW_H),
        ("CH4", AW_C + 4.0 * AW_H),
        ("H2O", 2.0 * AW_H + AW_O),
        ("CO", AW_C + AW_O),
    ] {
        let got = p.components[comp(&p, id)].molar_mass;
        assert!(
            (got - m).abs() <= 1e-3,
            "{id}: test plant {got} g/mol, IUPAC sum {m} g/mol"
        );
    }
}

#[test]
fn layout_counts_and_round_trip() {
    let p = plant();
    let l = Layout::new(&p);
    // Flows: feed 4, react-in 6, react-out 6, liquid 2, gas 6, purge 6, bleed 6, recycle 6.
    assert_eq!(l.extent_start, 4 + 6 + 6 + 2 + 6 + 6 + 6 + 6);
    // Two extents, then φ of purge and bleed; the last outlet (recycle) has none.
    assert_eq!(l.n, 42 + 2 + 2);
    assert!(l.split(stream(&p, "purge")).is_some());
    assert!(l.split(stream(&p, "bleed")).is_some());
    assert!(l.split(stream(&p, "recycle")).is_none());
    // Bounds: flows ≥ 0, reversible extents free, 0 ≤ φ ≤ 1.
    for i in 0..l.extent_start {
        assert_eq!((l.lower[i], l.upper[i]), (0.0, f64::INFINITY));
    }
    for r in 0..2 {
        assert_eq!(l.lower[l.extent(r)], f64::NEG_INFINITY);
    }
    for &(_, i) in &l.splits {
        assert_eq!((l.lower[i], l.upper[i]), (0.0, 1.0));
    }
    for i in 0..l.n {
        match l.var(&p, i) {
            Var::Flow { stream, component } => assert_eq!(l.flow(&p, stream, component), Some(i)),
            Var::Extent(r) => assert_eq!(l.extent(r), i),
            Var::Split(s) => assert_eq!(l.split(s), Some(i)),
        }
    }
    // Rows: 6 balances for each of the four units (every unit sees every component), plus
    // (3 − 1) outlets × 6 components of splitter rows.
    let balances = l
        .rows
        .iter()
        .filter(|r| matches!(r, Row::Balance { .. }))
        .count();
    let splits = l
        .rows
        .iter()
        .filter(|r| matches!(r, Row::Split { .. }))
        .count();
    assert_eq!((balances, splits), (24, 12));
    assert!(!l
        .rows
        .iter()
        .any(|r| matches!(r, Row::Split { outlet, .. } if *outlet == stream(&p, "recycle"))));
}

#[test]
fn irreversible_reaction_has_a_non_negative_extent() {
    let text = SMALL_PLANT.replace("key = \"N2\"", "key = \"N2\"\nirreversible = true");
    let p = parse_plant(&text).expect("valid");
    let l = Layout::new(&p);
    assert_eq!(l.lower[l.extent(reaction(&p, "ammonia"))], 0.0);
    assert_eq!(
        l.lower[l.extent(reaction(&p, "reforming"))],
        f64::NEG_INFINITY
    );
}

#[test]
fn constraint_rows_on_a_hand_set_state() {
    let p = plant();
    let l = Layout::new(&p);
    let mut z = vec![0.0; l.n];
    set_stream(
        &p,
        &l,
        &mut z,
        "react-in",
        &[("N2", 30.0), ("H2", 95.0), ("CH4", 8.0), ("H2O", 5.0)],
    );
    set_stream(
        &p,
        &l,
        &mut z,
        "react-out",
        &[("N2", 12.0), ("H2", 50.0), ("NH3", 36.0)],
    );
    set_stream(&p, &l, &mut z, "gas", &[("CH4", 40.0), ("H2", 7.0)]);
    set_stream(&p, &l, &mut z, "purge", &[("CH4", 3.0), ("H2", 0.5)]);
    let xa = l.extent(reaction(&p, "ammonia"));
    let xr = l.extent(reaction(&p, "reforming"));
    z[xa] = 17.0;
    z[xr] = 2.0;
    let phi = l.split(stream(&p, "purge")).unwrap();
    z[phi] = 0.1;

    let g = constraints(&p, &l, &z, None);
    assert_eq!(g.len(), l.rows.len());
    let react = p.units.iter().position(|u| u.id == "react").unwrap();
    let tee = p.units.iter().position(|u| u.id == "tee").unwrap();
    let row_of = |want: Row| l.rows.iter().position(|r| *r == want).expect("row exists");
    // H2 over the reactor: in − out − 3 ξ_ammonia + 3 ξ_reforming = 95 − 50 − 51 + 6 = 0.
    let h2 = row_of(Row::Balance {
        unit: react,
        component: comp(&p, "H2"),
    });
    assert!((g[h2] - 0.0).abs() < 1e-12, "{}", g[h2]);
    // N2: 30 − 12 − 17 = 1.
    let n2 = row_of(Row::Balance {
        unit: react,
        component: comp(&p, "N2"),
    });
    assert!((g[n2] - 1.0).abs() < 1e-12, "{}", g[n2]);
    // NH3: 0 − 36 + 2·17 = −2.
    let nh3 = row_of(Row::Balance {
        unit: react,
        component: comp(&p, "NH3"),
    });
    assert!((g[nh3] + 2.0).abs() < 1e-12, "{}", g[nh3]);
    // CO: 0 − 0 + 2 = 2; H2O: 5 − 0 − 2 = 3.
    let co = row_of(Row::Balance {
        unit: react,
        component: comp(&p, "CO"),
    });
    assert!((g[co] - 2.0).abs() < 1e-12, "{}", g[co]);
    let h2o = row_of(Row::Balance {
        unit: react,
        component: comp(&p, "H2O"),
    });
    assert!((g[h2o] - 3.0).abs() < 1e-12, "{}", g[h2o]);
    // Splitter row of purge, CH4: 3 − 0.1·40 = −1; H2: 0.5 − 0.7 = −0.2.
    let sp = row_of(Row::Split {
        unit: tee,
        outlet: stream(&p, "purge"),
        component: comp(&p, "CH4"),
    });
    assert!((g[sp] + 1.0).abs() < 1e-12, "{}", g[sp]);
    let sp = row_of(Row::Split {
        unit: tee,
        outlet: stream(&p, "purge"),
        component: comp(&p, "H2"),
    });
    assert!((g[sp] + 0.2).abs() < 1e-12, "{}", g[sp]);
    // Splitter balance of CH4: 40 in, 3 out by purge, nothing by the others.
    let tb = row_of(Row::Balance {
        unit: tee,
        component: comp(&p, "CH4"),
    });
    assert!((g[tb] - 37.0).abs() < 1e-12, "{}", g[tb]);
}

/// A steady state of the test plant built by hand: pick the feed, the extents and the split
/// fractions, then solve the loop component by component (the gas carries a fraction
/// 1 − φ_purge − φ_bleed back as recycle).
fn balanced_state(p: &Plant, l: &Layout) -> Vec<f64> {
    let (phi_p, phi_b) = (0.05, 0.02);
    let keep = 1.0 - phi_p - phi_b;
    let (xi_a, xi_r) = (20.0, 0.5);
    let feed = [
        ("N2", 25.0),
        ("H2", 75.0),
        ("CH4", 1.0),
        ("H2O", 3.0),
        ("NH3", 0.0),
        ("CO", 0.0),
    ];
    // Net production ν_a ξ_a + ν_r ξ_r per component, by hand from the two stoichiometries.
    let made = |c: &str| match c {
        "N2" => -xi_a,
        "H2" => -3.0 * xi_a + 3.0 * xi_r,
        "NH3" => 2.0 * xi_a,
        "CH4" | "H2O" => -xi_r,
        "CO" => xi_r,
        _ => unreachable!(),
    };
    let mut z = vec![0.0; l.n];
    for (c, f) in feed {
        // Components the liquid cannot carry all leave by purge and bleed: (φp + φb) G = F + made.
        // NH3 and water: choose the gas, the liquid takes the rest.
        let gas = match c {
            "NH3" => 10.0,
            "H2O" => 1.0,
            _ => (f + made(c)) / (phi_p + phi_b),
        };
        let rin = f + keep * gas;
        let rout = rin + made(c);
        if f != 0.0 {
            z[flow_ix(p, l, "feed", c)] = f;
        }
        z[flow_ix(p, l, "react-in", c)] = rin;
        z[flow_ix(p, l, "react-out", c)] = rout;
        z[flow_ix(p, l, "gas", c)] = gas;
        z[flow_ix(p, l, "purge", c)] = phi_p * gas;
        z[flow_ix(p, l, "bleed", c)] = phi_b * gas;
        z[flow_ix(p, l, "recycle", c)] = keep * gas;
        if c == "NH3" || c == "H2O" {
            let liquid = rout - gas;
            assert!(liquid > 0.0);
            z[flow_ix(p, l, "liquid", c)] = liquid;
        }
    }
    z[l.extent(reaction(p, "ammonia"))] = xi_a;
    z[l.extent(reaction(p, "reforming"))] = xi_r;
    z[l.split(stream(p, "purge")).unwrap()] = phi_p;
    z[l.split(stream(p, "bleed")).unwrap()] = phi_b;
    assert!(z.iter().all(|v| *v >= 0.0));
    z
}

#[test]
fn a_hand_built_steady_state_satisfies_every_row() {
    let p = plant();
    let l = Layout::new(&p);
    let z = balanced_state(&p, &l);
    let g = constraints(&p, &l, &z, None);
    for (row, v) in l.rows.iter().zip(&g) {
        assert!(v.abs() < 1e-10, "{row:?}: residual {v}");
    }
    // Perturbing one extent breaks exactly the reactor rows of its components.
    let mut z2 = z.clone();
    z2[l.extent(reaction(&p, "ammonia"))] += 1.0;
    let g2 = constraints(&p, &l, &z2, None);
    let react = p.units.iter().position(|u| u.id == "react").unwrap();
    for (row, v) in l.rows.iter().zip(&g2) {
        let expected = match *row {
            Row::Balance { unit, component } if unit == react => {
                match p.components[component].id.as_str() {
                    "N2" => -1.0,
                    "H2" => -3.0,
                    "NH3" => 2.0,
                    _ => 0.0,
                }
            }
            _ => 0.0,
        };
        assert!(
            (v - expected).abs() < 1e-10,
            "{row:?}: {v} against {expected}"
        );
    }
}

#[test]
fn constraint_jacobian_matches_central_differences() {
    let p = plant();
    let l = Layout::new(&p);
    let mut rng = ChaCha8Rng::seed_from_u64(0x6c6f_6f70);
    let mut states: Vec<Vec<f64>> = (0..25).map(|_| random_state(&p, &l, &mut rng)).collect();
    states.push(balanced_state(&p, &l));
    for z in &states {
        let mut jac = Triplets::new(l.rows.len(), l.n);
        let g = constraints(&p, &l, z, Some(&mut jac));
        // The Jacobian request does not change the values.
        assert_eq!(g, constraints(&p, &l, z, None));
        let j = jac.to_dense();
        for (ri, row) in l.rows.iter().enumerate() {
            let fd = fd_gradient(|w| constraints(&p, &l, w, None)[ri], z);
            let analytic: Vec<f64> = (0..l.n).map(|c| j[(ri, c)]).collect();
            assert_gradient_close(&format!("{row:?}"), &analytic, &fd);
        }
    }
}

#[test]
fn balance_rows_carry_the_stoichiometric_coefficients() {
    // The extent columns of the reactor's rows are exactly ν_{c,r}.
    let p = plant();
    let l = Layout::new(&p);
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let z = random_state(&p, &l, &mut rng);
    let mut jac = Triplets::new(l.rows.len(), l.n);
    constraints(&p, &l, &z, Some(&mut jac));
    let j = jac.to_dense();
    let react = p.units.iter().position(|u| u.id == "react").unwrap();
    let (a, r) = (
        l.extent(reaction(&p, "ammonia")),
        l.extent(reaction(&p, "reforming")),
    );
    let nu = |c: &str| match c {
        "N2" => (-1.0, 0.0),
        "H2" => (-3.0, 3.0),
        "NH3" => (2.0, 0.0),
        "CH4" | "H2O" => (0.0, -1.0),
        "CO" => (0.0, 1.0),
        _ => unreachable!(),
    };
    let mut seen = 0;
    for (ri, row) in l.rows.iter().enumerate() {
        if let Row::Balance { unit, component } = *row {
            if unit == react {
                seen += 1;
                assert_eq!(
                    (j[(ri, a)], j[(ri, r)]),
                    nu(&p.components[component].id),
                    "{row:?}"
                );
            } else {
                assert_eq!((j[(ri, a)], j[(ri, r)]), (0.0, 0.0), "{row:?}");
            }
        }
    }
    assert_eq!(seen, 6);
}

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
