//! Drive the navigator over a log or a live simulation, write the decision
//! trace and a summary, and compute the trace digest.
//!
//! # The decision trace
//!
//! JSON Lines, one object per navigator step:
//! `{"step": n, "command": {...}}`, where `command` is every field of
//! `nav_core::navigator::Command` (heading, speed, mode, the whole decision
//! record, health flags), serialised by serde with serde_json's shortest
//! round-trip float format. The same steps give the same bytes on every
//! machine, so the digest (FNV-1a 64 over the trace bytes, printed as 16
//! hex digits) identifies a trace.
//!
//! # Building the navigator
//!
//! The navigator's capacities are compile-time constants
//! ([`Ports5`] and [`Ports7`] below); a robot is mapped onto them from its
//! [`RobotSpec`] and [`GasSpec`], and refused with a clear reason when it
//! does not fit (too many modules or sensors, an unsupported port count).

use crate::log::{Event, EventRecord, LogHeader, LogReader, LogWriter, ReadOptions, Record};
use crate::record::{FrameRecord, GasSpec, ProbeLayoutSpec, RobotSpec};
use crate::sim::{MotionCommand, Sim};
use nav_core::body::{BodyConfig, ModuleSpec, SensorSpec};
use nav_core::digest::Fnv64;
use nav_core::gas::IdealGas;
use nav_core::navigator::Command;
use nav_core::onboard::{FrameNavigator, OnboardConfig};
use nav_core::probe::{Port, ProbeLayout};
use serde::Serialize;
use std::collections::BTreeMap;
use std::io::Write;

/// Module capacity of the host navigator.
pub const MAX_MODULES: usize = 8;
/// Joint slots (modules - 1).
pub const MAX_JOINTS: usize = MAX_MODULES - 1;
/// Contact sensor capacity (health masks are 64 bits).
pub const MAX_SENSORS: usize = 64;
/// Contact slots per frame.
pub const MAX_CONTACTS: usize = 64;

/// The host navigator for a 5-port head.
pub type Ports5 =
    FrameNavigator<5, MAX_JOINTS, MAX_CONTACTS, MAX_MODULES, MAX_SENSORS, 256, 128, 512, 8>;
/// The host navigator for a 7-port head.
pub type Ports7 =
    FrameNavigator<7, MAX_JOINTS, MAX_CONTACTS, MAX_MODULES, MAX_SENSORS, 256, 128, 512, 8>;

/// Why a run could not be done.
#[derive(Debug)]
pub enum RunError {
    /// The robot does not fit the navigator's capacities or is invalid.
    Robot(String),
    /// A frame did not fit the navigator (record index, reason).
    Frame {
        /// Frame index in the stream.
        index: u64,
        /// Why.
        reason: String,
    },
    /// The log could not be read.
    Log(crate::log::LogError),
    /// The simulation could not be built.
    Sim(crate::sim::SimError),
    /// Writing output failed.
    Io(std::io::Error),
}

impl std::fmt::Display for RunError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Robot(m) => write!(f, "robot: {m}"),
            Self::Frame { index, reason } => write!(f, "frame {index}: {reason}"),
            Self::Log(e) => write!(f, "log: {e}"),
            Self::Sim(e) => write!(f, "{e}"),
            Self::Io(e) => write!(f, "output: {e}"),
        }
    }
}

impl std::error::Error for RunError {}

impl From<std::io::Error> for RunError {
    fn from(e: std::io::Error) -> Self {
        Self::Io(e)
    }
}

fn body_config(robot: &RobotSpec) -> Result<BodyConfig<MAX_MODULES, MAX_SENSORS>, RunError> {
    let n = robot.modules.len();
    if n == 0 || n > MAX_MODULES {
        return Err(RunError::Robot(format!(
            "{n} modules; this navigator takes 1 to {MAX_MODULES}"
        )));
    }
    let sensors: usize = robot.modules.iter().map(|m| m.sensors.len()).sum();
    if sensors > MAX_SENSORS {
        return Err(RunError::Robot(format!(
            "{sensors} contact sensors; this navigator takes at most {MAX_SENSORS}"
        )));
    }
    let mut cfg = BodyConfig::uniform(
        n,
        ModuleSpec {
            length_m: 0.0,
            radius_m: 0.0,
        },
    );
    for (slot, m) in cfg.modules.iter_mut().zip(&robot.modules) {
        *slot = ModuleSpec {
            length_m: m.length_m,
            radius_m: m.radius_m,
        };
    }
    for (k, m) in robot.modules.iter().enumerate() {
        for s in &m.sensors {
            cfg.push_sensor(SensorSpec {
                module: u16::try_from(k).unwrap_or(u16::MAX),
                axial_m: s.axial_m,
                angle_rad: s.angle_deg.to_radians(),
                cap_polar_rad: s.cap_polar_deg.map(f64::to_radians),
            });
        }
    }
    cfg.joint_sigma_rad = 0.01;
    Ok(cfg)
}

