//! The loop drawn from its model: a layered layout computed here so that the same model always
//! gives the same picture, whichever browser draws it. Units and the plant's feeds and
//! products are placed in columns (layers) left to right along the flow; a stream that goes
//! back against the flow (a recycle) is routed as a loop below the drawing, each in its own
//! lane. The method is the usual one for layered drawings of directed graphs (Sugiyama,
//! Tagawa & Toda, 1981): break the cycles, assign layers by longest path, put a waypoint in
//! every layer a long stream crosses, order each layer by the barycentre of its neighbours
//! (a few sweeps down and up, ties kept in model order), then place.
//!
//! Coordinates are SVG user units, y downwards; a unit's `x, y` is its top-left corner.

use std::collections::BTreeMap;

use reconcile::Plant;
use serde::Serialize;
use utoipa::ToSchema;

/// Least horizontal gap between two adjacent layers (room for a stream's label).
const LAYER_GAP: f64 = 154.0;
/// Distance along a stream between two of its meters (the gap widens to keep it).
const METER_SPACING: f64 = 48.0;
/// Vertical distance between the centres of two nodes of a layer.
const ROW_PITCH: f64 = 130.0;
const UNIT_W: f64 = 96.0;
const UNIT_H: f64 = 60.0;
/// A feed or product terminal and a stream's waypoint are drawn at their centre.
const TERMINAL: f64 = 16.0;
const MARGIN: f64 = 48.0;
/// Distance between two recycle lanes below the drawing.
const LANE_PITCH: f64 = 36.0;
/// Barycentre sweeps (each one down and one up).
const SWEEPS: usize = 6;

/// The layout of one model revision's flowsheet.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Flowsheet {
    pub plant: String,
    pub revision: i64,
    pub width: f64,
    pub height: f64,
    pub units: Vec<UnitBox>,
    pub terminals: Vec<Terminal>,
    pub streams: Vec<StreamPath>,
    pub meters: Vec<MeterMark>,
}

/// A unit's box.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct UnitBox {
    pub id: String,
    /// `mixer`, `splitter`, `reactor`, `separator` or `node`.
    pub kind: String,
    /// The column, 0 at the feeds.
    pub layer: usize,
    pub x: f64,
    pub y: f64,
    pub w: f64,
    pub h: f64,
}

/// Where a stream enters or leaves the plant (its centre).
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Terminal {
    /// `in:STREAM` or `out:STREAM`.
    pub id: String,
    pub stream: String,
    /// `feed` or `product`.
    pub kind: String,
    pub x: f64,
    pub y: f64,
}

/// A stream's polyline from its source to its target.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct StreamPath {
    pub id: String,
    /// The unit it leaves, or `in:STREAM` for a feed.
    pub from: String,
    /// The unit it enters, or `out:STREAM` for a product.
    pub to: String,
    /// It runs against the flow, back to an earlier layer (or to its own unit).
    pub recycle: bool,
    pub points: Vec<[f64; 2]>,
    /// Where its label goes: above the middle of its longest horizontal run.
    pub label: [f64; 2],
}

/// A meter on its stream.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct MeterMark {
    pub tag: String,
    pub stream: String,
    pub quantity: String,
    pub component: Option<String>,
    pub x: f64,
    pub y: f64,
}

/// A node of the graph laid out: a unit, a terminal, or a waypoint of a long stream.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Node {
    Unit(usize),
    Feed(usize),
    Product(usize),
    /// Stream `.0`'s waypoint in layer `.1`.
    Waypoint(usize, usize),
}

/// The layout of `plant` (model revision `revision`).
pub fn layout(plant: &Plant, revision: i64) -> Flowsheet {
    let graph = Graph::of(plant);
    let layers = graph.layers();
    let mut columns = graph.columns(&layers);
    graph.order(&mut columns);
    let ys = place(&graph, &columns);
    graph.drawing(plant, revision, &columns, &ys)
}

/// Nodes and their edges, as stream indices, with the recycles found.
struct Graph {
    nodes: Vec<Node>,
    /// Per stream: (source node, target node).
    ends: Vec<(usize, usize)>,
    /// Per stream: it closes a cycle (found by a depth-first search from the feeds).
    recycle: Vec<bool>,
}

