//! Simulated conduit worlds: scenario files, network geometry, the flow
//! solver, sensor models with noise and faults, closed-loop robot motion
//! and ground truth.
//!
//! The loop: [`Sim::frame`] is the current sensor frame; the caller (a
//! navigator, or the built-in [`Oracle`]) answers with a [`MotionCommand`];
//! [`Sim::step`] moves the robot for one fixed time step and returns the
//! next frame. Everything is deterministic for a scenario's seed and
//! single-threaded (no dependence on thread count).
//!
//! ```no_run
//! use replay::sim::{MotionCommand, Oracle, Sim};
//! let mut sim = Sim::from_demo("saltpetre-drift").unwrap();
//! let mut oracle = Oracle::new(&sim);
//! for _ in 0..10_000 {
//!     let cmd = oracle.command(&sim);
//!     let frame = sim.step(&cmd);
//!     let _ = frame.port_pressures_pa.as_ref();
//! }
//! println!("{:?}", sim.outcome());
//! ```
//!
//! Module map: [`scenario`] (format and validation), [`demos`],
//! [`geometry`], [`friction`], [`network`] (global gradient algorithm),
//! [`nozzle`] (quasi-1-D compressible), [`world`] (local flow field),
//! [`probe_truth`], [`sensors`], [`body`] (follow-the-leader), [`truth`]
//! (wall samples, true path, outcome), [`rng`].

pub mod body;
pub mod demos;
pub mod friction;
pub mod geometry;
pub mod network;
pub mod nozzle;
pub mod policy;
pub mod probe_truth;
pub mod rng;
pub mod scenario;
pub mod sensors;
pub mod truth;
pub mod vec3;
pub mod world;
pub mod worlds;

use crate::record::{FrameRecord, GasSpec, RobotSpec};
use body::Body;
use scenario::{Scenario, ScenarioError, ScenarioErrorKind};
use sensors::Sensors;
use truth::{Outcome, TruePath, WallSamples};
use vec3::V3;
use world::{FlowSample, World, WorldError};

/// What the navigator asks for: a direction of travel and a speed.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct MotionCommand {
    /// Desired direction of travel, map frame (normalised by the sim). A
    /// heading more than 120 deg from the head axis backs the robot out
    /// along its own trail.
    pub heading_map: [f64; 3],
    /// Desired speed, m/s (clamped to `0..=` the speed limit; 0 holds).
    pub speed_m_per_s: f64,
}

impl MotionCommand {
    /// Stand still.
    #[must_use]
    pub fn hold() -> Self {
        Self {
            heading_map: [1.0, 0.0, 0.0],
            speed_m_per_s: 0.0,
        }
    }
}

/// Why a simulation could not be built.
#[derive(Debug, Clone, PartialEq)]
pub enum SimError {
    /// The scenario was refused.
    Scenario(ScenarioError),
    /// The world's flow could not be solved.
    World(WorldError),
    /// No built-in demo has that key.
    UnknownDemo(String),
    /// No world could be generated.
    Generate(worlds::WorldGenError),
}

impl core::fmt::Display for SimError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Scenario(e) => write!(f, "scenario: {e}"),
            Self::World(e) => write!(f, "{e}"),
            Self::Generate(e) => write!(f, "world: {e}"),
            Self::UnknownDemo(k) => {
                let keys: Vec<&str> = demos::DEMOS.iter().map(|d| d.0).collect();
                write!(f, "no demo {k:?}; demos: {}", keys.join(", "))
            }
        }
    }
}

impl std::error::Error for SimError {}

impl From<ScenarioError> for SimError {
    fn from(e: ScenarioError) -> Self {
        Self::Scenario(e)
    }
}

/// The robot's true state (for tests, plots and scoring; never sent to a
/// navigator).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrueState {
    /// Head front-face centre, map frame, m.
    pub head_position_m: V3,
    /// Head orientation `[w, x, y, z]`, head to map.
    pub head_orientation_wxyz: [f64; 4],
    /// Head velocity over the last step, map frame, m/s.
    pub head_velocity_m_per_s: V3,
    /// The gas at the head.
    pub flow: FlowSample,
    /// Conduit the head is in (largest clearance), by index.
    pub conduit: Option<usize>,
}