fn layout<const N: usize>(robot: &RobotSpec) -> Result<ProbeLayout<N>, RunError> {
    let sigma = robot.probe.port_noise_pa;
    let err = |e| RunError::Robot(format!("probe layout: {e:?}"));
    match &robot.probe.layout {
        ProbeLayoutSpec::FivePort { cone_angle_deg } if N == 5 => {
            let l = ProbeLayout::<5>::five_port(cone_angle_deg.to_radians(), sigma).map_err(err)?;
            custom_from(&l.normals().map(|n| [n.x, n.y, n.z]), sigma)
        }
        ProbeLayoutSpec::SevenPort { cone_angle_deg } if N == 7 => {
            let l =
                ProbeLayout::<7>::seven_port(cone_angle_deg.to_radians(), sigma).map_err(err)?;
            custom_from(&l.normals().map(|n| [n.x, n.y, n.z]), sigma)
        }
        ProbeLayoutSpec::Custom { normals } if normals.len() == N => custom_from(normals, sigma),
        other => Err(RunError::Robot(format!(
            "the probe layout ({other}) does not have {N} ports"
        ))),
    }
}

fn custom_from<const N: usize>(
    normals: &[[f64; 3]],
    sigma: f64,
) -> Result<ProbeLayout<N>, RunError> {
    let ports: Vec<Port> = normals
        .iter()
        .map(|n| Port {
            normal: *n,
            bias_pa: 0.0,
            sigma_pa: sigma,
        })
        .collect();
    let arr: [Port; N] = ports
        .try_into()
        .map_err(|_| RunError::Robot(format!("probe needs {N} ports")))?;
    ProbeLayout::custom(arr).map_err(|e| RunError::Robot(format!("probe layout: {e:?}")))
}

fn onboard<const P: usize>(
    robot: &RobotSpec,
    gas: &GasSpec,
) -> Result<OnboardConfig<P, MAX_MODULES, MAX_SENSORS>, RunError> {
    let g = IdealGas::new(gas.gamma, gas.r_j_per_kg_k)
        .map_err(|e| RunError::Robot(format!("gas: {e:?}")))?;
    let mut cfg = OnboardConfig::new(body_config(robot)?, layout::<P>(robot)?, g);
    cfg.nav.decide.cruise_speed_m_per_s = robot
        .max_speed_m_per_s
        .min(cfg.nav.decide.cruise_speed_m_per_s);
    // Flow counts as lost below what the transducers can resolve: five
    // times the port noise (a 5-sigma floor; common practice).
    cfg.nav.decide.min_dynamic_pressure_pa = 5.0 * robot.probe.port_noise_pa;
    Ok(cfg)
}

/// A navigator of whichever port count the robot has.
#[derive(Debug)]
pub enum AnyNavigator {
    /// 5-port head.
    Five(Box<Ports5>),
    /// 7-port head.
    Seven(Box<Ports7>),
}

impl AnyNavigator {
    /// Build for a robot and gas.
    ///
    /// # Errors
    /// [`RunError::Robot`] when the robot does not fit or is invalid.
    pub fn new(robot: &RobotSpec, gas: &GasSpec) -> Result<Self, RunError> {
        let ports = match &robot.probe.layout {
            ProbeLayoutSpec::FivePort { .. } => 5,
            ProbeLayoutSpec::SevenPort { .. } => 7,
            ProbeLayoutSpec::Custom { normals } => normals.len(),
        };
        let bad = |e| RunError::Robot(format!("{e:?}"));
        match ports {
            5 => Ok(Self::Five(Box::new(
                Ports5::new(onboard::<5>(robot, gas)?).map_err(bad)?,
            ))),
            7 => Ok(Self::Seven(Box::new(
                Ports7::new(onboard::<7>(robot, gas)?).map_err(bad)?,
            ))),
            n => Err(RunError::Robot(format!(
                "{n}-port probe: this build runs 5- and 7-port heads"
            ))),
        }
    }

    /// One step on a host frame.
    ///
    /// # Errors
    /// A message when the frame does not fit the navigator's capacities.
    pub fn step(&mut self, f: &FrameRecord) -> Result<Command, String> {
        // The frame is used where it was built, inside the `Result` (moving
        // it out would copy some kilobytes a step).
        match self {
            Self::Five(n) => match &f.to_sensor_frame() {
                Ok(frame) => Ok(n.step(frame)),
                Err(e) => Err(e.to_string()),
            },
            Self::Seven(n) => match &f.to_sensor_frame() {
                Ok(frame) => Ok(n.step(frame)),
                Err(e) => Err(e.to_string()),
            },
        }
    }

    /// Snapshot of what the navigator believes, for plots.
    #[must_use]
    pub fn snapshot(&self) -> Snapshot {
        match self {
            Self::Five(n) => snapshot_of(n),
            Self::Seven(n) => snapshot_of(n),
        }
    }
}

/// What the navigator believes at one moment (for plots).
#[derive(Debug, Clone, Default)]
pub struct Snapshot {
    /// Last head cross-section: centre, axis, radius.
    pub section: Option<([f64; 3], [f64; 3], f64)>,
    /// Fused flow direction (where the gas moves), map frame.
    pub flow_dir: Option<[f64; 3]>,
    /// Junctions: position, chosen branch direction, rejected (direction, reason).
    pub junctions: Vec<crate::plot::JunctionMark>,
    /// Wall points touched in the latest frame, map frame.
    pub wall_points: Vec<[f64; 3]>,
}

fn snapshot_of<
    const P: usize,
    const J: usize,
    const C: usize,
    const M: usize,
    const S: usize,
    const TW: usize,
    const ST: usize,
    const W: usize,
    const JN: usize,