impl Graph {
    fn of(plant: &Plant) -> Graph {
        let mut nodes: Vec<Node> = (0..plant.units.len()).map(Node::Unit).collect();
        let mut ends = Vec::with_capacity(plant.streams.len());
        for (s, stream) in plant.streams.iter().enumerate() {
            let from = match stream.from {
                Some(u) => u,
                None => {
                    nodes.push(Node::Feed(s));
                    nodes.len() - 1
                }
            };
            let to = match stream.to {
                Some(u) => u,
                None => {
                    nodes.push(Node::Product(s));
                    nodes.len() - 1
                }
            };
            ends.push((from, to));
        }
        let mut graph = Graph {
            nodes,
            ends,
            recycle: vec![false; plant.streams.len()],
        };
        graph.find_recycles();
        graph
    }

    /// Streams out of node `n`, in model order.
    fn out_of(&self, n: usize) -> impl Iterator<Item = usize> + '_ {
        (0..self.ends.len()).filter(move |&s| self.ends[s].0 == n)
    }

    /// Depth-first from the feeds in model order, then from any unit not reached: a stream
    /// to a node on the current path closes a cycle and is a recycle.
    fn find_recycles(&mut self) {
        #[derive(Clone, Copy, PartialEq)]
        enum Mark {
            New,
            OnPath,
            Done,
        }
        let mut mark = vec![Mark::New; self.nodes.len()];
        let feeds = (0..self.nodes.len()).filter(|&n| matches!(self.nodes[n], Node::Feed(_)));
        let roots: Vec<usize> = feeds.chain(0..self.nodes.len()).collect();
        for root in roots {
            if mark[root] != Mark::New {
                continue;
            }
            // An explicit stack of (node, its outgoing streams still to follow).
            let mut stack: Vec<(usize, Vec<usize>)> = vec![(root, self.out_of(root).collect())];
            mark[root] = Mark::OnPath;
            while let Some((node, pending)) = stack.last_mut() {
                let node = *node;
                if pending.is_empty() {
                    mark[node] = Mark::Done;
                    stack.pop();
                    continue;
                }
                let s = pending.remove(0);
                let to = self.ends[s].1;
                match mark[to] {
                    Mark::OnPath => self.recycle[s] = true,
                    Mark::Done => {}
                    Mark::New => {
                        mark[to] = Mark::OnPath;
                        stack.push((to, self.out_of(to).collect()));
                    }
                }
            }
        }
    }

    /// Each node's layer: the longest path to it from a node without forward inlets.
    fn layers(&self) -> Vec<usize> {
        let n = self.nodes.len();
        let forward: Vec<usize> = (0..self.ends.len()).filter(|&s| !self.recycle[s]).collect();
        let mut indegree = vec![0usize; n];
        for &s in &forward {
            indegree[self.ends[s].1] += 1;
        }
        let mut layer = vec![0usize; n];
        let mut ready: Vec<usize> = (0..n).filter(|&v| indegree[v] == 0).collect();
        let mut next = 0;
        // Kahn's order; the forward streams form no cycle, so every node is reached.
        while next < ready.len() {
            let v = ready[next];
            next += 1;
            for &s in forward.iter().filter(|&&s| self.ends[s].0 == v) {
                let to = self.ends[s].1;
                layer[to] = layer[to].max(layer[v] + 1);
                indegree[to] -= 1;
                if indegree[to] == 0 {
                    ready.push(to);
                }
            }
        }
        // A feed sits just before the unit it feeds; a product just after its source.
        for (s, &(from, to)) in self.ends.iter().enumerate() {
            if let Node::Feed(_) = self.nodes[from] {
                layer[from] = layer[to].saturating_sub(1);
            }
            if let Node::Product(_) = self.nodes[to] {
                if !self.recycle[s] {
                    layer[to] = layer[from] + 1;
                }
            }
        }
        layer
    }

    /// The nodes of each layer, with a waypoint in every layer a forward stream crosses, in
    /// first-seen order (model order of units, then terminals, then waypoints).
    fn columns(&self, layers: &[usize]) -> Columns {
        let count = layers.iter().max().map_or(1, |m| m + 1);
        let mut columns = Columns {
            nodes: self.nodes.clone(),
            layer: layers.to_vec(),
            of_layer: vec![Vec::new(); count],
            chains: Vec::with_capacity(self.ends.len()),
        };
        for (v, &l) in layers.iter().enumerate() {
            columns.of_layer[l].push(v);
        }
        for (s, &(from, to)) in self.ends.iter().enumerate() {
            let mut chain = vec![from];
            if !self.recycle[s] {
                for l in layers[from] + 1..layers[to] {
                    columns.nodes.push(Node::Waypoint(s, l));
                    columns.layer.push(l);
                    let w = columns.nodes.len() - 1;
                    columns.of_layer[l].push(w);
                    chain.push(w);
                }
            }
            chain.push(to);
            columns.chains.push(chain);
        }
        columns
    }

    /// Order each layer by the barycentre of its neighbours' positions in the layer before
    /// (sweeping right) or after (sweeping left); a node without such neighbours keeps its
    /// place. Sorting is stable, so ties keep their order and the result is deterministic.
    fn order(&self, columns: &mut Columns) {
        let edges = columns.edges(self);
        for _ in 0..SWEEPS {
            for l in 1..columns.of_layer.len() {
                columns.sort_layer(l, &edges, true);
            }
            for l in (0..columns.of_layer.len().saturating_sub(1)).rev() {
                columns.sort_layer(l, &edges, false);
            }
        }
    }

    fn drawing(&self, plant: &Plant, revision: i64, columns: &Columns, ys0: &[f64]) -> Flowsheet {
        // Each gap between layers wide enough for the meters of the streams that cross it.
        let mut gaps = vec![LAYER_GAP; columns.of_layer.len()];
        for (s, chain) in columns.chains.iter().enumerate() {
            let (from, to) = (chain[0], *chain.last().expect("two ends"));
            let (a, b) = (columns.layer[from], columns.layer[to]);
            if self.recycle[s] || b <= a {
                continue;
            }
            let meters = plant
                .spec
                .meters
                .iter()
                .filter(|m| m.stream == plant.streams[s].id);
            let per_gap = meters.count().div_ceil(b - a);
            for gap in &mut gaps[a..b] {
                *gap = gap.max(METER_SPACING * (per_gap as f64 + 1.0));
            }
        }
        let mut layer_x = vec![MARGIN; columns.of_layer.len()];
        for l in 1..layer_x.len() {
            layer_x[l] = layer_x[l - 1] + UNIT_W + gaps[l - 1];
        }
        let x_of = |v: usize| layer_x[columns.layer[v]];
        let size = |v: usize| match columns.nodes[v] {
            Node::Unit(_) => (UNIT_W, UNIT_H),
            _ => (TERMINAL, TERMINAL),
        };
        // Ports: a node's streams leave (and enter) at heights spread over its side, in the
        // order of the nodes they lead to (or come from), so that they do not cross there.
        let port = |v: usize, streams: &[usize], s: usize| {
            let k = streams.len();
            let i = streams.iter().position(|&t| t == s).unwrap_or(0);
            let (_, h) = size(v);
            ys0[v] + (i as f64 + 1.0) / (k as f64 + 1.0) * h - h / 2.0
        };
        let name = |v: usize| match columns.nodes[v] {
            Node::Unit(u) => plant.units[u].id.clone(),
            Node::Feed(s) => format!("in:{}", plant.streams[s].id),
            Node::Product(s) => format!("out:{}", plant.streams[s].id),
            Node::Waypoint(..) => unreachable!("a waypoint ends no stream"),
        };
        let mut outs: BTreeMap<usize, Vec<usize>> = BTreeMap::new();
        let mut ins: BTreeMap<usize, Vec<usize>> = BTreeMap::new();
        for (s, chain) in columns.chains.iter().enumerate() {
            outs.entry(chain[0]).or_default().push(s);
            ins.entry(*chain.last().expect("a chain has two ends"))
                .or_default()
                .push(s);
        }
        // Each side's streams by the height of the node they lead to (out) or come from
        // (in); recycles, which go round below, last.
        let by_height = |list: &mut Vec<usize>, step: &dyn Fn(&[usize]) -> usize| {
            let key = |s: usize| match self.recycle[s] {
                true => f64::INFINITY,
                false => ys0[step(&columns.chains[s])],
            };
            list.sort_by(|&a, &b| key(a).total_cmp(&key(b)).then(a.cmp(&b)));
        };
        for list in outs.values_mut() {
            by_height(list, &|chain| chain[1]);
        }
        for list in ins.values_mut() {
            by_height(list, &|chain| chain[chain.len() - 2]);
        }

        // A feed or product terminal in its unit's row sits level with the stream's port on
        // the unit, so that the stream runs straight.
        let mut ys = ys0.to_vec();
        let level = |a: usize, b: usize| (ys0[a] - ys0[b]).abs() < ROW_PITCH / 2.0;
        for (s, chain) in columns.chains.iter().enumerate() {
            let (from, to) = (chain[0], *chain.last().expect("two ends"));
            if chain.len() != 2 || self.recycle[s] || !level(from, to) {
                continue;
            }
            match (columns.nodes[from], columns.nodes[to]) {
                (Node::Feed(_), _) => ys[from] = port(to, &ins[&to], s),
                (_, Node::Product(_)) => ys[to] = port(from, &outs[&from], s),
                _ => {}
            }
        }
        let ys = &ys;
        // Where a stream leaves or enters a node: a unit's spread ports, a terminal's centre.
        let port = |v: usize, streams: &[usize], s: usize| match columns.nodes[v] {
            Node::Unit(_) => port(v, streams, s),
            _ => ys[v],
        };
        // The node's centre, and where streams leave (right edge) and enter (left edge).
        let centre = |v: usize| {
            let (w, _) = size(v);
            let left = x_of(v) + (UNIT_W - w) / 2.0;
            (left + w / 2.0, ys[v])
        };
        let right = |v: usize| centre(v).0 + size(v).0 / 2.0;
        let left = |v: usize| centre(v).0 - size(v).0 / 2.0;
        let bottom = ys.iter().copied().fold(MARGIN, f64::max) + UNIT_H / 2.0;

        let mut units = Vec::new();
        let mut terminals = Vec::new();
        for (v, node) in columns.nodes.iter().enumerate() {
            let (cx, cy) = centre(v);
            match *node {
                Node::Unit(u) => units.push(UnitBox {
                    id: plant.units[u].id.clone(),
                    kind: plant.units[u].kind.to_string(),
                    layer: columns.layer[v],
                    x: cx - UNIT_W / 2.0,
                    y: cy - UNIT_H / 2.0,
                    w: UNIT_W,
                    h: UNIT_H,
                }),
                Node::Feed(s) | Node::Product(s) => {
                    let (prefix, kind) = match node {
                        Node::Feed(_) => ("in", "feed"),
                        _ => ("out", "product"),
                    };
                    terminals.push(Terminal {
                        id: format!("{prefix}:{}", plant.streams[s].id),
                        stream: plant.streams[s].id.clone(),
                        kind: kind.to_string(),
                        x: cx,
                        y: cy,
                    })
                }
                Node::Waypoint(..) => {}
            }
        }

        let mut streams = Vec::new();
        let mut lane = 0usize;
        for (s, chain) in columns.chains.iter().enumerate() {
            let (from, to) = (chain[0], *chain.last().expect("two ends"));
            let y_out = port(from, &outs[&from], s);
            let y_in = port(to, &ins[&to], s);
            let mut points = vec![[right(from), y_out]];
            if self.recycle[s] {
                // Out to the right, down to its own lane below the drawing, back left past the
                // target, up and into the target's left side.
                lane += 1;
                let y_lane = bottom + lane as f64 * LANE_PITCH;
                // Lanes' risers spaced apart, within the margin.
                let step = 16.0 + 6.0 * (lane % 5) as f64;
                let x_out = right(from) + step;
                let x_back = left(to) - step;
                points.extend([
                    [x_out, y_out],
                    [x_out, y_lane],
                    [x_back, y_lane],
                    [x_back, y_in],
                ]);
            } else {
                let mut at = [right(from), y_out];
                for &w in &chain[1..chain.len() - 1] {
                    let (wx, wy) = centre(w);
                    elbow(&mut points, at, [wx - UNIT_W / 2.0, wy]);
                    points.push([wx + UNIT_W / 2.0, wy]);
                    at = [wx + UNIT_W / 2.0, wy];
                }
                elbow(&mut points, at, [left(to), y_in]);
                points.pop();
            }
            points.push([left(to), y_in]);
            streams.push(StreamPath {
                id: plant.streams[s].id.clone(),
                from: name(from),
                to: name(to),
                recycle: self.recycle[s],
                label: label_point(&points),
                points,
            });
        }

        let meters = meter_marks(plant, &streams);
        let width = layer_x.last().copied().unwrap_or(MARGIN) + UNIT_W + MARGIN;
        let height = bottom + (lane as f64 + 1.0) * LANE_PITCH + MARGIN / 2.0;
        Flowsheet {
            plant: plant.name.clone(),
            revision,
            width,
            height,
            units,
            terminals,
            streams,
            meters,
        }
    }
}

