//! Synthetic conduit scenes for navigator tests, benches and the step-cost
//! example. Invented data: straight cylindrical segments joined at nodes,
//! uniform flow in each, a crude probe and tactile model with seeded noise.
//! Shared by `tests` (as a module of `upcurrent-tests`) and by nav-core's
//! bench and example (included with `#[path]`), so it depends only on
//! `nav_core`, `libm` and `rand_chacha`.
#![allow(dead_code)]

use nav_core::decide::{FlowObservation, MAX_FRAME_WALL_POINTS, Opening, WallObservation};
use nav_core::frame::HeadPose;
use nav_core::map::{Section, add, dot, norm, scale, sub, unit};
use nav_core::navigator::{Command, Observation};
use rand_chacha::ChaCha8Rng;
use rand_chacha::rand_core::{RngCore, SeedableRng};

/// Segments per scene.
pub const MAX_SEGMENTS: usize = 64;

/// One straight segment. Gas flows from `b` toward `a` (upstream is toward
/// `b`); a child segment starts at its parent's `b`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Segment {
    /// Downstream end, m.
    pub a: [f64; 3],
    /// Upstream end, m.
    pub b: [f64; 3],
    /// Radius, m.
    pub radius_m: f64,
    /// Dynamic pressure in it, Pa.
    pub dynamic_pressure_pa: f64,
    /// Wall across the upstream end.
    pub closed_end: bool,
    /// The flow source is at the upstream end.
    pub source: bool,
    /// Parent segment.
    pub parent: Option<usize>,
    /// A pinch across the segment: `(distance from a, clear width)`, m.
    /// The head's nose cap meets it; a head of [`Sim::body_radius_m`]
    /// cannot pass it when narrower than its body.
    pub pinch: Option<(f64, f64)>,
}

/// A scene.
#[derive(Debug, Clone, Copy)]
pub struct Scene {
    /// Segments; the first `count` are used.
    pub segs: [Segment; MAX_SEGMENTS],
    /// Number of segments.
    pub count: usize,
}

const EMPTY_SEG: Segment = Segment {
    a: [0.0; 3],
    b: [0.0; 3],
    radius_m: 0.0,
    dynamic_pressure_pa: 0.0,
    closed_end: false,
    source: false,
    parent: None,
    pinch: None,
};

impl Scene {
    fn new() -> Self {
        Self {
            segs: [EMPTY_SEG; MAX_SEGMENTS],
            count: 0,
        }
    }
    fn push(&mut self, s: Segment) -> usize {
        let k = self.count;
        if let Some(slot) = self.segs.get_mut(k) {
            *slot = s;
            self.count += 1;
        }
        k
    }
    /// The used segments.
    pub fn segments(&self) -> &[Segment] {
        &self.segs[..self.count]
    }
}

/// One branch of a fork scene.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ForkBranch {
    /// Yaw from the trunk's upstream direction, rad.
    pub yaw_rad: f64,
    /// Clear width (diameter), m.
    pub width_m: f64,
    /// Dynamic pressure inside, Pa.
    pub dynamic_pressure_pa: f64,
    /// Dead end: a wall at its far end (gas seeps through cracks there, so
    /// it can still carry flow at its mouth).
    pub dead_end: bool,
}

/// Pinch segment `k` of `scene` at `at_m` from its start to `width_m`.
pub fn pinch(scene: &mut Scene, k: usize, at_m: f64, width_m: f64) {
    if let Some(s) = scene.segs.get_mut(k) {
        s.pinch = Some((at_m, width_m));
    }
}

/// A trunk along +x ending at the origin, where `branches` fork off; each
/// branch is 6 m long; a live branch ends at a source.
pub fn fork_scene(trunk_radius_m: f64, trunk_q_pa: f64, branches: &[ForkBranch]) -> Scene {
    fork_scene_len(trunk_radius_m, trunk_q_pa, branches, 6.0)
}

/// [`fork_scene`] with branches `branch_len_m` long.
pub fn fork_scene_len(
    trunk_radius_m: f64,
    trunk_q_pa: f64,
    branches: &[ForkBranch],
    branch_len_m: f64,
) -> Scene {
    let mut s = Scene::new();
    let t = s.push(Segment {
        a: [-12.0, 0.0, 0.0],
        b: [0.0, 0.0, 0.0],
        radius_m: trunk_radius_m,
        dynamic_pressure_pa: trunk_q_pa,
        closed_end: false,
        source: false,
        parent: None,
        pinch: None,
    });
    for br in branches {
        let d = [libm::cos(br.yaw_rad), libm::sin(br.yaw_rad), 0.0];
        s.push(Segment {
            a: [0.0; 3],
            b: scale(d, branch_len_m),
            radius_m: 0.5 * br.width_m,
            dynamic_pressure_pa: br.dynamic_pressure_pa,
            closed_end: br.dead_end,
            source: !br.dead_end,
            parent: Some(t),
            pinch: None,
        });
    }
    s
}