/// A running simulation.
#[derive(Debug)]
pub struct Sim {
    scenario: Scenario,
    world: World,
    walls: WallSamples,
    path: Option<TruePath>,
    body: Body,
    sensors: Sensors,
    frame: FrameRecord,
    time_s: f64,
    steps: u64,
    travel_dir: V3,
    head_velocity: V3,
    sample: FlowSample,
    struck_last: bool,
    overpressed_last: bool,
    outcome: Outcome,
    judge: policy::PolicyJudge,
    track_standoff: bool,
}

/// The standoff a branch's mouth must leave around the body for the policy
/// to count it passable, m (1 cm: common practice for a crawler's minimum
/// working clearance, not a published figure).
pub const PASSABLE_STANDOFF_M: f64 = 0.01;

impl Sim {
    /// Build from a validated scenario: solve the flow, lay the robot
    /// straight at the start, sample the walls, find the true path.
    ///
    /// # Errors
    /// [`SimError::World`] when the flow cannot be solved;
    /// [`SimError::Scenario`] (kind [`ScenarioErrorKind::RobotTooWide`])
    /// when the robot's straight body does not fit where it starts.
    pub fn new(scenario: Scenario) -> Result<Self, SimError> {
        let world = World::new(&scenario).map_err(SimError::World)?;
        let g = &world.geometry;
        let start = scenario.start.position_m;
        let (line, column) = scenario.start.line_column;
        let refuse = |reason: String| {
            SimError::Scenario(ScenarioError {
                kind: ScenarioErrorKind::RobotTooWide,
                line,
                column,
                element: "start".into(),
                reason,
            })
        };
        let hit = g
            .best_hit(start)
            .filter(|h| h.clearance_m > 0.0)
            .ok_or_else(|| refuse("the start point lies outside every conduit".into()))?;
        let heading = scenario.start.heading.unwrap_or_else(|| {
            let t = g.pieces[hit.piece as usize].dir;
            let m = world.mass_flow_kg_per_s(hit.conduit as usize);
            if m < 0.0 { t } else { vec3::scale(t, -1.0) }
        });
        let lengths: Vec<f64> = scenario.robot.modules.iter().map(|m| m.length_m).collect();
        let body = Body::straight(&lengths, start, heading);
        let compliance = scenario.motion.skin_compliance_m;
        for (k, m) in scenario.robot.modules.iter().enumerate() {
            for i in 0..=4 {
                let p = body.module_point(k, [-m.length_m * f64::from(i) / 4.0, 0.0, 0.0]);
                if g.clearance_m(p) < m.radius_m - compliance {
                    return Err(refuse(format!(
                        "laid straight behind the head (heading {heading:.3?}), module {k} pierces the wall near {p:.3?}: start on a straighter or wider stretch"
                    )));
                }
            }
        }
        let walls = WallSamples::new(g, scenario.scoring.wall_sample_spacing_m);
        let path = TruePath::find(&scenario, g, &hit, scenario.robot_radius_m());
        let flows: Vec<f64> = (0..scenario.conduits.len())
            .map(|c| world.mass_flow_kg_per_s(c))
            .collect();
        let judge = policy::PolicyJudge::new(
            &scenario,
            g,
            &flows,
            scenario.robot_radius_m() + PASSABLE_STANDOFF_M,
        );
        let sensors = Sensors::new(&scenario);
        let sample = world.sample(start);
        let outcome = Outcome {
            reached_source: false,
            reached_at_s: None,
            reached_node: None,
            wrong_branches: 0,
            min_standoff_m: f64::INFINITY,
            wall_strikes: 0,
            wall_contact_steps: 0,
            touch_steps: 0,
            skin_overpress_events: 0,
            max_skin_penetration_m: 0.0,
            junction_calls: Vec::new(),
            distance_travelled_m: 0.0,
            time_held_s: 0.0,
            elapsed_s: 0.0,
            true_path_length_m: path.as_ref().map_or(f64::NAN, |p| p.length_m),
            true_path_passable: path.as_ref().is_some_and(|p| p.passable),
        };
        let sensor_count = scenario.robot.modules.iter().map(|m| m.sensors.len()).sum();
        let mut sim = Self {
            scenario,
            world,
            walls,
            path,
            body,
            sensors,
            frame: FrameRecord {
                time_s: 0.0,
                pose: None,
                joints: None,
                port_pressures_pa: None,
                total_temperature_k: None,
                contacts: Vec::with_capacity(sensor_count),
            },
            time_s: 0.0,
            steps: 0,
            travel_dir: heading,
            head_velocity: [0.0; 3],
            sample,
            struck_last: false,
            overpressed_last: false,
            outcome,
            judge,
            track_standoff: true,
        };
        sim.score_position();
        sim.sensors.produce(
            &sim.scenario,
            &sim.world,
            &sim.body,
            sim.head_velocity,
            &sim.sample,
            0.0,
            &mut sim.frame,
        );
        Ok(sim)
    }