/// From `at` to `to` with right angles: across half way, then up or down, then across (the
/// end point included; the caller may drop it).
fn elbow(points: &mut Vec<[f64; 2]>, at: [f64; 2], to: [f64; 2]) {
    if (at[1] - to[1]).abs() > 0.5 {
        let mid = (at[0] + to[0]) / 2.0;
        points.push([mid, at[1]]);
        points.push([mid, to[1]]);
    }
    points.push(to);
}

/// Above the middle of the longest horizontal run of the polyline.
fn label_point(points: &[[f64; 2]]) -> [f64; 2] {
    let mut best = (0.0, points[0]);
    for pair in points.windows(2) {
        let (a, b) = (pair[0], pair[1]);
        let run = (b[0] - a[0]).abs();
        if (a[1] - b[1]).abs() < 0.5 && run > best.0 {
            best = (run, [(a[0] + b[0]) / 2.0, a[1] - 6.0]);
        }
    }
    best.1
}

/// Meters spread along their stream's path: the k meters of a stream at fractions
/// 1/(k+1) … k/(k+1) of its length, in model order.
fn meter_marks(plant: &Plant, streams: &[StreamPath]) -> Vec<MeterMark> {
    let mut marks = Vec::new();
    for path in streams {
        let on: Vec<_> = plant
            .spec
            .meters
            .iter()
            .filter(|m| m.stream == path.id)
            .collect();
        let length: f64 = path.points.windows(2).map(|p| distance(p[0], p[1])).sum();
        for (i, meter) in on.iter().enumerate() {
            let [x, y] = along(
                &path.points,
                length * (i as f64 + 1.0) / (on.len() as f64 + 1.0),
            );
            marks.push(MeterMark {
                tag: meter.tag.clone(),
                stream: meter.stream.clone(),
                quantity: meter.quantity.as_str().to_string(),
                component: meter.component.clone(),
                x,
                y,
            });
        }
    }
    marks
}