/// A long main path of `nodes` straight legs (10 m each, yaw alternating),
/// with a weaker side stub (closed) at every node, ending at a source. Used
/// to fill the map in long runs.
pub fn chain_scene(nodes: usize) -> Scene {
    let mut s = Scene::new();
    let mut a = [-1.0, 0.0, 0.0];
    let mut parent = None;
    let n = nodes.min(MAX_SEGMENTS / 2);
    for i in 0..n {
        let yaw = if i == 0 {
            0.0
        } else if i % 2 == 0 {
            0.25
        } else {
            -0.25
        };
        let d = [libm::cos(yaw), libm::sin(yaw), 0.0];
        let b = add(a, scale(d, 10.0));
        let main = s.push(Segment {
            a,
            b,
            radius_m: 0.3,
            dynamic_pressure_pa: 40.0,
            closed_end: false,
            source: i + 1 == n,
            parent,
            pinch: None,
        });
        if let Some(p) = parent {
            // Side stub from the same node as this leg.
            let side_yaw = yaw + if i % 3 == 0 { 1.1 } else { -1.1 };
            let sd = [libm::cos(side_yaw), libm::sin(side_yaw), 0.0];
            s.push(Segment {
                a,
                b: add(a, scale(sd, 4.0)),
                radius_m: 0.2,
                dynamic_pressure_pa: 8.0,
                closed_end: true,
                source: false,
                parent: Some(p),
                pinch: None,
            });
        }
        parent = Some(main);
        a = b;
    }
    s
}

/// A rigid transform: rotation (unit quaternion `[w, x, y, z]`) then
/// translation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rigid {
    /// Rotation.
    pub q: [f64; 4],
    /// Translation, m.
    pub t: [f64; 3],
}

impl Rigid {
    /// No change.
    pub const IDENTITY: Self = Self {
        q: [1.0, 0.0, 0.0, 0.0],
        t: [0.0; 3],
    };
    /// From an axis, angle and translation.
    pub fn new(axis: [f64; 3], angle_rad: f64, t: [f64; 3]) -> Self {
        let a = unit(axis).unwrap_or([0.0, 0.0, 1.0]);
        let h = 0.5 * angle_rad;
        let s = libm::sin(h);
        Self {
            q: [libm::cos(h), a[0] * s, a[1] * s, a[2] * s],
            t,
        }
    }
    /// Rotate a vector.
    pub fn vec(&self, v: [f64; 3]) -> [f64; 3] {
        rotate(self.q, v)
    }
    /// Rotate back.
    pub fn inv_vec(&self, v: [f64; 3]) -> [f64; 3] {
        let [w, x, y, z] = self.q;
        rotate([w, -x, -y, -z], v)
    }
    /// Transform a point.
    pub fn point(&self, p: [f64; 3]) -> [f64; 3] {
        add(self.vec(p), self.t)
    }
    /// Rotate a covariance.
    pub fn cov(&self, c: [[f64; 3]; 3]) -> [[f64; 3]; 3] {
        let cols = [
            self.vec([1.0, 0.0, 0.0]),
            self.vec([0.0, 1.0, 0.0]),
            self.vec([0.0, 0.0, 1.0]),
        ];
        // R[i][k] = cols[k][i]
        let mut out = [[0.0; 3]; 3];
        for (i, row) in out.iter_mut().enumerate() {
            for (j, v) in row.iter_mut().enumerate() {
                let mut s = 0.0;
                for k in 0..3 {
                    for l in 0..3 {
                        s += cols[k][i] * c[k][l] * cols[l][j];
                    }
                }
                *v = s;
            }
        }
        out
    }
    /// Transform a whole observation.
    pub fn observation(&self, o: &Observation) -> Observation {
        let mut o = *o;
        if let Some(p) = &mut o.pose {
            p.position_m = self.point(p.position_m);
            p.orientation_wxyz = qmul(self.q, p.orientation_wxyz);
        }
        if let Some(f) = &mut o.flow {
            f.velocity_dir_map = f.velocity_dir_map.map(|v| self.vec(v));
            f.dir_cov_map = self.cov(f.dir_cov_map);
        }
        if let Some(w) = &mut o.wall {
            if let Section::Circle { centre_m, .. } = &mut w.section {
                *centre_m = self.point(*centre_m);
            }
            w.conduit_axis_map = w.conduit_axis_map.map(|v| self.vec(v));
            let n = usize::from(w.opening_count);
            for op in w.openings.iter_mut().take(n) {
                op.direction_map = self.vec(op.direction_map);
                op.mouth_m = self.point(op.mouth_m);
            }
            let n = usize::from(w.wall_point_count);
            for p in w.wall_points_m.iter_mut().take(n) {
                *p = self.point(*p);
            }
        }
        o
    }
}