>(
    n: &FrameNavigator<P, J, C, M, S, TW, ST, W, JN>,
) -> Snapshot {
    let section = n.last_section().and_then(|s| {
        let c = s.centre_map_m()?;
        let d = s.clear_diameter_m()?;
        Some((
            [c.x, c.y, c.z],
            [s.axis_map.x, s.axis_map.y, s.axis_map.z],
            0.5 * d,
        ))
    });
    let flow_dir = n.navigator().flow_filter().est.velocity_dir_map;
    let junctions = n
        .navigator()
        .map()
        .junctions
        .iter()
        .map(|j| {
            let mut taken = None;
            let mut rejected = Vec::new();
            for b in j.branches.iter().take(usize::from(j.branch_count)) {
                let text = branch_status_text(&b.status, b.origin, b.evidence.samples);
                match b.status {
                    nav_core::map::BranchStatus::Entered => taken = Some(b.direction_map),
                    nav_core::map::BranchStatus::Unexplored
                        if b.origin != nav_core::map::BranchOrigin::Guessed => {}
                    _ => rejected.push((b.direction_map, text)),
                }
            }
            crate::plot::JunctionMark {
                position_m: j.anchor_position_m,
                taken,
                rejected,
                seen_by_flow: j.seen_by_flow,
            }
        })
        .collect();
    let last = n.tactile().last_time_s();
    let wall_points = n
        .tactile()
        .points()
        .filter(|p| p.touched && Some(p.time_s) == last)
        .map(|p| [p.point_map_m.x, p.point_map_m.y, p.point_map_m.z])
        .collect();
    Snapshot {
        section,
        flow_dir,
        junctions,
        wall_points,
    }
}

/// A branch's status as plots say it: a guessed branch not yet tried says
/// so (its "weaker flow" of 0 kg/s is only its rank), the others their
/// status and reason.
fn branch_status_text(
    s: &nav_core::map::BranchStatus,
    origin: nav_core::map::BranchOrigin,
    samples: u32,
) -> String {
    use nav_core::map::BranchStatus as B;
    match s {
        B::Rejected(_) | B::Unexplored
            if origin == nav_core::map::BranchOrigin::Guessed && samples == 0 =>
        {
            "guessed, not tried".to_string()
        }
        B::Unexplored => "unexplored".to_string(),
        B::Entered => "entered".to_string(),
        B::Rejected(r) => format!("rejected: {}", reject_text(r)),
        B::DeadEnd(c) => format!("dead end: {c:?}").to_lowercase(),
    }
}

fn reject_text(r: &nav_core::map::RejectReason) -> String {
    use nav_core::map::RejectReason as R;
    match *r {
        R::TooNarrow {
            width_m,
            required_m,
        } => format!("too narrow {width_m:.2} < {required_m:.2} m"),
        R::CameFrom { .. } => "came from".to_string(),
        R::WeakerFlow {
            flux_kg_per_s,
            chosen_flux_kg_per_s,
        } => format!("weaker {flux_kg_per_s:.3} < {chosen_flux_kg_per_s:.3} kg/s"),
        R::NoFlow { flux_kg_per_s } => format!("no flow ({flux_kg_per_s:.4} kg/s)"),
    }
}

/// One line of the decision trace.
#[derive(Debug, Serialize)]
pub struct TraceLine<'a> {
    /// Step index, from 0.
    pub step: u64,
    /// The command, with its decision record and health flags.
    pub command: &'a Command,
}

/// Writes trace lines and keeps the digest and summary counters.
#[derive(Debug)]
pub struct TraceSink<W: Write> {
    out: W,
    digest: Fnv64,
    buf: Vec<u8>,
    steps: u64,
    mode_changes: u64,
    last_mode: Option<nav_core::health::OperatingMode>,
    reasons: BTreeMap<String, u64>,
    held_steps: u64,
    failed_ports_mask: u32,
    failed_contacts_mask: u64,
    last_reason: Option<String>,
}

impl<W: Write> TraceSink<W> {
    /// A sink writing to `out`.
    pub fn new(out: W) -> Self {
        Self {
            out,
            digest: Fnv64::new(),
            buf: Vec::with_capacity(2048),
            steps: 0,
            mode_changes: 0,
            last_mode: None,
            reasons: BTreeMap::new(),
            held_steps: 0,
            failed_ports_mask: 0,
            failed_contacts_mask: 0,
            last_reason: None,
        }
    }

    /// Record one command.
    ///
    /// # Errors
    /// Output errors.
    pub fn push(&mut self, c: &Command) -> Result<(), RunError> {
        self.buf.clear();
        serde_json::to_writer(
            &mut self.buf,
            &TraceLine {
                step: self.steps,
                command: c,
            },
        )
        .map_err(|e| RunError::Io(std::io::Error::other(e)))?;
        self.buf.push(b'\n');
        self.digest.bytes(&self.buf);
        self.out.write_all(&self.buf)?;
        self.steps += 1;
        if self.last_mode.is_some_and(|m| m != c.mode) {
            self.mode_changes += 1;
        }
        self.last_mode = Some(c.mode);
        let reason = format!("{:?}", c.record.reason);
        *self.reasons.entry(reason.clone()).or_insert(0) += 1;
        self.last_reason = Some(reason);
        if c.speed_m_per_s == 0.0 {
            self.held_steps += 1;
        }
        self.failed_ports_mask |= c.health.failed_ports;
        self.failed_contacts_mask |= c.health.failed_contacts;
        Ok(())
    }

