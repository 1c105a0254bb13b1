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
const SMALL_PLANT: &str = include_str!("small_plant.toml");

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

mod measurements;