/// Hamilton product `a * b`.
pub fn qmul(a: [f64; 4], b: [f64; 4]) -> [f64; 4] {
    let [aw, ax, ay, az] = a;
    let [bw, bx, by, bz] = b;
    [
        aw * bw - ax * bx - ay * by - az * bz,
        aw * bx + ax * bw + ay * bz - az * by,
        aw * by - ax * bz + ay * bw + az * bx,
        aw * bz + ax * by - ay * bx + az * bw,
    ]
}

/// Rotate `v` by unit quaternion `q`.
pub fn rotate(q: [f64; 4], v: [f64; 3]) -> [f64; 3] {
    let [w, x, y, z] = q;
    let r = qmul(qmul(q, [0.0, v[0], v[1], v[2]]), [w, -x, -y, -z]);
    [r[1], r[2], r[3]]
}

/// Shortest-arc quaternion taking +x to unit `f`.
pub fn quat_from_forward(f: [f64; 3]) -> [f64; 4] {
    let w = 1.0 + f[0];
    if w < 1e-9 {
        return [0.0, 0.0, 0.0, 1.0];
    }
    let q = [w, 0.0, -f[2], f[1]];
    let n = libm::sqrt(q.iter().map(|v| v * v).sum::<f64>());
    [q[0] / n, q[1] / n, q[2] / n, q[3] / n]
}

/// Closed-loop simulator state.
#[derive(Debug, Clone)]
pub struct Sim {
    /// The scene (local frame).
    pub scene: Scene,
    /// Head position, local frame.
    pub pos: [f64; 3],
    /// Head forward, local frame.
    pub fwd: [f64; 3],
    /// Time, s.
    pub t: f64,
    /// Step, s.
    pub dt: f64,
    /// Scene placement in the map frame.
    pub rigid: Rigid,
    /// Noise on (flow and section).
    pub noise: bool,
    rng: ChaCha8Rng,
    /// Smallest true clearance (head axis to wall) seen, m.
    pub min_clearance_m: f64,
    /// Reached the source.
    pub reached: bool,
    /// Segments entered, in order (first 32).
    pub visited: [usize; 32],
    /// Entries in `visited`.
    pub visited_count: usize,
    /// Contact points reported per frame (at most 32).
    pub wall_points: usize,
    /// Head radius for pinches, m (0: pinches are not felt and block
    /// nothing, as before they existed).
    pub body_radius_m: f64,
    /// Skin compliance, m: a pinch stops the nose this far past first
    /// touch, and that stop is a strike.
    pub compliance_m: f64,
    /// Steps at which a pinch stopped the head (pressed through the skin).
    pub strikes: u32,
    /// Furthest the nose went past a pinch's first touch, m.
    pub max_press_m: f64,
}