    /// The digest so far, as 16 hex digits.
    #[must_use]
    pub fn digest_hex(&self) -> String {
        format!("{:016x}", self.digest.finish())
    }

    /// Finish: flush and hand back the writer.
    ///
    /// # Errors
    /// Output errors.
    pub fn finish(mut self) -> Result<(W, TraceStats), RunError> {
        self.out.flush()?;
        let stats = TraceStats {
            steps: self.steps,
            trace_digest: format!("{:016x}", self.digest.finish()),
            mode_changes: self.mode_changes,
            reasons: self.reasons,
            held_steps: self.held_steps,
            failed_ports_mask: self.failed_ports_mask,
            failed_ports_count: self.failed_ports_mask.count_ones(),
            failed_contacts_mask: self.failed_contacts_mask,
            failed_contacts_count: self.failed_contacts_mask.count_ones(),
            last_reason: self.last_reason,
        };
        Ok((self.out, stats))
    }
}

/// What a trace says in aggregate.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TraceStats {
    /// Steps.
    pub steps: u64,
    /// FNV-1a 64 of the trace bytes.
    pub trace_digest: String,
    /// Operating-mode changes.
    pub mode_changes: u64,
    /// Steps per reason code.
    pub reasons: BTreeMap<String, u64>,
    /// Steps with zero commanded speed.
    pub held_steps: u64,
    /// Bit mask of the ports reported failed at any step (bit k: port k).
    pub failed_ports_mask: u32,
    /// Ports reported failed at any step (the bits set in the mask).
    pub failed_ports_count: u32,
    /// Bit mask of the contact sensors reported failed at any step (bit k:
    /// sensor k in configuration order).
    pub failed_contacts_mask: u64,
    /// Contact sensors reported failed at any step.
    pub failed_contacts_count: u32,
    /// Reason code of the last step.
    pub last_reason: Option<String>,
}

/// The summary written beside a trace.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunSummary {
    /// What was run: `demo:<key>`, a scenario file, or a log file.
    pub input: String,
    /// Scenario name, when simulated.
    pub scenario: Option<String>,
    /// Seed, when simulated.
    pub seed: Option<u64>,
    /// How the run ended.
    pub outcome: String,
    /// First and last frame times, s.
    pub time_span_s: [f64; 2],
    /// Trace aggregate.
    pub trace: TraceStats,
    /// Ground truth, when simulated (the simulator's own scoring).
    pub truth: Option<crate::sim::truth::Outcome>,
    /// Faults seen: injected by the simulator or logged as events.
    pub faults_seen: Vec<String>,
    /// Probe solves that failed, and frames the tactile layer refused.
    pub probe_errors: u64,
    /// Frames the tactile layer refused.
    pub tactile_errors: u64,
    /// Damage skipped by a salvaging read of a log (`None`: not a
    /// salvaging read, or nothing was damaged).
    pub salvaged: Option<SalvageReport>,
}

/// What a salvaging read skipped.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SalvageReport {
    /// Damaged places.
    pub places: u64,
    /// Bytes skipped.
    pub bytes_skipped: u64,
    /// Records known lost.
    pub records_lost: u64,
    /// The places, in file order (at most the reader's listing limit).
    pub damage: Vec<crate::log::Damage>,
}

/// Options of a live run.
#[derive(Debug, Clone)]
pub struct LiveOptions {
    /// Stop after this much simulated time, s (default: the scenario's
    /// duration).
    pub max_time_s: Option<f64>,
    /// Keep a plot scene (path, sections, flow, contacts every this many
    /// steps; 0: no scene).
    pub scene_every: u64,
}

impl Default for LiveOptions {
    fn default() -> Self {
        Self {
            max_time_s: None,
            scene_every: 25,
        }
    }
}

/// Everything a live run produced.
#[derive(Debug)]
pub struct LiveResult {
    /// The summary.
    pub summary: RunSummary,
    /// The plot scene (empty when not asked for).
    pub scene: crate::plot::Scene,
}

fn counters(n: &AnyNavigator) -> (u64, u64) {
    let c = match n {
        AnyNavigator::Five(n) => n.counters(),
        AnyNavigator::Seven(n) => n.counters(),
    };
    (c.probe_errors, c.tactile_errors)
}

/// Build a simulator from `demo:<key>`, `world:<family>[,key=value...]`
/// (a generated world; the seed picks the world, default 1) or a scenario
/// file path, with an optional seed override.
///
/// # Errors
/// [`RunError::Sim`] when the scenario cannot be read, is refused, or its
/// flow cannot be solved.
pub fn build_sim(input: &str, seed: Option<u64>) -> Result<Sim, RunError> {
    use crate::sim::scenario::Scenario;
    if let Some(spec) = input.strip_prefix("world:") {
        let spec = crate::sim::worlds::WorldSpec::parse(spec)
            .map_err(|e| RunError::Sim(crate::sim::SimError::Generate(e)))?;
        let (_, sim) = crate::sim::worlds::generate(&spec, seed.unwrap_or(1))
            .map_err(|e| RunError::Sim(crate::sim::SimError::Generate(e)))?;
        return Ok(sim);
    }
    let mut sc = if let Some(key) = input.strip_prefix("demo:") {
        match crate::sim::demos::demo(key) {
            Some(r) => r.map_err(|e| RunError::Sim(e.into()))?,
            None => {
                return Err(RunError::Sim(crate::sim::SimError::UnknownDemo(
                    key.to_string(),
                )));
            }
        }
    } else {
        let text =
            std::fs::read_to_string(input).map_err(|e| RunError::Robot(format!("{input}: {e}")))?;
        Scenario::from_toml_str(&text).map_err(|e| RunError::Sim(e.into()))?
    };
    if let Some(s) = seed {
        sc.seed = s;
    }
    Sim::new(sc).map_err(RunError::Sim)
}