    /// Parse, validate and build from scenario text.
    ///
    /// # Errors
    /// As [`Scenario::from_toml_str`] and [`Sim::new`].
    pub fn from_toml_str(src: &str) -> Result<Self, SimError> {
        Self::new(Scenario::from_toml_str(src)?)
    }

    /// Read, validate and build from a scenario file.
    ///
    /// # Errors
    /// As [`Scenario::from_file`] and [`Sim::new`].
    pub fn from_file(path: &std::path::Path) -> Result<Self, SimError> {
        Self::new(Scenario::from_file(path)?)
    }

    /// Build a built-in demo by key (see [`demos::DEMOS`]).
    ///
    /// # Errors
    /// [`SimError::UnknownDemo`], or as [`Sim::new`].
    pub fn from_demo(key: &str) -> Result<Self, SimError> {
        let text = demos::demo_text(key).ok_or_else(|| SimError::UnknownDemo(key.into()))?;
        Self::from_toml_str(text)
    }

    /// The scenario.
    #[must_use]
    pub fn scenario(&self) -> &Scenario {
        &self.scenario
    }

    /// The robot as configured (what a navigator is built from).
    #[must_use]
    pub fn robot_spec(&self) -> &RobotSpec {
        &self.scenario.robot
    }

    /// The gas as configured.
    #[must_use]
    pub fn gas_spec(&self) -> GasSpec {
        self.scenario.gas.spec()
    }

    /// Fixed time step, s.
    #[must_use]
    pub fn time_step_s(&self) -> f64 {
        self.scenario.time_step_s
    }

    /// Simulated time of the current frame, s.
    #[must_use]
    pub fn time_s(&self) -> f64 {
        self.time_s
    }

    /// The current sensor frame.
    #[must_use]
    pub fn frame(&self) -> &FrameRecord {
        &self.frame
    }

    /// The solved world (geometry, network flow, local field).
    #[must_use]
    pub fn world(&self) -> &World {
        &self.world
    }

    /// The true wall samples.
    #[must_use]
    pub fn walls(&self) -> &WallSamples {
        &self.walls
    }

    /// The true path to the nearest reachable source.
    #[must_use]
    pub fn true_path(&self) -> Option<&TruePath> {
        self.path.as_ref()
    }

    /// The body (true module poses and joint angles).
    #[must_use]
    pub fn body(&self) -> &Body {
        &self.body
    }

    /// The sensor chain (truth port pressures, odometry error).
    #[must_use]
    pub fn sensors(&self) -> &Sensors {
        &self.sensors
    }

