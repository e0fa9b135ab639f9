//! Ground truth: dense wall samples in a kiddo tree for true standoff
//! queries, the true path to the source through the network, and the
//! per-run outcome.

use std::cmp::Ordering;
use std::collections::BinaryHeap;

use kiddo::{ImmutableKdTree, SquaredEuclidean};

use super::geometry::{Geometry, Hit};
use super::scenario::Scenario;
use super::vec3::{self, V3};

/// Dense samples of the true wall surface.
#[derive(Debug)]
pub struct WallSamples {
    tree: ImmutableKdTree<f64, 3>,
    count: usize,
}

impl WallSamples {
    /// Sample the boundary of the union of the conduit tubes every
    /// `spacing_m`: rings on each piece's side, spheres at each piece's
    /// ends (closing blind ends and filling the outside of bends), keeping
    /// only points not inside another piece.
    #[must_use]
    pub fn new(g: &Geometry, spacing_m: f64) -> Self {
        let mut pts: Vec<[f64; 3]> = Vec::new();
        let keep = |p: V3, own: usize| -> bool {
            g.candidates(p).iter().all(|&pi| {
                pi as usize == own || g.pieces[pi as usize].locate(pi, p).clearance_m <= 1e-9
            })
        };
        for (pi, p) in g.pieces.iter().enumerate() {
            let u = vec3::perpendicular(p.dir);
            let w = vec3::cross(p.dir, u);
            let nt = (p.len_m / spacing_m).ceil().max(1.0) as usize;
            for it in 0..=nt {
                let t = p.len_m * it as f64 / nt as f64;
                let r = p.radius_at(t);
                let c = vec3::axpy(p.a, t, p.dir);
                let na = (2.0 * core::f64::consts::PI * r / spacing_m)
                    .ceil()
                    .max(6.0) as usize;
                for ia in 0..na {
                    let a = 2.0 * core::f64::consts::PI * ia as f64 / na as f64;
                    let q = vec3::add(
                        c,
                        vec3::add(
                            vec3::scale(u, r * libm::cos(a)),
                            vec3::scale(w, r * libm::sin(a)),
                        ),
                    );
                    if keep(q, pi) {
                        pts.push(q);
                    }
                }
            }
            // End spheres (Fibonacci lattice).
            for (c, r) in [(p.a, p.r_a_m), (vec3::axpy(p.a, p.len_m, p.dir), p.r_b_m)] {
                let n = (4.0 * core::f64::consts::PI * r * r / (spacing_m * spacing_m))
                    .ceil()
                    .max(12.0) as usize;
                let golden = core::f64::consts::PI * (3.0 - libm::sqrt(5.0));
                for i in 0..n {
                    let z = 1.0 - 2.0 * (i as f64 + 0.5) / n as f64;
                    let rr = libm::sqrt((1.0 - z * z).max(0.0));
                    let th = golden * i as f64;
                    let q = vec3::add(c, [r * rr * libm::cos(th), r * rr * libm::sin(th), r * z]);
                    // Points inside the piece's own cylinder are not wall.
                    let own = p.locate(pi as u32, q);
                    if own.clearance_m > 1e-9 {
                        continue;
                    }
                    if g.candidates(q)
                        .iter()
                        .all(|&pj| g.pieces[pj as usize].locate(pj, q).clearance_m <= 1e-9)
                    {
                        pts.push(q);
                    }
                }
            }
        }
        let count = pts.len();
        Self {
            tree: ImmutableKdTree::new_from_slice(&pts),
            count,
        }
    }

    /// Number of samples.
    #[must_use]
    pub fn len(&self) -> usize {
        self.count
    }

    /// Whether there are no samples.
    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.count == 0
    }

    /// Distance from `p` to the nearest wall sample, m.
    #[must_use]
    pub fn distance_m(&self, p: V3) -> f64 {
        libm::sqrt(self.tree.nearest_one::<SquaredEuclidean>(&p).distance)
    }
}

/// The true path from the start to the nearest reachable source.
#[derive(Debug, Clone, PartialEq)]
pub struct TruePath {
    /// Conduits in travel order (the start conduit first).
    pub conduits: Vec<usize>,
    /// Nodes reached in order (the source last).
    pub nodes: Vec<usize>,
    /// The source node.
    pub source: usize,
    /// Path length, m.
    pub length_m: f64,
    /// Whether the robot fits through every conduit on it. When no
    /// passable path exists, this is the shortest path regardless of width
    /// and `false`.
    pub passable: bool,
    /// Dense centreline polyline of the path, map frame (start first).
    pub polyline_m: Vec<V3>,
    /// Arc length at each polyline point, m.
    pub arc_m: Vec<f64>,
}

#[derive(PartialEq)]
struct Item(f64, usize);
impl Eq for Item {}
impl Ord for Item {
    fn cmp(&self, o: &Self) -> Ordering {
        o.0.total_cmp(&self.0).then_with(|| o.1.cmp(&self.1))
    }
}
impl PartialOrd for Item {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        Some(self.cmp(o))
    }
}

/// Spacing of the path polyline, m.
const PATH_STEP_M: f64 = 0.05;

impl TruePath {
    /// Shortest path from the start hit to any source, over conduits the
    /// robot (radius `robot_r`) fits through if any such path exists.
    #[must_use]
    pub fn find(sc: &Scenario, g: &Geometry, start: &Hit, robot_r: f64) -> Option<Self> {
        let pass = |c: usize| g.conduits[c].min_radius_m > robot_r;
        Self::dijkstra(sc, g, start, &pass, true)
            .or_else(|| Self::dijkstra(sc, g, start, &|_| true, false))
    }

