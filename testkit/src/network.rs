//! Generated networks of any size for scaling measurements: a long chain of cells, each a
//! mixer, a node and a splitter. Every third cell takes a fresh feed of its own composition;
//! most splitters draw a small product off the plant, every eighth sends a recycle back to the
//! mixer four cells upstream. Eight components throughout.
//!
//! Meters: every feed has a flow meter and analysers on seven of its eight components; the
//! node outlet and every splitter outlet carry a flow meter (some molar, some mass, some
//! standard volume), the mixer outlet has one in two cells of three, the main splitter outlet in
//! three of four, and every fifth node outlet has an analyser. Every stream flow is then
//! observable, and the redundancy comes from the flow meters around the nodes and splitters.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use reconcile::equations::Layout;
use reconcile::model::{
    ComponentSpec, MeterSpec, ModelSpec, Quantity, StreamSpec, UnitKind, UnitSpec,
};
use reconcile::Plant;

pub const COMPONENTS: usize = 8;
const MOLAR_MASS: [f64; COMPONENTS] = [
    2.016, 16.043, 28.010, 30.069, 32.042, 44.009, 58.122, 72.149,
];
/// A recycle leaves every RECYCLE_EVERY-th cell for the mixer RECYCLE_BACK cells upstream.
const RECYCLE_EVERY: usize = 8;
const RECYCLE_BACK: usize = 4;

/// A generated plant and its true state.
pub struct Network {
    /// The model as written (for a service's store, which keeps the model file).
    pub spec: ModelSpec,
    pub plant: Plant,
    pub layout: Layout,
    pub z: Vec<f64>,
}

fn has_feed(k: usize) -> bool {
    k.is_multiple_of(3)
}

fn has_recycle(k: usize) -> bool {
    k % RECYCLE_EVERY == RECYCLE_EVERY - 1 && k >= RECYCLE_BACK
}

fn streams_per_cell(k: usize) -> usize {
    4 + usize::from(has_feed(k))
}