    /// The robot's true state.
    #[must_use]
    pub fn true_state(&self) -> TrueState {
        TrueState {
            head_position_m: self.body.head(),
            head_orientation_wxyz: self.body.head_quaternion_wxyz(),
            head_velocity_m_per_s: self.head_velocity,
            flow: self.sample,
            conduit: self.sample.conduit.map(|c| c as usize),
        }
    }

    /// The outcome so far.
    #[must_use]
    pub fn outcome(&self) -> Outcome {
        let mut o = self.outcome.clone();
        o.elapsed_s = self.time_s;
        o.wrong_branches = self.judge.wrong();
        o.junction_calls = self.judge.calls().to_vec();
        o
    }

    /// Switch the per-frame true-standoff query (a kiddo nearest-neighbour
    /// search) on or off; on by default.
    pub fn set_standoff_tracking(&mut self, on: bool) {
        self.track_standoff = on;
    }

    /// Apply `cmd` for one time step and return the new frame.
    pub fn step(&mut self, cmd: &MotionCommand) -> &FrameRecord {
        let dt = self.scenario.time_step_s;
        let before = self.body.head();
        let speed = if cmd.speed_m_per_s.is_finite() {
            cmd.speed_m_per_s
                .clamp(0.0, self.scenario.robot.max_speed_m_per_s)
        } else {
            0.0
        };
        let mut struck = false;
        if speed <= 0.0 {
            self.outcome.time_held_s += dt;
        } else {
            let want = vec3::unit(cmd.heading_map).unwrap_or(self.travel_dir);
            let axis = self.body.head_axis();
            if vec3::dot(want, axis) < -0.5 {
                let g = &self.world.geometry;
                let tail = self
                    .scenario
                    .robot
                    .modules
                    .last()
                    .map_or(0.0, |m| m.radius_m);
                let need = tail - self.scenario.motion.skin_compliance_m;
                self.body
                    .retreat(speed * dt, &|p| clamp_point_opt(g, p, need).0);
                self.travel_dir = self.body.head_axis();
                if self.body.head() == before {
                    struck = true;
                }
            } else {
                self.travel_dir = turn_toward(
                    self.travel_dir,
                    want,
                    self.scenario.motion.turn_rate_limit_rad_per_s * dt,
                );
                let target = vec3::axpy(before, speed * dt, self.travel_dir);
                let (to, hit_wall) = self.clamp_head(target);
                struck = hit_wall;
                if vec3::dist(to, before) > 0.0 {
                    self.body.advance_to(to);
                }
            }
        }
        let after = self.body.head();
        let disp = vec3::sub(after, before);
        self.head_velocity = vec3::scale(disp, 1.0 / dt);
        self.outcome.distance_travelled_m += vec3::norm(disp);
        if struck {
            self.outcome.wall_contact_steps += 1;
            if !self.struck_last {
                self.outcome.wall_strikes += 1;
            }
        }
        self.struck_last = struck;
        self.steps += 1;
        // Time from the step count: no accumulated rounding.
        self.time_s = self.steps as f64 * dt;
        self.sensors
            .integrate_odometry(&self.scenario, self.time_s, dt, disp);
        self.sample = self.world.sample(after);
        self.score_position();
        self.sensors.produce(
            &self.scenario,
            &self.world,
            &self.body,
            self.head_velocity,
            &self.sample,
            self.time_s,
            &mut self.frame,
        );
        self.score_skin();
        &self.frame
    }

    /// Keep the head's skin within the skin compliance of the walls: returns
    /// the allowed point nearest `target` and whether the wall stopped it.
    fn clamp_head(&self, target: V3) -> (V3, bool) {
        let need = self.scenario.robot.modules[0].radius_m - self.scenario.motion.skin_compliance_m;
        let (q, hit) = clamp_point_opt(&self.world.geometry, target, need);
        (q.unwrap_or(self.body.head()), hit)
    }