/// Run the navigator closed-loop in a simulation, writing the trace to
/// `trace` and, when `log` is given, every frame to it as a log.
///
/// # Errors
/// [`RunError`] when the robot does not fit, a frame does not fit, or
/// output fails.
pub fn run_live<T: Write, L: Write>(
    input: &str,
    mut sim: Sim,
    trace: T,
    log: Option<LogWriter<L>>,
    opts: &LiveOptions,
) -> Result<(LiveResult, Option<L>), RunError> {
    let robot = sim.robot_spec().clone();
    let gas = sim.gas_spec();
    let mut nav = AnyNavigator::new(&robot, &gas)?;
    let mut sink = TraceSink::new(trace);
    let mut log = log;
    let dt = sim.time_step_s();
    let limit = opts.max_time_s.unwrap_or(sim.scenario().duration_s);
    let mut scene = crate::plot::Scene {
        title: format!("{} (seed {})", sim.scenario().name, sim.scenario().seed),
        ..crate::plot::Scene::default()
    };
    let first_time = sim.time_s();
    let mut faults: Vec<String> = Vec::new();
    let mut frame = sim.frame().clone();
    let mut step = 0u64;
    let outcome;
    loop {
        if let Some(w) = log.as_mut() {
            w.write_frame(&frame).map_err(RunError::Log)?;
        }
        let cmd = nav.step(&frame).map_err(|reason| RunError::Frame {
            index: step,
            reason,
        })?;
        sink.push(&cmd)?;
        if opts.scene_every > 0 && step.is_multiple_of(opts.scene_every) {
            let t = sim.true_state();
            let active = u32::try_from(active_fault_labels(&sim).len()).unwrap_or(u32::MAX);
            add_to_scene(&mut scene, t.head_position_m, &nav, &cmd, active);
        }
        for f in active_fault_labels(&sim) {
            if !faults.contains(&f) {
                if let Some(w) = log.as_mut() {
                    w.write_event(&EventRecord {
                        time_s: sim.time_s(),
                        event: Event::FaultInjected {
                            channel: f.clone(),
                            fault: f.clone(),
                        },
                    })
                    .map_err(RunError::Log)?;
                }
                faults.push(f);
            }
        }
        if sim.reached_source() {
            outcome = "reached source".to_string();
            break;
        }
        if matches!(cmd.record.reason, nav_core::decide::ReasonCode::GaveUp) {
            outcome = "navigator gave up".to_string();
            break;
        }
        if sim.time_s() - first_time + dt > limit + 1e-9 {
            outcome = "time limit".to_string();
            break;
        }
        frame = sim
            .step(&MotionCommand {
                heading_map: cmd.heading_map,
                speed_m_per_s: cmd.speed_m_per_s,
            })
            .clone();
        step += 1;
    }
    let snap = nav.snapshot();
    scene.junctions = snap.junctions;
    scene.start_m = scene.path.first().copied();
    scene.path_label = "true path".to_string();
    if opts.scene_every > 0 {
        scene.path.push(sim.true_state().head_position_m);
        scene.end = Some((sim.true_state().head_position_m, outcome.clone()));
    }
    let o = sim.outcome();
    let (probe_errors, tactile_errors) = counters(&nav);
    let (_, stats) = sink.finish()?;
    let log_out = match log {
        Some(w) => Some(w.finish(&outcome).map_err(RunError::Log)?),
        None => None,
    };
    let summary = RunSummary {
        input: input.to_string(),
        scenario: Some(sim.scenario().name.clone()),
        seed: Some(sim.scenario().seed),
        outcome,
        time_span_s: [first_time, sim.time_s()],
        trace: stats,
        truth: Some(o.clone()),
        faults_seen: faults,
        probe_errors,
        tactile_errors,
        salvaged: None,
    };
    add_world_to_scene(&sim, &mut scene);
    Ok((LiveResult { summary, scene }, log_out))
}