/// A network of about `streams` streams (the exact count is `plant.streams.len()`), from `seed`.
pub fn network(streams: usize, seed: u64) -> Network {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut cells = 0;
    let mut count = 0;
    while count < streams {
        count += streams_per_cell(cells);
        cells += 1;
    }

    let mut spec = ModelSpec {
        name: format!("generated-{streams}"),
        period: "1h".into(),
        alpha: 0.05,
        components: (0..COMPONENTS)
            .map(|c| ComponentSpec {
                id: format!("K{c}"),
                molar_mass: MOLAR_MASS[c],
                inert: false,
            })
            .collect(),
        units: Vec::new(),
        reactions: Vec::new(),
        streams: Vec::new(),
        meters: Vec::new(),
    };
    let stream = |id: String, from: String, to: String| StreamSpec {
        id,
        from,
        to,
        components: None,
    };
    let meter = |tag: String,
                 stream: &str,
                 quantity: Quantity,
                 component: Option<usize>,
                 uom: &str,
                 sigma: Option<f64>,
                 sigma_pct: Option<f64>| MeterSpec {
        tag,
        stream: stream.to_string(),
        quantity,
        component: component.map(|c| format!("K{c}")),
        basis: None,
        uom: uom.into(),
        sigma,
        sigma_pct,
        sigma_pct_span: None,
        range: None,
    };

    // True values: feed component flows, split fraction of each splitter's main outlet.
    let mut feed = vec![[0.0; COMPONENTS]; cells];
    let mut phi = vec![0.0; cells];
    for k in 0..cells {
        spec.units.push(UnitSpec {
            id: format!("m{k}"),
            kind: UnitKind::Mixer,
        });
        spec.units.push(UnitSpec {
            id: format!("n{k}"),
            kind: UnitKind::Node,
        });
        spec.units.push(UnitSpec {
            id: format!("s{k}"),
            kind: UnitKind::Splitter,
        });
        if has_feed(k) {
            let total = rng.gen_range(80.0..120.0);
            let w: Vec<f64> = (0..COMPONENTS).map(|_| rng.gen_range(0.2..1.0)).collect();
            let sum: f64 = w.iter().sum();
            for c in 0..COMPONENTS {
                feed[k][c] = total * w[c] / sum;
            }
            spec.streams.push(stream(
                format!("feed{k}"),
                "outside".into(),
                format!("m{k}"),
            ));
            let id = format!("feed{k}");
            spec.meters.push(meter(
                format!("FI-{k}-0"),
                &id,
                Quantity::MolarFlow,
                None,
                "kmol/h",
                None,
                Some(1.0),
            ));
            for c in 0..COMPONENTS - 1 {
                spec.meters.push(meter(
                    format!("AI-{k}-0-{c}"),
                    &id,
                    Quantity::MoleFraction,
                    Some(c),
                    "%",
                    Some(0.1),
                    None,
                ));
            }
        }
        spec.streams
            .push(stream(format!("a{k}"), format!("m{k}"), format!("n{k}")));
        if k % 3 != 1 {
            spec.meters.push(meter(
                format!("FI-{k}-1"),
                &format!("a{k}"),
                Quantity::MassFlow,
                None,
                "kg/h",
                None,
                Some(1.0),
            ));
        }
        spec.streams
            .push(stream(format!("b{k}"), format!("n{k}"), format!("s{k}")));
        spec.meters.push(meter(
            format!("FI-{k}-2"),
            &format!("b{k}"),
            Quantity::MolarFlow,
            None,
            "kmol/h",
            None,
            Some(1.0),
        ));
        if k % 5 == 0 {
            spec.meters.push(meter(
                format!("AI-{k}-2"),
                &format!("b{k}"),
                Quantity::MoleFraction,
                Some(k % COMPONENTS),
                "%",
                Some(0.1),
                None,
            ));
        }
        let next = if k + 1 < cells {
            format!("m{}", k + 1)
        } else {
            "outside".into()
        };
        spec.streams
            .push(stream(format!("main{k}"), format!("s{k}"), next));
        if k % 4 != 2 {
            spec.meters.push(meter(
                format!("FI-{k}-3"),
                &format!("main{k}"),
                Quantity::MolarFlow,
                None,
                "kmol/h",
                None,
                Some(1.5),
            ));
        }
        if has_recycle(k) {
            phi[k] = rng.gen_range(0.6..0.8);
            spec.streams.push(stream(
                format!("rec{k}"),
                format!("s{k}"),
                format!("m{}", k - RECYCLE_BACK),
            ));
            spec.meters.push(meter(
                format!("FI-{k}-4"),
                &format!("rec{k}"),
                Quantity::StdVolumeFlow,
                None,
                "Nm3/h",
                None,
                Some(1.5),
            ));
        } else {
            phi[k] = rng.gen_range(0.9..0.96);
            spec.streams.push(stream(
                format!("prod{k}"),
                format!("s{k}"),
                "outside".into(),
            ));
            spec.meters.push(meter(
                format!("FI-{k}-4"),
                &format!("prod{k}"),
                Quantity::MolarFlow,
                None,
                "kmol/h",
                None,
                Some(1.5),
            ));
        }
    }
    let plant = Plant::new(spec.clone()).expect("generated model is valid");
    let layout = Layout::new(&plant);

    // True state by Gauss–Seidel sweeps down the chain until the recycles stop changing.
    let mut b = vec![[0.0; COMPONENTS]; cells];
    for _ in 0..10_000 {
        let mut change: f64 = 0.0;
        for k in 0..cells {
            let mut inflow = feed[k];
            for c in 0..COMPONENTS {
                if k > 0 {
                    inflow[c] += phi[k - 1] * b[k - 1][c];
                }
                if has_recycle(k + RECYCLE_BACK) && k + RECYCLE_BACK < cells {
                    inflow[c] += (1.0 - phi[k + RECYCLE_BACK]) * b[k + RECYCLE_BACK][c];
                }
                change = change.max((inflow[c] - b[k][c]).abs() / (1.0 + inflow[c]));
            }
            b[k] = inflow;
        }
        if change < 1e-15 {
            break;
        }
    }
    let mut z = vec![0.0; layout.n];
    let set = |id: String, f: &[f64; COMPONENTS], z: &mut Vec<f64>| {
        let s = plant.stream_index(&id).expect("generated stream");
        for c in 0..COMPONENTS {
            z[layout.flow(&plant, s, c).expect("carried")] = f[c];
        }
    };
    for k in 0..cells {
        if has_feed(k) {
            set(format!("feed{k}"), &feed[k], &mut z);
        }
        set(format!("a{k}"), &b[k], &mut z);
        set(format!("b{k}"), &b[k], &mut z);
        set(format!("main{k}"), &b[k].map(|x| phi[k] * x), &mut z);
        let second = if has_recycle(k) {
            format!("rec{k}")
        } else {
            format!("prod{k}")
        };
        set(second, &b[k].map(|x| (1.0 - phi[k]) * x), &mut z);
        let main = plant
            .stream_index(&format!("main{k}"))
            .expect("main stream");
        z[layout.split(main).expect("main is the first outlet")] = phi[k];
    }
    Network {
        spec,
        plant,
        layout,
        z,
    }
}

/// The `nth` flow meter (no component) on a stream past the middle of the chain: where the
/// tests and the benchmarks put a gross error, away from the feeds at both ends.
pub fn middle_flow_meter(plant: &Plant, nth: usize) -> usize {
    (0..plant.meters.len())
        .filter(|&k| {
            plant.meters[k].component.is_none() && plant.meters[k].stream > plant.streams.len() / 2
        })
        .nth(nth)
        .expect("a generated network has flow meters past its middle")
}

/// The values with `sigmas` times its σ added to the value of meter `k`.
pub fn with_gross_error(
    plant: &Plant,
    mut values: Vec<reconcile::period::MeterValue>,
    k: usize,
    sigmas: f64,
) -> Vec<reconcile::period::MeterValue> {
    let v = values
        .iter_mut()
        .find(|v| v.meter == k)
        .expect("the meter has a value");
    v.value += sigmas * plant.meters[k].sigma_for(v.value).expect("positive σ");
    values
}
