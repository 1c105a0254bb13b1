//! The Vantle Cross VC-3 methanol loop of `tests/data/vantle-methanol.toml` with a known true
//! state: operating conditions and the steady state they give, by successive substitution
//! around the recycle (independent of the engine's simulator).

use reconcile::equations::Layout;
use reconcile::Plant;

/// Component order of the Vantle model.
const CO: usize = 0;
const CO2: usize = 1;
const H2: usize = 2;
const MEOH: usize = 3;
const H2O: usize = 4;
const CH4: usize = 5;

/// Operating conditions that fix the Vantle loop's steady state.
#[derive(Debug, Clone, Copy)]
pub struct VantleConditions {
    /// Makeup syngas, kmol/h of CO, CO2, H2, CH4.
    pub makeup: [f64; 4],
    /// CO2 side feed, kmol/h.
    pub co2_feed: f64,
    /// Single-pass conversion of CO and of CO2 in the converter (of the converter feed).
    pub conversion: [f64; 2],
    /// Share of each component of the flash feed that leaves with the crude, in model
    /// component order (CO and H2 stay in the gas).
    pub flash_recovery: [f64; 6],
    /// Share of the crude's CO2 that flashes off in the let-down vessel (all its CH4 does).
    pub letdown_co2: f64,
    /// Share of the flash gas that is purged.
    pub purge_fraction: f64,
}

impl Default for VantleConditions {
    fn default() -> Self {
        VantleConditions {
            makeup: [1650.0, 720.0, 7350.0, 280.0],
            co2_feed: 110.0,
            conversion: [0.42, 0.16],
            flash_recovery: [0.0, 0.035, 0.0, 0.965, 0.99, 0.006],
            letdown_co2: 0.7,
            purge_fraction: 0.045,
        }
    }
}

/// The Vantle loop's true steady state in the model's layout, by successive substitution
/// around the recycle until the recycle stops changing (to 1e-14 relative).
pub fn vantle_true_state(plant: &Plant, layout: &Layout, k: &VantleConditions) -> Vec<f64> {
    // Stoichiometry of CO + 2 H2 → CH3OH and CO2 + 3 H2 → CH3OH + H2O.
    let nu = [
        [-1.0, 0.0, -2.0, 1.0, 0.0, 0.0],
        [0.0, -1.0, -3.0, 1.0, 1.0, 0.0],
    ];
    let makeup = [k.makeup[0], k.makeup[1], k.makeup[2], 0.0, 0.0, k.makeup[3]];
    let mut fresh = makeup;
    fresh[CO2] += k.co2_feed;
    let mut recycle = [0.0; 6];
    let (mut feed, mut out, mut crude, mut gas, mut xi) =
        ([0.0; 6], [0.0; 6], [0.0; 6], [0.0; 6], [0.0; 2]);
    for _ in 0..200_000 {
        for c in 0..6 {
            feed[c] = fresh[c] + recycle[c];
        }
        xi = [k.conversion[0] * feed[CO], k.conversion[1] * feed[CO2]];
        for c in 0..6 {
            out[c] = feed[c] + nu[0][c] * xi[0] + nu[1][c] * xi[1];
            crude[c] = k.flash_recovery[c] * out[c];
            gas[c] = out[c] - crude[c];
        }
        let mut change: f64 = 0.0;
        for c in 0..6 {
            let next = (1.0 - k.purge_fraction) * gas[c];
            change = change.max((next - recycle[c]).abs() / (1.0 + next.abs()));
            recycle[c] = next;
        }
        if change < 1e-14 {
            break;
        }
    }
    let purge = gas.map(|g| k.purge_fraction * g);
    let mut letdown_gas = [0.0; 6];
    letdown_gas[CO2] = k.letdown_co2 * crude[CO2];
    letdown_gas[CH4] = crude[CH4];
    let mut product = [0.0; 6];
    product[CO2] = crude[CO2] - letdown_gas[CO2];
    product[MEOH] = crude[MEOH];
    product[H2O] = crude[H2O];
    let mut co2_feed = [0.0; 6];
    co2_feed[CO2] = k.co2_feed;
    let _ = H2;
    let flows: [(&str, [f64; 6]); 15] = [
        ("makeup", makeup),
        ("co2-feed", co2_feed),
        ("fresh-gas", fresh),
        ("loop-gas", feed),
        ("conv-feed", feed),
        ("conv-out", out),
        ("interchanger-out", out),
        ("flash-feed", out),
        ("crude", crude),
        ("flash-gas", gas),
        ("purge", purge),
        ("loop-return", recycle),
        ("recycle", recycle),
        ("letdown-gas", letdown_gas),
        ("crude-product", product),
    ];
    let mut z = vec![0.0; layout.n];
    for (id, f) in flows {
        let s = plant.stream_index(id).expect("stream of the Vantle model");
        for &c in &plant.streams[s].components {
            z[layout.flow(plant, s, c).expect("carried")] = f[c];
        }
    }
    z[layout.extent(0)] = xi[0];
    z[layout.extent(1)] = xi[1];
    let purge_stream = plant.stream_index("purge").expect("purge stream");
    z[layout
        .split(purge_stream)
        .expect("purge is the first outlet")] = k.purge_fraction;
    z
}