/// Add one moment to a plot scene: the head position (true, or odometry),
/// what the navigator believes, and a time-strip sample.
fn add_to_scene(
    scene: &mut crate::plot::Scene,
    head_m: [f64; 3],
    nav: &AnyNavigator,
    cmd: &Command,
    faults_active: u32,
) {
    scene.path.push(head_m);
    let snap = nav.snapshot();
    if let Some((c, a, r)) = snap.section {
        scene.sections.push(crate::plot::SectionMark {
            centre_m: c,
            axis: a,
            radius_m: r,
        });
    }
    // One flow arrow per metre travelled keeps the picture legible
    // whatever the speed.
    let far_enough = scene.flow.last().is_none_or(|a| {
        let d: f64 = (0..3).map(|i| (a.position_m[i] - head_m[i]).powi(2)).sum();
        d >= 1.0
    });
    if far_enough && let Some(d) = snap.flow_dir {
        scene.flow.push(crate::plot::FlowArrow {
            position_m: head_m,
            direction: d,
            strength: 1.0,
        });
    }
    scene.contacts.extend(snap.wall_points);
    scene.timeline.push(crate::plot::TimeSample {
        time_s: cmd.time_s,
        speed_m_per_s: cmd.speed_m_per_s,
        dynamic_pressure_pa: cmd.record.dynamic_pressure_pa,
        standoff_m: cmd.record.standoff_m,
        mode: format!("{:?}", cmd.mode),
        reason: format!("{:?}", cmd.record.reason),
        faults_active,
        junction: cmd.record.branch.map(|b| {
            let statuses: Vec<String> = b
                .status
                .iter()
                .zip(b.origin.iter().zip(b.samples.iter()))
                .take(usize::from(b.count))
                .map(|(s, (o, n))| branch_status_text(s, *o, *n))
                .collect();
            crate::plot::junction_label(
                u64::from(b.junction),
                b.seen_by_flow,
                b.chosen.map(u64::from),
                &statuses,
            )
        }),
    });
}

/// Labels of the scenario faults active now.
fn active_fault_labels(sim: &Sim) -> Vec<String> {
    let t = sim.time_s();
    sim.scenario()
        .faults
        .iter()
        .filter(|f| f.active(t))
        .map(ToString::to_string)
        .collect()
}

/// Draw the simulator's true walls and centrelines into a scene.
pub fn add_world_to_scene(sim: &Sim, scene: &mut crate::plot::Scene) {
    let g = &sim.world().geometry;
    for (c, cg) in g.conduits.iter().enumerate() {
        let n = ((cg.length_m / 0.25).ceil() as usize).clamp(2, 400);
        let mut centre = Vec::with_capacity(n + 1);
        let mut left = Vec::with_capacity(n + 1);
        let mut right = Vec::with_capacity(n + 1);
        let mut up = Vec::with_capacity(n + 1);
        let mut down = Vec::with_capacity(n + 1);
        for i in 0..=n {
            let s = cg.length_m * i as f64 / n as f64;
            let p = g.point_at(c, s);
            let t = g.tangent_at(c, s);
            let r = g.radius_at(c, s);
            centre.push(p);
            // Horizontal normal for the top view, vertical for the side view.
            let h = libm::sqrt(t[0] * t[0] + t[1] * t[1]).max(1e-9);
            let nx = [-t[1] / h, t[0] / h, 0.0];
            left.push([p[0] + r * nx[0], p[1] + r * nx[1], p[2]]);
            right.push([p[0] - r * nx[0], p[1] - r * nx[1], p[2]]);
            up.push([p[0], p[1], p[2] + r]);
            down.push([p[0], p[1], p[2] - r]);
        }
        scene.centrelines.push(centre);
        // Side walls in the top view, roof and floor in the side view (the
        // others project onto the centreline); each broken where another
        // conduit opens into this one.
        scene.walls_top.extend(outside_other_tubes(g, c, &left));
        scene.walls_top.extend(outside_other_tubes(g, c, &right));
        scene.walls_side.extend(outside_other_tubes(g, c, &up));
        scene.walls_side.extend(outside_other_tubes(g, c, &down));
    }
    let sc = sim.scenario();
    let mut degree = vec![0u32; sc.nodes.len()];
    for cg in &g.conduits {
        for n in [cg.from, cg.to] {
            if let Some(d) = degree.get_mut(n) {
                *d += 1;
            }
        }
    }
    use crate::sim::scenario::NodeKind;
    for (n, d) in sc.nodes.iter().zip(&degree) {
        let role = match n.kind {
            NodeKind::Exit { .. } => Some(crate::plot::NodeRole::Exit),
            NodeKind::Junction if *d <= 1 => Some(crate::plot::NodeRole::BlindEnd),
            NodeKind::Junction => None,
            _ => Some(crate::plot::NodeRole::Source),
        };
        if let Some(role) = role {
            scene.nodes.push(crate::plot::NodeMark {
                position_m: n.position_m,
                role,
                label: n.id.clone(),
            });
        }
    }
    scene.source_m = sim
        .true_path()
        .and_then(|p| sim.scenario().nodes.get(p.source))
        .map(|n| n.position_m);
}

/// The runs of `line` (a wall of conduit `c`) that lie outside every other
/// conduit: the wall stops where another tube opens into this one.
fn outside_other_tubes(
    g: &crate::sim::geometry::Geometry,
    c: usize,
    line: &[[f64; 3]],
) -> Vec<Vec<[f64; 3]>> {
    let mut runs = Vec::new();
    let mut run: Vec<[f64; 3]> = Vec::new();
    for p in line {
        let inside_other = g.candidates(*p).iter().any(|&pi| {
            g.pieces.get(pi as usize).is_some_and(|piece| {
                let h = piece.locate(pi, *p);
                h.conduit as usize != c && h.clearance_m > 0.01
            })
        });
        if inside_other {
            if run.len() >= 2 {
                runs.push(std::mem::take(&mut run));
            }
            run.clear();
        } else {
            run.push(*p);
        }
    }
    if run.len() >= 2 {
        runs.push(run);
    }
    runs
}