    fn dijkstra(
        sc: &Scenario,
        g: &Geometry,
        start: &Hit,
        pass: &dyn Fn(usize) -> bool,
        passable: bool,
    ) -> Option<Self> {
        let n = sc.nodes.len();
        let c0 = start.conduit as usize;
        let start_node = n; // virtual node at the start point
        let mut dist = vec![f64::INFINITY; n];
        // via[v] = (previous node, conduit taken).
        let mut via: Vec<Option<(usize, usize)>> = vec![None; n];
        let mut heap = BinaryHeap::new();
        let cg = &g.conduits[c0];
        if !pass(c0) {
            return None;
        }
        for (node, d) in [
            (cg.from, start.station_m),
            (cg.to, cg.length_m - start.station_m),
        ] {
            if d < dist[node] {
                dist[node] = d;
                via[node] = Some((start_node, c0));
                heap.push(Item(d, node));
            }
        }
        let mut adj: Vec<Vec<(usize, usize)>> = vec![Vec::new(); n];
        for (ci, c) in g.conduits.iter().enumerate() {
            if pass(ci) {
                adj[c.from].push((c.to, ci));
                adj[c.to].push((c.from, ci));
            }
        }
        let mut target = None;
        while let Some(Item(d, u)) = heap.pop() {
            if d > dist[u] {
                continue;
            }
            if sc.nodes[u].kind.is_source() {
                target = Some(u);
                break;
            }
            for &(v, ci) in &adj[u] {
                let nd = d + g.conduits[ci].length_m;
                if nd < dist[v] {
                    dist[v] = nd;
                    via[v] = Some((u, ci));
                    heap.push(Item(nd, v));
                }
            }
        }
        let source = target?;
        let mut nodes = vec![source];
        let mut conduits = Vec::new();
        let mut u = source;
        for _ in 0..=n {
            let (prev, ci) = via[u]?;
            conduits.push(ci);
            if prev == start_node {
                break;
            }
            nodes.push(prev);
            u = prev;
        }
        nodes.reverse();
        conduits.reverse();
        // Polyline: along c0 from the start station to nodes[0], then each conduit.
        let mut poly = vec![g.point_at(c0, start.station_m)];
        let push_range = |poly: &mut Vec<V3>, c: usize, s_a: f64, s_b: f64| {
            let len = (s_b - s_a).abs();
            let k = (len / PATH_STEP_M).ceil().max(1.0) as usize;
            for i in 1..=k {
                let s = s_a + (s_b - s_a) * i as f64 / k as f64;
                poly.push(g.point_at(c, s));
            }
        };
        let first_node = nodes[0];
        let s_end = if cg.from == first_node {
            0.0
        } else {
            cg.length_m
        };
        push_range(&mut poly, c0, start.station_m, s_end);
        let mut at = first_node;
        for &ci in conduits.iter().skip(1) {
            let c = &g.conduits[ci];
            let (a, b, next) = if c.from == at {
                (0.0, c.length_m, c.to)
            } else {
                (c.length_m, 0.0, c.from)
            };
            push_range(&mut poly, ci, a, b);
            at = next;
        }
        let mut arc = Vec::with_capacity(poly.len());
        let mut s = 0.0;
        arc.push(0.0);
        for w in poly.windows(2) {
            s += vec3::dist(w[0], w[1]);
            arc.push(s);
        }
        Some(Self {
            conduits,
            nodes,
            source,
            length_m: s,
            passable,
            polyline_m: poly,
            arc_m: arc,
        })
    }
}

/// How a run went, by the truth (serde for run summaries).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Outcome {
    /// Whether the head came within the reach distance of a source node.
    pub reached_source: bool,
    /// When it first did, s.
    pub reached_at_s: Option<f64>,
    /// Which source, by id.
    pub reached_node: Option<String>,
    /// Wrong branch choices by the policy-true judge
    /// ([`super::policy`]): entries into a branch other than the passable
    /// one with the most flow toward the junction.
    pub wrong_branches: u32,
    /// Smallest distance from the head's skin to the wall (nearest wall
    /// sample to the head front-face centre, less the head radius), m.
    pub min_standoff_m: f64,
    /// Wall strikes: steps at which the head was stopped by a wall after a
    /// free step.
    pub wall_strikes: u32,
    /// Steps spent pressed against a wall.
    pub wall_contact_steps: u64,
    /// Steps at which some skin sensor touched a wall, by the sensor
    /// model's truth (before dead sensors, thresholds' noise and dropouts):
    /// touching is fine.
    #[serde(default)]
    pub touch_steps: u64,
    /// Times the skin was pressed past its compliance somewhere along the
    /// body (onsets): strikes, with `wall_strikes`.
    #[serde(default)]
    pub skin_overpress_events: u32,
    /// Deepest skin penetration at any sensor, m.
    #[serde(default)]
    pub max_skin_penetration_m: f64,
    /// Every judged branch choice, in time order.
    #[serde(default)]
    pub junction_calls: Vec<super::policy::JunctionCall>,
    /// Distance travelled by the head, m.
    pub distance_travelled_m: f64,
    /// Time the command asked for zero speed, s.
    pub time_held_s: f64,
    /// Simulated time, s.
    pub elapsed_s: f64,
    /// Length of the true path, m.
    pub true_path_length_m: f64,
    /// Whether the true path is passable for the robot.
    pub true_path_passable: bool,
}