fn distance(a: [f64; 2], b: [f64; 2]) -> f64 {
    ((b[0] - a[0]).powi(2) + (b[1] - a[1]).powi(2)).sqrt()
}

/// The point `d` along the polyline.
fn along(points: &[[f64; 2]], mut d: f64) -> [f64; 2] {
    for pair in points.windows(2) {
        let step = distance(pair[0], pair[1]);
        if d <= step && step > 0.0 {
            let t = d / step;
            return [
                pair[0][0] + t * (pair[1][0] - pair[0][0]),
                pair[0][1] + t * (pair[1][1] - pair[0][1]),
            ];
        }
        d -= step;
    }
    *points.last().expect("a path has points")
}

/// The layered graph: every node (waypoints included) with its layer, each layer's nodes in
/// order, and each stream's chain of nodes from source to target.
struct Columns {
    nodes: Vec<Node>,
    layer: Vec<usize>,
    of_layer: Vec<Vec<usize>>,
    chains: Vec<Vec<usize>>,
}

impl Columns {
    /// The edges between adjacent layers (forward streams' chain links), as node pairs.
    fn edges(&self, graph: &Graph) -> Vec<(usize, usize)> {
        let mut edges = Vec::new();
        for (s, chain) in self.chains.iter().enumerate() {
            if graph.recycle[s] {
                continue;
            }
            edges.extend(chain.windows(2).map(|p| (p[0], p[1])));
        }
        edges
    }