/// Replay a log through the navigator for a picture: the odometry path,
/// what the navigator believed (contacts, sections, flow, junctions) and
/// the time strip; no true walls (a log holds no truth).
///
/// # Errors
/// As [`run_log`].
pub fn scene_of_log<R: std::io::Read>(
    input: &str,
    reader: R,
    salvage: bool,
    every: u64,
) -> Result<(RunSummary, crate::plot::Scene), RunError> {
    let opts = if salvage {
        ReadOptions::salvage()
    } else {
        ReadOptions::default()
    };
    let mut r = LogReader::open(reader, opts).map_err(RunError::Log)?;
    let header: LogHeader = r.header().clone();
    let mut nav = AnyNavigator::new(&header.robot, &header.gas)?;
    let mut scene = crate::plot::Scene {
        title: format!("{input} (recorded log)"),
        path_label: "odometry path".to_string(),
        ..crate::plot::Scene::default()
    };
    let mut index = 0u64;
    let mut last = None;
    while let Some(rec) = r.next_record().map_err(RunError::Log)? {
        if let Record::Frame(f) = rec {
            let cmd = nav
                .step(&f)
                .map_err(|reason| RunError::Frame { index, reason })?;
            if let Some(p) = f.pose {
                last = Some(p.position_m);
                if index.is_multiple_of(every.max(1)) {
                    let failed = cmd.health.failed_ports.count_ones()
                        + cmd.health.failed_contacts.count_ones();
                    add_to_scene(&mut scene, p.position_m, &nav, &cmd, failed);
                }
            }
            index += 1;
        }
    }
    scene.junctions = nav.snapshot().junctions;
    scene.start_m = scene.path.first().copied();
    if let Some(p) = last {
        scene.path.push(p);
    }
    drop(r);
    Ok((
        RunSummary {
            input: input.to_string(),
            scenario: header.provenance.get("scenario").cloned(),
            seed: header.provenance.get("seed").and_then(|s| s.parse().ok()),
            outcome: "end of log".to_string(),
            time_span_s: [
                scene.timeline.first().map_or(f64::NAN, |t| t.time_s),
                scene.timeline.last().map_or(f64::NAN, |t| t.time_s),
            ],
            trace: TraceSink::new(std::io::sink()).finish()?.1,
            truth: None,
            faults_seen: Vec::new(),
            probe_errors: 0,
            tactile_errors: 0,
            salvaged: None,
        },
        {
            let mut sc = scene;
            sc.end = last.map(|p| (p, "end of log".to_string()));
            sc
        },
    ))
}

/// Replay a log through the navigator, writing the trace.
///
/// # Errors
/// [`RunError::Log`] for damage (unless `salvage`), [`RunError::Robot`]
/// when the header's robot does not fit, [`RunError::Frame`] for a frame
/// that does not fit.
pub fn run_log<R: std::io::Read, T: Write>(
    input: &str,
    reader: R,
    trace: T,
    salvage: bool,
) -> Result<RunSummary, RunError> {
    let opts = if salvage {
        ReadOptions::salvage()
    } else {
        ReadOptions::default()
    };
    let mut r = LogReader::open(reader, opts).map_err(RunError::Log)?;
    let header: LogHeader = r.header().clone();
    let mut nav = AnyNavigator::new(&header.robot, &header.gas)?;
    let mut sink = TraceSink::new(trace);
    let mut span = [f64::NAN, f64::NAN];
    let mut faults = Vec::new();
    let mut index = 0u64;
    while let Some(rec) = r.next_record().map_err(RunError::Log)? {
        match rec {
            Record::Frame(f) => {
                if span[0].is_nan() {
                    span[0] = f.time_s;
                }
                span[1] = f.time_s;
                let cmd = nav
                    .step(&f)
                    .map_err(|reason| RunError::Frame { index, reason })?;
                sink.push(&cmd)?;
                index += 1;
            }
            Record::Event(e) => {
                if let Event::FaultInjected { fault, .. } = e.event
                    && !faults.contains(&fault)
                {
                    faults.push(fault);
                }
            }
            Record::End(_) => {}
        }
    }
    let (probe_errors, tactile_errors) = counters(&nav);
    let (_, stats) = sink.finish()?;
    let st = r.stats();
    let salvaged = (st.damaged_places > 0).then(|| SalvageReport {
        places: st.damaged_places,
        bytes_skipped: st.bytes_skipped,
        records_lost: st.records_lost,
        damage: r.damage().to_vec(),
    });
    let mut outcome = if r.saw_end() {
        "end of log".to_string()
    } else {
        "log ended without its end record".to_string()
    };
    if let Some(s) = &salvaged {
        outcome = format!(
            "{outcome}, salvaged past {} damaged {}",
            s.places,
            crate::report::plural(s.places, "place", "places")
        );
    }
    Ok(RunSummary {
        input: input.to_string(),
        scenario: header.provenance.get("scenario").cloned(),
        seed: header.provenance.get("seed").and_then(|s| s.parse().ok()),
        outcome,
        time_span_s: span,
        trace: stats,
        truth: None,
        faults_seen: faults,
        probe_errors,
        tactile_errors,
        salvaged,
    })
}