    fn score_position(&mut self) {
        let head = self.body.head();
        if self.track_standoff {
            let r_head = self.scenario.robot.modules[0].radius_m;
            // The clearance in the most-inside tube, times the cosine of
            // its wall slope, is a lower bound of the distance to the
            // union's wall (that ball lies inside the tube), and the nearest
            // wall sample is never nearer than the wall: query the tree only
            // when the minimum could still fall.
            let g = &self.world.geometry;
            let bound = g.best_hit(head).map_or(f64::NEG_INFINITY, |h| {
                let slope = g.pieces[h.piece as usize].dr_ds();
                h.clearance_m / libm::sqrt(1.0 + slope * slope)
            }) - r_head;
            if bound < self.outcome.min_standoff_m {
                let s = self.walls.distance_m(head) - r_head;
                self.outcome.min_standoff_m = self.outcome.min_standoff_m.min(s);
            }
        }
        if !self.outcome.reached_source {
            let reach = self.scenario.scoring.reach_distance_m;
            if let Some(n) = self
                .scenario
                .nodes
                .iter()
                .find(|n| n.kind.is_source() && vec3::dist(n.position_m, head) <= reach)
            {
                self.outcome.reached_source = true;
                self.outcome.reached_at_s = Some(self.time_s);
                self.outcome.reached_node = Some(n.id.clone());
            }
        }
        if let Some(h) = self.world.geometry.best_hit(head) {
            self.judge
                .observe(self.time_s, h.conduit as usize, h.station_m);
        }
    }

    /// Count touches and skin pressed past its compliance, from the sensor
    /// model's true skin state of the frame just produced.
    fn score_skin(&mut self) {
        let skin = self.sensors.skin();
        if skin.touching > 0 {
            self.outcome.touch_steps += 1;
        }
        self.outcome.max_skin_penetration_m = self
            .outcome
            .max_skin_penetration_m
            .max(skin.max_penetration_m);
        let over =
            skin.max_penetration_m > self.scenario.motion.skin_compliance_m + OVERPRESS_TOLERANCE_M;
        if over && !self.overpressed_last {
            self.outcome.skin_overpress_events += 1;
        }
        self.overpressed_last = over;
    }
}

/// Penetration beyond the skin compliance that counts as pressing the skin
/// through, m (0.5 mm: above the rounding of the head clamp, which holds the
/// head's own skin at the compliance).
const OVERPRESS_TOLERANCE_M: f64 = 0.0005;

/// The point nearest `target` whose clearance is at least `need` (the
/// projection onto the allowed core of the nearest tube wide enough), and
/// whether `target` itself had to move. `None` when no tube near `target`
/// is wide enough.
fn clamp_point_opt(g: &geometry::Geometry, target: V3, need: f64) -> (Option<V3>, bool) {
    if g.clearance_m(target) >= need {
        return (Some(target), false);
    }
    let mut best: Option<(f64, V3)> = None;
    for &pi in g.candidates(target) {
        let h = g.pieces[pi as usize].locate(pi, target);
        let allowed = h.radius_m - need - 1e-9;
        if allowed <= 0.0 {
            continue;
        }
        let q = if h.rho_m > allowed {
            vec3::axpy(h.foot, allowed / h.rho_m, h.offset)
        } else {
            target
        };
        if g.clearance_m(q) < need - 1e-6 {
            continue;
        }
        let d = vec3::dist(q, target);
        if best.is_none_or(|b| d < b.0) {
            best = Some((d, q));
        }
    }
    (best.map(|b| b.1), true)
}

/// Turn the unit vector `from` toward the unit vector `to` by at most
/// `max_rad`.
fn turn_toward(from: V3, to: V3, max_rad: f64) -> V3 {
    let c = vec3::dot(from, to).clamp(-1.0, 1.0);
    let angle = libm::acos(c);
    if angle <= max_rad {
        return to;
    }
    let axis = vec3::unit(vec3::cross(from, to)).unwrap_or_else(|| vec3::perpendicular(from));
    // Rodrigues: from is perpendicular to axis.
    let (s, k) = (libm::sin(max_rad), libm::cos(max_rad));
    let v = vec3::add(
        vec3::scale(from, k),
        vec3::scale(vec3::cross(axis, from), s),
    );
    vec3::unit(v).unwrap_or(to)
}