    fn sort_layer(&mut self, l: usize, edges: &[(usize, usize)], from_left: bool) {
        let neighbour_layer = if from_left { l - 1 } else { l + 1 };
        let position: BTreeMap<usize, usize> = self.of_layer[neighbour_layer]
            .iter()
            .enumerate()
            .map(|(i, &v)| (v, i))
            .collect();
        let current: Vec<usize> = self.of_layer[l].clone();
        let key = |i: usize, v: usize| {
            let near: Vec<f64> = edges
                .iter()
                .filter_map(|&(a, b)| match from_left {
                    true if b == v => position.get(&a),
                    false if a == v => position.get(&b),
                    _ => None,
                })
                .map(|&p| p as f64)
                .collect();
            if near.is_empty() {
                i as f64
            } else {
                near.iter().sum::<f64>() / near.len() as f64
            }
        };
        let mut keyed: Vec<(f64, usize)> = current
            .iter()
            .enumerate()
            .map(|(i, &v)| (key(i, v), v))
            .collect();
        keyed.sort_by(|a, b| a.0.total_cmp(&b.0));
        self.of_layer[l] = keyed.into_iter().map(|(_, v)| v).collect();
    }
}

/// Each node's centre height, by vertical alignment and compaction (after Brandes & Köpf,
/// 2001, in its simplest form: one direction, no balancing): left to right, each node joins the
/// block of its median neighbour in the layer before unless that neighbour is taken or the
/// link would cross one already made; a block is drawn at one height, so a chain of units and
/// a long stream's waypoints draw as straight lines. Blocks are then stacked from the top, each
/// a row below every block above it in some layer.
fn place(graph: &Graph, columns: &Columns) -> Vec<f64> {
    let n = columns.nodes.len();
    let mut position = vec![0usize; n];
    for layer in &columns.of_layer {
        for (i, &v) in layer.iter().enumerate() {
            position[v] = i;
        }
    }
    let edges = columns.edges(graph);
    let mut before: Vec<Vec<usize>> = vec![Vec::new(); n];
    for &(a, b) in &edges {
        if columns.layer[a] + 1 == columns.layer[b] {
            before[b].push(a);
        }
    }
    let mut root: Vec<usize> = (0..n).collect();
    let mut taken = vec![false; n];
    for layer in columns.of_layer.iter().skip(1) {
        // The position (in the layer before) of the last neighbour aligned with.
        let mut last: Option<usize> = None;
        for &v in layer {
            let mut near = before[v].clone();
            near.sort_by_key(|&u| position[u]);
            near.dedup();
            let Some(&m) = near.get(near.len().saturating_sub(1) / 2) else {
                continue;
            };
            if !taken[m] && last.is_none_or(|p| position[m] > p) {
                taken[m] = true;
                root[v] = root[m];
                last = Some(position[m]);
            }
        }
    }
    // Block b must be a row below block a when a node of a is just above a node of b in some
    // layer; the alignment never crosses, so these constraints have no cycle.
    let mut below: Vec<Vec<usize>> = vec![Vec::new(); n];
    let mut waiting = vec![0usize; n];
    for layer in &columns.of_layer {
        for pair in layer.windows(2) {
            let (a, b) = (root[pair[0]], root[pair[1]]);
            if a != b {
                below[a].push(b);
                waiting[b] += 1;
            }
        }
    }
    let mut row = vec![0.0f64; n];
    let mut ready: Vec<usize> = (0..n)
        .filter(|&v| root[v] == v && waiting[v] == 0)
        .collect();
    let mut next = 0;
    while next < ready.len() {
        let a = ready[next];
        next += 1;
        for &b in &below[a] {
            row[b] = row[b].max(row[a] + ROW_PITCH);
            waiting[b] -= 1;
            if waiting[b] == 0 {
                ready.push(b);
            }
        }
    }
    (0..n)
        .map(|v| MARGIN + UNIT_H / 2.0 + row[root[v]])
        .collect()
}

#[cfg(test)]
mod tests;