/// A log header for a simulation.
#[must_use]
pub fn header_for(sim: &Sim, input: &str) -> LogHeader {
    let mut h = LogHeader::new(sim.robot_spec().clone(), sim.gas_spec());
    h.frame_period_s = Some(sim.time_step_s());
    h.provenance.insert(
        "generator".into(),
        format!("replay {}", env!("CARGO_PKG_VERSION")),
    );
    h.provenance.insert("input".into(), input.to_string());
    h.provenance
        .insert("scenario".into(), sim.scenario().name.clone());
    h.provenance
        .insert("seed".into(), sim.scenario().seed.to_string());
    h
}

/// One campaign job: a live run of `job.scenario` with `job.seed`, the
/// trace digested but not kept. A `world:` scenario is generated from the
/// seed, and its drawn parameters go into the result.
#[must_use]
pub fn campaign_job(
    job: &crate::campaign::Job,
    max_time_s: Option<f64>,
) -> crate::campaign::SeedResult {
    let rerun = if job.scenario.starts_with("world:") {
        crate::scorecard::rerun_commands(&job.scenario, job.seed, max_time_s)
    } else {
        let t = max_time_s.map_or(String::new(), |t| format!(" --max-time {t}"));
        format!("replay run {} --seed {}{t}", job.scenario, job.seed)
    };
    let fail = |why: String| crate::campaign::SeedResult {
        job: job.index,
        scenario: job.scenario.clone(),
        seed: job.seed,
        min_standoff_m: f64::NAN,
        failure: Some(why),
        expect_reach: true,
        rerun: rerun.clone(),
        ..crate::campaign::SeedResult::default()
    };
    let built = if let Some(spec) = job.scenario.strip_prefix("world:") {
        crate::sim::worlds::WorldSpec::parse(spec)
            .and_then(|w| crate::sim::worlds::generate(&w, job.seed))
            .map(|(w, sim)| (sim, w.parameter_text()))
            .map_err(|e| format!("world: {e}"))
    } else {
        build_sim(&job.scenario, Some(job.seed))
            .map(|sim| (sim, String::new()))
            .map_err(|e| e.to_string())
    };
    let (sim, parameters) = match built {
        Ok(b) => b,
        Err(e) => return fail(e),
    };
    let opts = LiveOptions {
        max_time_s,
        scene_every: 0,
    };
    match run_live::<_, std::io::Sink>(&job.scenario, sim, std::io::sink(), None, &opts) {
        Ok((res, _)) => {
            let s = res.summary;
            let Some(t) = s.truth.as_ref() else {
                return fail("no truth from a live run".into());
            };
            let count = |f: &dyn Fn(&crate::sim::policy::JunctionCall) -> bool| {
                u32::try_from(t.junction_calls.iter().filter(|c| f(c)).count()).unwrap_or(u32::MAX)
            };
            let efficiency = (t.reached_source && t.distance_travelled_m > 0.0)
                .then(|| t.true_path_length_m / t.distance_travelled_m);
            crate::campaign::SeedResult {
                job: job.index,
                scenario: job.scenario.clone(),
                seed: job.seed,
                reached: t.reached_source,
                time_to_source_s: t.reached_at_s,
                wrong_branches: t.wrong_branches,
                min_standoff_m: t.min_standoff_m,
                wall_strikes: t.wall_strikes,
                held_s: t.time_held_s,
                trace_digest: s.trace.trace_digest.clone(),
                failure: if t.reached_source {
                    None
                } else {
                    Some(s.outcome.clone())
                },
                skin_overpress: t.skin_overpress_events,
                touch_steps: t.touch_steps,
                junction_calls: count(&|_| true),
                clear_calls: count(&|c| c.clear),
                wrong_clear_calls: count(&|c| c.clear && c.wrong),
                path_efficiency: efficiency,
                expect_reach: t.true_path_passable,
                parameters,
                rerun,
            }
        }
        Err(e) => fail(e.to_string()),
    }
}

/// Peak resident memory of this process so far, MB (`VmHWM` in
/// `/proc/self/status`; NaN where that file does not exist). For the
/// examples that report memory.
#[must_use]
pub fn peak_rss_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).and_then(|l| {
                l.split_whitespace()
                    .nth(1)
                    .and_then(|v| v.parse::<f64>().ok())
            })
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

#[cfg(test)]
mod scene_tests {
    use super::*;

    /// In the top view the walls are the side walls: none runs down a
    /// centreline (the roof and floor project onto it and belong to the
    /// side view), and none crosses another conduit's opening.
    #[test]
    fn top_view_walls_stay_off_the_centrelines() {
        let sim = build_sim("demo:saltpetre-drift", None).expect("demo");
        let mut scene = crate::plot::Scene::default();
        add_world_to_scene(&sim, &mut scene);
        assert!(!scene.walls_top.is_empty() && !scene.walls_side.is_empty());
        let g = &sim.world().geometry;
        for w in scene.walls_top.iter().flatten() {
            let clearance = g.clearance_m(*w);
            assert!(
                clearance.abs() < 0.02,
                "a top-view wall point {w:?} is {clearance} m inside the network"
            );
        }
        assert!(
            scene
                .nodes
                .iter()
                .any(|n| n.role == crate::plot::NodeRole::BlindEnd),
            "Saltpetre Drift has blind ends"
        );
        assert!(
            scene
                .nodes
                .iter()
                .filter(|n| n.role == crate::plot::NodeRole::Exit)
                .count()
                >= 2
        );
    }
}