fn seg_param(s: &Segment, p: [f64; 3]) -> (f64, f64, [f64; 3]) {
    let ab = sub(s.b, s.a);
    let l2 = dot(ab, ab);
    let u = if l2 > 0.0 {
        (dot(sub(p, s.a), ab) / l2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    let c = add(s.a, scale(ab, u));
    (u, norm(sub(p, c)), c)
}

impl Sim {
    /// Start at `start` in the local frame facing +x.
    pub fn new(scene: Scene, start: [f64; 3], rigid: Rigid, seed: u64, noise: bool) -> Self {
        Self {
            scene,
            pos: start,
            fwd: [1.0, 0.0, 0.0],
            t: 0.0,
            dt: 0.01,
            rigid,
            noise,
            rng: ChaCha8Rng::seed_from_u64(seed),
            min_clearance_m: f64::INFINITY,
            reached: false,
            visited: [0; 32],
            visited_count: 0,
            wall_points: 8,
            body_radius_m: 0.0,
            compliance_m: 0.005,
            strikes: 0,
            max_press_m: 0.0,
        }
    }

    /// How far the nose presses past the first touch of the pinch of the
    /// segment the head is in, m (negative: not touching), with the pinch
    /// station and its width; `None` without a pinch there.
    fn pinch_press(&self, pos: [f64; 3]) -> Option<(f64, [f64; 3], f64)> {
        if self.body_radius_m <= 0.0 {
            return None;
        }
        let s = self.scene.segs[self.current()];
        let (at, width) = s.pinch?;
        let dir = unit(sub(s.b, s.a))?;
        let along = dot(sub(pos, s.a), dir);
        let station = add(s.a, scale(dir, at));
        // The nose cap of radius r first meets a pinch narrower than its
        // diameter where its sphere reaches the throat's rim.
        let half = 0.5 * width;
        let r = self.body_radius_m;
        let reach = if half < r {
            libm::sqrt(r * r - half * half)
        } else {
            return None;
        };
        Some((along - (at - reach), station, width))
    }

    fn normal(&mut self) -> f64 {
        // Box-Muller with libm.
        let u1 = ((self.rng.next_u64() >> 11) as f64 + 1.0) / 9_007_199_254_740_993.0;
        let u2 = (self.rng.next_u64() >> 11) as f64 / 9_007_199_254_740_992.0;
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }

    /// The segment the head is in (nearest axis; ties to the lower index).
    pub fn current(&self) -> usize {
        let mut best = (0, f64::INFINITY);
        for (k, s) in self.scene.segments().iter().enumerate() {
            let (_, d, _) = seg_param(s, self.pos);
            if d < best.1 {
                best = (k, d);
            }
        }
        best.0
    }

    fn children(&self, k: usize) -> impl Iterator<Item = (usize, &Segment)> {
        self.scene
            .segments()
            .iter()
            .enumerate()
            .filter(move |(_, s)| s.parent == Some(k))
    }

    /// The observation of the current state, in the map frame.
    pub fn observe(&mut self) -> Observation {
        let k = self.current();
        let s = self.scene.segs[k];
        let dir = unit(sub(s.b, s.a)).unwrap_or([1.0, 0.0, 0.0]);
        let (_, _, centre) = seg_param(&s, self.pos);
        let to_node = norm(sub(s.b, self.pos));
        let before_node = dot(sub(self.pos, s.b), dir) < 0.0;
        let zone = 0.6;
        // Flow: the child the head points into, near a node.
        let mut q = s.dynamic_pressure_pa;
        let mut vdir = scale(dir, -1.0);
        if to_node < zone + 0.4 {
            let mut best = libm::cos(0.35);
            let kids: [(usize, Segment); 8] = {
                let mut a = [(0usize, EMPTY_SEG); 8];
                for (slot, (ck, cs)) in a.iter_mut().zip(self.children(k)) {
                    *slot = (ck, *cs);
                }
                a
            };
            for (_, c) in kids.iter().filter(|(_, c)| c.radius_m > 0.0) {
                let cd = unit(sub(c.b, c.a)).unwrap_or(dir);
                let cs = dot(cd, self.fwd);
                if cs > best {
                    best = cs;
                    q = c.dynamic_pressure_pa;
                    vdir = scale(cd, -1.0);
                }
            }
        }
        let sig = 0.02;
        let (n1, n2, n3, nq, nr) = if self.noise {
            (
                self.normal(),
                self.normal(),
                self.normal(),
                self.normal(),
                self.normal(),
            )
        } else {
            (0.0, 0.0, 0.0, 0.0, 0.0)
        };
        let v = unit(add(vdir, [sig * n1, sig * n2, sig * n3])).unwrap_or(vdir);
        let qv = (q * (1.0 + 0.03 * nq)).max(0.0);
        let flow = FlowObservation {
            velocity_dir_map: Some(self.rigid.vec(v)),
            dir_cov_map: self.rigid.cov([
                [sig * sig, 0.0, 0.0],
                [0.0, sig * sig, 0.0],
                [0.0, 0.0, sig * sig],
            ]),
            dynamic_pressure_pa: qv,
            dynamic_pressure_sigma_pa: 0.03 * q + 0.05,
            static_pressure_pa: 101_325.0,
            mach: 0.02,
            density_kg_per_m3: 1.2,
            degraded: false,
            port_suspect_mask: 0,
            port_failed_mask: 0,
        };
        // Wall.
        let mut w = WallObservation::EMPTY;
        let r_obs = s.radius_m + if self.noise { 0.003 * nr } else { 0.0 };
        w.section = Section::Circle {
            centre_m: self.rigid.point(centre),
            radius_m: r_obs,
            centre_sigma_m: 0.005,
            radius_sigma_m: 0.003,
        };
        w.conduit_axis_map = Some(self.rigid.vec(dir));
        // Perpendicular basis for contact points.
        let e1 = unit([-dir[1], dir[0], 0.0]).unwrap_or([0.0, 1.0, 0.0]);
        let e2 = [
            dir[1] * e1[2] - dir[2] * e1[1],
            dir[2] * e1[0] - dir[0] * e1[2],
            dir[0] * e1[1] - dir[1] * e1[0],
        ];
        let n_pts = self.wall_points.clamp(1, MAX_FRAME_WALL_POINTS);
        for i in 0..n_pts {
            let a = core::f64::consts::TAU * (i as f64) / (n_pts as f64);
            let p = add(
                centre,
                add(
                    scale(e1, s.radius_m * libm::cos(a)),
                    scale(e2, s.radius_m * libm::sin(a)),
                ),
            );
            w.push_wall_point(self.rigid.point(p));
        }
        if before_node && to_node < zone {
            let kids: [(usize, Segment); 8] = {
                let mut a = [(0usize, EMPTY_SEG); 8];
                for (slot, (ck, cs)) in a.iter_mut().zip(self.children(k)) {
                    *slot = (ck, *cs);
                }
                a
            };
            for (_, c) in kids.iter().filter(|(_, c)| c.radius_m > 0.0) {
                let cd = unit(sub(c.b, c.a)).unwrap_or(dir);
                w.push_opening(Opening {
                    direction_map: self.rigid.vec(cd),
                    mouth_m: self.rigid.point(add(c.a, scale(cd, s.radius_m))),
                    clear_width_m: 2.0 * c.radius_m,
                    width_is_lower_bound: false,
                });
            }
        }
        if s.closed_end && to_node < 0.5 {
            w.end_ahead = true;
        }
        if let Some((press, station, width)) = self.pinch_press(self.pos)
            && press >= 0.0
        {
            // The cap touches the throat's rim all round: two contacts on
            // opposite sides, the width between them.
            let half = 0.5 * width;
            let p1 = add(station, scale(e1, half));
            let p2 = add(station, scale(e1, -half));
            w.push_wall_point(self.rigid.point(p1));
            w.push_wall_point(self.rigid.point(p2));
            w.nose_loaded = true;
            w.nose_point_m = Some(self.rigid.point(station));
            w.nose_width_m = Some(width);
        }
        let pose = HeadPose {
            position_m: self.rigid.point(self.pos),
            orientation_wxyz: qmul(self.rigid.q, quat_from_forward(self.fwd)),
            position_sigma_m: 0.01,
            attitude_sigma_rad: 0.01,
        };
        Observation {
            time_s: self.t,
            pose: Some(pose),
            flow: Some(flow),
            wall: Some(w),
        }
    }

    /// Move the robot by one command.
    pub fn apply(&mut self, c: &Command) {
        let h = self.rigid.inv_vec(c.heading_map);
        if c.speed_m_per_s > 0.0 {
            let to = add(self.pos, scale(h, c.speed_m_per_s * self.dt));
            match self.pinch_press(to) {
                Some((press, _, _)) if press > self.compliance_m => {
                    // Stopped by the pinch with the skin pressed through.
                    self.strikes += 1;
                    self.max_press_m = self.max_press_m.max(press);
                }
                Some((press, _, _)) => {
                    self.max_press_m = self.max_press_m.max(press);
                    self.pos = to;
                }
                None => self.pos = to,
            }
            if !c.reverse {
                self.fwd = h;
            }
        } else if !c.reverse {
            self.fwd = h;
        }
        self.t += self.dt;
        // Truth bookkeeping.
        let mut clear = f64::NEG_INFINITY;
        for s in self.scene.segments() {
            let (_, d, _) = seg_param(s, self.pos);
            clear = clear.max(s.radius_m - d);
        }
        self.min_clearance_m = self.min_clearance_m.min(clear);
        let k = self.current();
        let last = self
            .visited
            .get(self.visited_count.wrapping_sub(1))
            .copied();
        if (self.visited_count == 0 || last != Some(k)) && self.visited_count < self.visited.len() {
            self.visited[self.visited_count] = k;
            self.visited_count += 1;
        }
        let s = self.scene.segs[k];
        if s.source && norm(sub(s.b, self.pos)) < 0.5 {
            self.reached = true;
        }
    }
}
