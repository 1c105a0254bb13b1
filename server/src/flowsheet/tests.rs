//! The layout's rules, on the demo loop and on generated networks with many recycles.

use super::*;

fn demo() -> Plant {
    // The demo's model, read as a file (the layout depends on no part of the demo).
    let spec = reconcile::ModelSpec::from_toml(include_str!("../demo/plant.toml")).expect("model");
    Plant::new(spec).expect("the demo plant")
}

/// The distance from `p` to the polyline.
fn off_path(points: &[[f64; 2]], p: [f64; 2]) -> f64 {
    points
        .windows(2)
        .map(|w| {
            let (a, b) = (w[0], w[1]);
            let len2 = (b[0] - a[0]).powi(2) + (b[1] - a[1]).powi(2);
            let t = match len2 > 0.0 {
                true => (((p[0] - a[0]) * (b[0] - a[0]) + (p[1] - a[1]) * (b[1] - a[1])) / len2)
                    .clamp(0.0, 1.0),
                false => 0.0,
            };
            distance(p, [a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1])])
        })
        .fold(f64::INFINITY, f64::min)
}

/// What every drawing must satisfy: each unit once; boxes apart; each stream from its
/// source's right side to its target's left side; forward streams left to right, in
/// right-angled steps; recycles below every box; meters on their streams; all inside.
fn check(plant: &Plant, f: &Flowsheet) {
    assert_eq!(f.units.len(), plant.units.len());
    for (u, unit) in plant.units.iter().enumerate() {
        assert_eq!(f.units[u].id, unit.id);
    }
    for (i, a) in f.units.iter().enumerate() {
        for b in &f.units[i + 1..] {
            let apart =
                a.x + a.w <= b.x || b.x + b.w <= a.x || a.y + a.h <= b.y || b.y + b.h <= a.y;
            assert!(apart, "{} and {} overlap", a.id, b.id);
        }
    }
    for t in &f.terminals {
        for u in &f.units {
            let apart = t.x + TERMINAL / 2.0 <= u.x
                || u.x + u.w <= t.x - TERMINAL / 2.0
                || t.y + TERMINAL / 2.0 <= u.y
                || u.y + u.h <= t.y - TERMINAL / 2.0;
            assert!(apart, "{} and {} overlap", t.id, u.id);
        }
    }
    let lowest = f.units.iter().map(|u| u.y + u.h).fold(0.0, f64::max);
    let unit = |id: &str| f.units.iter().find(|u| u.id == id);
    let terminal = |id: &str| f.terminals.iter().find(|t| t.id == id);
    assert_eq!(f.streams.len(), plant.streams.len());
    for (s, path) in f.streams.iter().enumerate() {
        let stream = &plant.streams[s];
        assert_eq!(path.id, stream.id);
        let (first, last) = (path.points[0], *path.points.last().unwrap());
        let (out_x, in_x) = match (unit(&path.from), unit(&path.to)) {
            (Some(a), Some(b)) => (a.x + a.w, b.x),
            (None, Some(b)) => (terminal(&path.from).expect("feed").x + TERMINAL / 2.0, b.x),
            (Some(a), None) => (
                a.x + a.w,
                terminal(&path.to).expect("product").x - TERMINAL / 2.0,
            ),
            (None, None) => panic!("{}: a stream from outside to outside", path.id),
        };
        assert!(
            (first[0] - out_x).abs() < 1e-9,
            "{} leaves its source",
            path.id
        );
        assert!(
            (last[0] - in_x).abs() < 1e-9,
            "{} enters its target",
            path.id
        );
        for w in path.points.windows(2) {
            let straight = (w[0][0] - w[1][0]).abs() < 1e-9 || (w[0][1] - w[1][1]).abs() < 1e-9;
            assert!(straight, "{}: a slanted step {:?}", path.id, w);
        }
        if path.recycle {
            assert!(
                path.points.iter().any(|p| p[1] > lowest),
                "{} loops below",
                path.id
            );
        } else {
            assert!(
                path.points.windows(2).all(|w| w[1][0] >= w[0][0] - 1e-9),
                "{}",
                path.id
            );
        }
        for p in &path.points {
            assert!(p[0] >= 0.0 && p[0] <= f.width && p[1] >= 0.0 && p[1] <= f.height);
        }
    }
    assert_eq!(f.meters.len(), plant.spec.meters.len());
    for m in &f.meters {
        let path = f
            .streams
            .iter()
            .find(|p| p.id == m.stream)
            .expect("its stream");
        assert!(
            off_path(&path.points, [m.x, m.y]) < 1e-6,
            "{} is on {}",
            m.tag,
            m.stream
        );
    }
}

#[test]
fn the_demo_loop_draws_along_the_flow_with_its_recycle_as_a_loop_back() {
    let plant = demo();
    let f = layout(&plant, 3);
    check(&plant, &f);
    assert_eq!(f.revision, 3);
    let recycles: Vec<&str> = f
        .streams
        .iter()
        .filter(|s| s.recycle)
        .map(|s| s.id.as_str())
        .collect();
    assert_eq!(
        recycles,
        ["recycle"],
        "one cycle, closed by the stream back to the mixer"
    );
    let layer = |id: &str| f.units.iter().find(|u| u.id == id).unwrap().layer;
    let along = [
        "loop-mix",
        "converter",
        "cooler",
        "flash",
        "purge-split",
        "circulator",
    ];
    for pair in along.windows(2) {
        assert_eq!(layer(pair[1]), layer(pair[0]) + 1, "{pair:?}");
    }
    let kinds: Vec<(&str, &str)> = f
        .terminals
        .iter()
        .map(|t| (t.stream.as_str(), t.kind.as_str()))
        .collect();
    assert_eq!(
        kinds,
        [
            ("syngas", "feed"),
            ("crude", "product"),
            ("purge", "product")
        ]
    );
    // The main line is straight: the mixer to the flash at one height.
    let y = |id: &str| {
        let u = f.units.iter().find(|u| u.id == id).unwrap();
        u.y
    };
    assert!(["converter", "cooler", "flash"]
        .iter()
        .all(|u| y(u) == y("loop-mix")));
}

#[test]
fn the_same_model_gives_the_same_drawing() {
    let a = layout(&demo(), 1);
    let b = layout(&demo(), 1);
    assert_eq!(a, b);
    let text = |f: &Flowsheet| serde_json::to_string(f).unwrap();
    assert_eq!(text(&a), text(&b));
}

#[test]
fn generated_networks_with_many_recycles_draw_within_the_rules() {
    for (streams, seed) in [(100, 11), (250, 5), (500, 2)] {
        let net = testkit::network::network(streams, seed);
        let f = layout(&net.plant, 1);
        check(&net.plant, &f);
        assert!(
            f.streams.iter().any(|s| s.recycle),
            "{streams}: the network has recycles"
        );
        assert_eq!(f, layout(&net.plant, 1));
    }
}