/// A commander that knows the truth: it follows the true path's centreline
/// to the source at a fraction of the speed limit and holds there. For
/// tests and throughput figures before a real navigator exists.
#[derive(Debug, Clone)]
pub struct Oracle {
    poly: Vec<V3>,
    arc: Vec<f64>,
    idx: usize,
    /// Look-ahead along the path, m.
    pub lookahead_m: f64,
    /// Fraction of the speed limit to command.
    pub speed_fraction: f64,
    reach_m: f64,
    patrol: bool,
    backing: bool,
    last_pos: V3,
    stalled_steps: u32,
}

impl Oracle {
    /// An oracle for `sim`'s true path (holds at once if there is none).
    #[must_use]
    pub fn new(sim: &Sim) -> Self {
        let (poly, arc) = sim.true_path().map_or((Vec::new(), Vec::new()), |p| {
            (p.polyline_m.clone(), p.arc_m.clone())
        });
        Self {
            poly,
            arc,
            idx: 0,
            lookahead_m: 0.3,
            speed_fraction: 1.0,
            reach_m: 0.5 * sim.scenario().scoring.reach_distance_m,
            patrol: false,
            backing: false,
            last_pos: sim.body().head(),
            stalled_steps: 0,
        }
    }

    /// An oracle that, instead of holding at the source, backs out along
    /// the path to the start and goes in again, for as long as it is asked
    /// (a traverse of any length for throughput figures). A back-out that
    /// stalls for 2 s turns into a forward leg again.
    #[must_use]
    pub fn patrol(sim: &Sim) -> Self {
        Self {
            patrol: true,
            ..Self::new(sim)
        }
    }

    /// Whether the oracle is backing out (patrol mode).
    #[must_use]
    pub fn is_backing(&self) -> bool {
        self.backing
    }

    /// The command for `sim`'s current true state.
    pub fn command(&mut self, sim: &Sim) -> MotionCommand {
        let head = sim.body().head();
        let (Some(&goal), false) = (self.poly.last(), self.poly.is_empty()) else {
            return MotionCommand::hold();
        };
        let speed = self.speed_fraction * sim.robot_spec().max_speed_m_per_s;
        if self.backing {
            if vec3::dist(head, self.last_pos) < 1e-6 {
                self.stalled_steps += 1;
            } else {
                self.stalled_steps = 0;
            }
            self.last_pos = head;
            let stall_limit = (2.0 / sim.time_step_s()) as u32;
            let home = self.poly[0];
            let back_home = vec3::dist(head, home) <= 2.0 * self.reach_m
                || vec3::dist(head, goal) >= vec3::dist(home, goal);
            if back_home || self.stalled_steps > stall_limit {
                self.backing = false;
                self.idx = 0;
            } else {
                return MotionCommand {
                    heading_map: vec3::scale(sim.body().head_axis(), -1.0),
                    speed_m_per_s: speed,
                };
            }
        }
        if vec3::dist(head, goal) <= self.reach_m {
            if self.patrol {
                self.backing = true;
                self.stalled_steps = 0;
            }
            return MotionCommand::hold();
        }
        // Progress: nearest polyline point within a forward window.
        let end = (self.idx + 200).min(self.poly.len());
        let mut best = (f64::INFINITY, self.idx);
        for i in self.idx..end {
            let d = vec3::dist(self.poly[i], head);
            if d < best.0 {
                best = (d, i);
            }
        }
        self.idx = best.1;
        let s_target = self.arc[self.idx] + self.lookahead_m;
        let j = self
            .arc
            .partition_point(|&s| s < s_target)
            .min(self.poly.len() - 1);
        let heading = vec3::unit(vec3::sub(self.poly[j], head)).unwrap_or([1.0, 0.0, 0.0]);
        MotionCommand {
            heading_map: heading,
            speed_m_per_s: speed,
        }
    }
}
