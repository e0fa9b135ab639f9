//! Scenario files: a TOML format of our own for simulated conduit worlds.
//!
//! A scenario names the conduit network, the gas, the robot, its sensors'
//! imperfections, a fault schedule, the start point and a seed. It is read
//! by [`Scenario::from_toml_str`], which refuses physically inconsistent
//! worlds with a [`ScenarioError`] giving line, column and the element at
//! fault. The full reference, with every key, unit and default, is
//! `replay/SCENARIOS.md`; in short:
//!
//! ```toml
//! [scenario]                 # name, description, seed, time_step_s, duration_s
//! name = "Example"
//! seed = 1
//!
//! [gas]                      # species "air" | "water_vapour", temperature_k,
//! species = "air"            # optional viscosity_pa_s
//! temperature_k = 285.0
//!
//! [[node]]                   # id, position_m, kind "junction" | "source" | "exit"
//! id = "portal"
//! position_m = [0.0, 0.0, 0.0]
//! kind = "exit"
//! ambient_pressure_pa = 101325.0   # exits; sources take stagnation_pressure_pa
//!                                   # or mass_flow_kg_per_s
//! [[conduit]]                # id, from, to, via_m (interior centreline vertices),
//! id = "drift"               # radius_m or radius_profile = [[fraction, radius_m], ...],
//! from = "portal"            # roughness_m, compressible
//! to = "face"
//! radius_m = 0.5
//!
//! [robot]                    # speed_limit_m_per_s, module_count, module_length_m,
//! speed_limit_m_per_s = 0.3  # module_radius_m, [[robot.ring]] sensor rings,
//! module_count = 5           # or explicit [[robot.module]] tables; [robot.probe]
//! module_length_m = 0.2
//! module_radius_m = 0.05
//! [robot.probe]
//! layout = "seven_port"
//! head_radius_m = 0.03
//!
//! [sensors.probe]            # noise, bias, latency, lag, misalignment, dropouts;
//! noise_pa = 0.5             # also [sensors.contact], [sensors.odometry],
//!                            # [sensors.joints], [sensors.temperature]
//! [[fault]]                  # kind, at_s, until_s and the kind's own keys
//! kind = "port_blocked"
//! at_s = 30.0
//! port = 2
//!
//! [start]                    # position_m, optional heading
//! position_m = [1.0, 0.0, 0.0]
//! ```
//!
//! Refused with a reason: syntax errors and unknown keys, duplicate or
//! unknown ids, a conduit that starts and ends at one node, non-positive or
//! non-finite radius, length or roughness, a disconnected network, no exit,
//! no source, a compressible conduit that does not start at a stagnation
//! pressure source or has more than one throat, a start point outside every
//! conduit, a robot wider than the conduit it starts in, sensors placed off
//! their module, faults naming ports, modules or sensors that do not exist.

use std::collections::BTreeMap;

use serde::Deserialize;
use toml::Spanned;

use super::geometry::{ConduitShape, Geometry};
use super::vec3::{self, V3};
use crate::record::{GasSpec, ModuleSpec, ProbeLayoutSpec, ProbeSpec, RobotSpec, SensorSpec};
use nav_core::gas::IdealGas;

type S<T> = Spanned<T>;

// ---------------------------------------------------------------- errors

/// What kind of problem a scenario has.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ScenarioErrorKind {
    /// Not valid TOML, a wrong type, or an unknown or missing key.
    Syntax,
    /// An id used twice.
    DuplicateId,
    /// A reference to an id that does not exist.
    UnknownId,
    /// A value out of its range (sign, finiteness, choice).
    BadValue,
    /// A radius that is zero or negative.
    NonPositiveRadius,
    /// Some node cannot be reached from the others.
    Disconnected,
    /// No exit node.
    NoExit,
    /// No source node.
    NoSource,
    /// A compressible conduit that does not fit the nozzle model.
    BadCompressible,
    /// The start point lies outside every conduit.
    StartOutside,
    /// The robot does not fit where it starts.
    RobotTooWide,
    /// A fault names a port, module or sensor that does not exist.
    BadFault,
}

/// A scenario refused, with where and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ScenarioError {
    /// What kind of problem.
    pub kind: ScenarioErrorKind,
    /// 1-based line of the element at fault.
    pub line: usize,
    /// 1-based column (in characters) of the element at fault.
    pub column: usize,
    /// The element at fault, e.g. `conduit "drift-2" radius_m`.
    pub element: String,
    /// Why it is refused.
    pub reason: String,
}

impl core::fmt::Display for ScenarioError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(
            f,
            "line {}, column {}: {}: {}",
            self.line, self.column, self.element, self.reason
        )
    }
}

impl std::error::Error for ScenarioError {}

/// 1-based line and column (in characters) of byte `offset` in `src`.
#[must_use]
pub fn line_column(src: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(src.len());
    let before = src.get(..offset).unwrap_or(src);
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let column = src
        .get(line_start..offset)
        .map_or(1, |s| s.chars().count() + 1);
    (line, column)
}

struct Ctx<'a> {
    src: &'a str,
}

impl Ctx<'_> {
    fn err(
        &self,
        kind: ScenarioErrorKind,
        span: core::ops::Range<usize>,
        element: impl Into<String>,
        reason: impl Into<String>,
    ) -> ScenarioError {
        let (line, column) = line_column(self.src, span.start);
        ScenarioError {
            kind,
            line,
            column,
            element: element.into(),
            reason: reason.into(),
        }
    }
}

// ---------------------------------------------------------------- the document

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Doc {
    scenario: S<MetaDoc>,
    gas: S<GasDoc>,
    #[serde(default)]
    node: Vec<S<NodeDoc>>,
    #[serde(default)]
    conduit: Vec<S<ConduitDoc>>,
    robot: S<RobotDoc>,
    #[serde(default)]
    sensors: SensorsDoc,
    #[serde(default)]
    fault: Vec<S<FaultDoc>>,
    start: S<StartDoc>,
    #[serde(default)]
    scoring: ScoringDoc,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct MetaDoc {
    name: String,
    #[serde(default)]
    description: String,
    #[serde(default)]
    seed: u64,
    time_step_s: Option<S<f64>>,
    duration_s: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct GasDoc {
    species: S<String>,
    temperature_k: S<f64>,
    viscosity_pa_s: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct NodeDoc {
    id: S<String>,
    position_m: S<[f64; 3]>,
    kind: Option<S<String>>,
    ambient_pressure_pa: Option<S<f64>>,
    stagnation_pressure_pa: Option<S<f64>>,
    mass_flow_kg_per_s: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ConduitDoc {
    id: S<String>,
    from: S<String>,
    to: S<String>,
    #[serde(default)]
    via_m: Vec<S<[f64; 3]>>,
    radius_m: Option<S<f64>>,
    radius_profile: Option<S<Vec<S<[f64; 2]>>>>,
    roughness_m: Option<S<f64>>,
    compressible: Option<S<bool>>,
}

#[derive(Debug, Deserialize, Clone)]
#[serde(deny_unknown_fields)]
struct RingDoc {
    axial_m: S<f64>,
    count: S<u32>,
    first_angle_deg: Option<f64>,
    measures_normal: Option<bool>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ModuleDoc {
    length_m: S<f64>,
    radius_m: S<f64>,
    ring: Option<Vec<RingDoc>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ProbeDoc {
    layout: S<String>,
    cone_angle_deg: Option<S<f64>>,
    normals: Option<S<Vec<[f64; 3]>>>,
    head_radius_m: S<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RobotDoc {
    speed_limit_m_per_s: S<f64>,
    turn_rate_limit_rad_per_s: Option<S<f64>>,
    skin_compliance_m: Option<S<f64>>,
    module_count: Option<S<u32>>,
    module_length_m: Option<S<f64>>,
    module_radius_m: Option<S<f64>>,
    #[serde(default)]
    ring: Vec<RingDoc>,
    #[serde(default)]
    module: Vec<S<ModuleDoc>>,
    #[serde(default)]
    nose_cap: Vec<CapRingDoc>,
    probe: S<ProbeDoc>,
}

/// A ring of contact sensors on the head's nose cap.
#[derive(Debug, Deserialize, Clone)]
#[serde(deny_unknown_fields)]
struct CapRingDoc {
    polar_deg: S<f64>,
    count: S<u32>,
    first_angle_deg: Option<f64>,
}

#[derive(Debug, Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct SensorsDoc {
    probe: Option<S<ProbeNoiseDoc>>,
    contact: Option<S<ContactNoiseDoc>>,
    odometry: Option<S<OdometryNoiseDoc>>,
    joints: Option<S<JointNoiseDoc>>,
    temperature: Option<S<TemperatureNoiseDoc>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ProbeNoiseDoc {
    noise_pa: Option<f64>,
    bias_sigma_pa: Option<f64>,
    bias_pa: Option<Vec<f64>>,
    latency_s: Option<f64>,
    time_constant_s: Option<f64>,
    misalignment_deg: Option<[f64; 3]>,
    dropout_probability: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ContactNoiseDoc {
    stiffness_n_per_m: Option<f64>,
    noise_n: Option<f64>,
    threshold_n: Option<f64>,
    normal_noise_rad: Option<f64>,
    dropout_probability: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct OdometryNoiseDoc {
    position_walk_m_per_sqrt_m: Option<f64>,
    attitude_walk_rad_per_sqrt_m: Option<f64>,
    scale_error: Option<f64>,
    dropout_probability: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JointNoiseDoc {
    noise_rad: Option<f64>,
    dropout_probability: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct TemperatureNoiseDoc {
    enabled: Option<bool>,
    noise_k: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct FaultDoc {
    kind: S<String>,
    at_s: S<f64>,
    until_s: Option<S<f64>>,
    port: Option<S<u32>>,
    leak_fraction: Option<S<f64>>,
    module: Option<S<u32>>,
    sensor: Option<S<u32>>,
    drift_m_per_s: Option<[f64; 3]>,
    channel: Option<S<String>>,
    jump_s: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct StartDoc {
    position_m: S<[f64; 3]>,
    heading: Option<S<[f64; 3]>>,
}

#[derive(Debug, Deserialize, Default)]
#[serde(deny_unknown_fields)]
struct ScoringDoc {
    reach_distance_m: Option<f64>,
    wall_sample_spacing_m: Option<f64>,
}

// ---------------------------------------------------------------- resolved types

/// Which gas fills the conduits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GasSpecies {
    /// Dry air ([`IdealGas::DRY_AIR`]).
    Air,
    /// Water vapour as an ideal gas ([`IdealGas::WATER_VAPOUR`]).
    WaterVapour,
}

/// The gas and its state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GasSetting {
    /// Species.
    pub species: GasSpecies,
    /// Temperature (stagnation temperature in compressible conduits), K.
    pub temperature_k: f64,
    /// Dynamic viscosity, Pa s.
    pub viscosity_pa_s: f64,
}

impl GasSetting {
    /// The `nav_core` gas preset.
    #[must_use]
    pub fn ideal_gas(&self) -> IdealGas {
        match self.species {
            GasSpecies::Air => IdealGas::DRY_AIR,
            GasSpecies::WaterVapour => IdealGas::WATER_VAPOUR,
        }
    }
    /// As the shared record type.
    #[must_use]
    pub fn spec(&self) -> GasSpec {
        let g = self.ideal_gas();
        GasSpec {
            gamma: g.gamma(),
            r_j_per_kg_k: g.r_j_per_kg_k(),
        }
    }
}

/// Dynamic viscosity of dry air by Sutherland's law,
/// `mu = 1.716e-5 (T/273.15)^1.5 (273.15 + 110.4)/(T + 110.4)` Pa s
/// (White, *Viscous Fluid Flow*, Sutherland constants for air; recalled).
#[must_use]
pub fn air_viscosity_pa_s(t_k: f64) -> f64 {
    1.716e-5 * libm::pow(t_k / 273.15, 1.5) * (273.15 + 110.4) / (t_k + 110.4)
}

/// Dynamic viscosity of low-pressure water vapour, a straight line through
/// 12.27 uPa s at 373.15 K and 16.18 uPa s at 473.15 K (steam-table values,
/// recalled), clamped below at 8 uPa s.
#[must_use]
pub fn vapour_viscosity_pa_s(t_k: f64) -> f64 {
    (1.227e-5 + 3.91e-8 * (t_k - 373.15)).max(8e-6)
}

/// What a node is.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum NodeKind {
    /// A junction (or a dead end, when one conduit meets it).
    Junction,
    /// A source held at a stagnation pressure, Pa.
    ReservoirSource {
        /// Stagnation pressure, Pa.
        stagnation_pressure_pa: f64,
    },
    /// A source injecting a mass flow, kg/s.
    MassFlowSource {
        /// Mass flow, kg/s.
        mass_flow_kg_per_s: f64,
    },
    /// An exit to ambient pressure, Pa.
    Exit {
        /// Ambient pressure, Pa.
        ambient_pressure_pa: f64,
    },
}

impl NodeKind {
    /// Whether the node is a source of either kind.
    #[must_use]
    pub fn is_source(&self) -> bool {
        matches!(
            self,
            Self::ReservoirSource { .. } | Self::MassFlowSource { .. }
        )
    }
}

/// A node.
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    /// Its id.
    pub id: String,
    /// Map-frame position, m.
    pub position_m: V3,
    /// What it is.
    pub kind: NodeKind,
}

/// A conduit.
#[derive(Debug, Clone, PartialEq)]
pub struct Conduit {
    /// Its id.
    pub id: String,
    /// Centreline and radius profile.
    pub shape: ConduitShape,
    /// Absolute wall roughness, m.
    pub roughness_m: f64,
    /// Solved as a quasi-1-D isentropic nozzle.
    pub compressible: bool,
}

/// Probe imperfections.
#[derive(Debug, Clone, PartialEq)]
pub struct ProbeNoise {
    /// White noise per port, 1 sigma, Pa.
    pub noise_pa: f64,
    /// Fixed per-port bias, Pa (drawn from `bias_sigma_pa` or given).
    pub bias_pa: Vec<f64>,
    /// Sampling latency, s (rounded to whole time steps).
    pub latency_s: f64,
    /// First-order pneumatic lag of each port line, s.
    pub time_constant_s: f64,
    /// Probe misalignment against the head frame: yaw, pitch, roll, deg.
    pub misalignment_deg: [f64; 3],
    /// Chance per frame that the probe sample is lost.
    pub dropout_probability: f64,
}

/// Contact-sensor imperfections and wall stiffness.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ContactNoise {
    /// Wall-plus-skin stiffness, N/m.
    pub stiffness_n_per_m: f64,
    /// Force noise, 1 sigma, N.
    pub noise_n: f64,
    /// Smallest force reported, N.
    pub threshold_n: f64,
    /// Normal-direction noise, 1 sigma, rad.
    pub normal_noise_rad: f64,
    /// Chance per frame that the contact list is lost.
    pub dropout_probability: f64,
}

/// Odometry drift model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OdometryNoise {
    /// Position random walk, m per sqrt(m travelled).
    pub position_walk_m_per_sqrt_m: f64,
    /// Attitude random walk, rad per sqrt(m travelled).
    pub attitude_walk_rad_per_sqrt_m: f64,
    /// Along-track scale error (fraction).
    pub scale_error: f64,
    /// Chance per frame that the pose is lost.
    pub dropout_probability: f64,
}

/// Joint encoder imperfections.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct JointNoise {
    /// Noise per angle, 1 sigma, rad.
    pub noise_rad: f64,
    /// Chance per frame that the joint sample is lost.
    pub dropout_probability: f64,
}

/// Total-temperature probe.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TemperatureNoise {
    /// Whether the head carries one.
    pub enabled: bool,
    /// Noise, 1 sigma, K.
    pub noise_k: f64,
}

/// All sensor imperfections.
#[derive(Debug, Clone, PartialEq)]
pub struct SensorSettings {
    /// Probe.
    pub probe: ProbeNoise,
    /// Contacts.
    pub contact: ContactNoise,
    /// Odometry.
    pub odometry: OdometryNoise,
    /// Joints.
    pub joints: JointNoise,
    /// Temperature.
    pub temperature: TemperatureNoise,
}

/// A sensor channel, for dropouts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Channel {
    /// Probe port pressures.
    Probe,
    /// Head pose.
    Pose,
    /// Joint angles.
    Joints,
    /// Contacts.
    Contacts,
    /// Total temperature.
    Temperature,
    /// Everything.
    All,
}

/// What goes wrong.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FaultKind {
    /// The port's hole is blocked: it holds the pressure it had when it
    /// blocked (the transducer still adds noise).
    PortBlocked {
        /// Port index.
        port: usize,
    },
    /// The port's transducer output freezes at its last reading.
    PortStuck {
        /// Port index.
        port: usize,
    },
    /// The port's line leaks: the reading moves `fraction` of the way from
    /// the port pressure toward the local static pressure.
    PortLeak {
        /// Port index.
        port: usize,
        /// Fraction 0..1.
        fraction: f64,
    },
    /// A contact sensor reports nothing.
    ContactDead {
        /// Module index.
        module: usize,
        /// Sensor index on that module.
        sensor: usize,
    },
    /// The odometry position drifts at a constant rate, map frame, m/s.
    OdometryDrift {
        /// Drift velocity, m/s.
        drift_m_per_s: V3,
    },
    /// A channel reports nothing.
    Dropout {
        /// Which channel.
        channel: Channel,
    },
    /// The frame clock runs `jump_s` ahead (or behind, when negative) of
    /// true time while active.
    ClockJump {
        /// Offset of the stamps, s.
        jump_s: f64,
    },
    /// The frame clock stops: every stamp is the one at onset.
    ClockStuck,
    /// The frame clock restarts from zero at onset (stamps `t - at_s`).
    ClockReset,
    /// Every stamp is NaN.
    ClockNan,
}

/// A scheduled fault, active for `at_s <= t < until_s`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Fault {
    /// What.
    pub kind: FaultKind,
    /// Onset, s.
    pub at_s: f64,
    /// End, s (infinite when not given).
    pub until_s: f64,
}

impl std::fmt::Display for Channel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Self::Probe => "probe",
            Self::Pose => "pose",
            Self::Joints => "joints",
            Self::Contacts => "contacts",
            Self::Temperature => "temperature",
            Self::All => "every channel",
        })
    }
}

impl std::fmt::Display for FaultKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::PortBlocked { port } => write!(f, "port {port} blocked"),
            Self::PortStuck { port } => write!(f, "port {port} stuck"),
            Self::PortLeak { port, fraction } => {
                write!(f, "port {port} leaking ({:.0} %)", 100.0 * fraction)
            }
            Self::ContactDead { module, sensor } => {
                write!(f, "contact sensor {sensor} of module {module} dead")
            }
            Self::OdometryDrift { drift_m_per_s } => {
                let [x, y, z] = *drift_m_per_s;
                write!(f, "odometry drifting ({x:.4}, {y:.4}, {z:.4}) m/s")
            }
            Self::Dropout { channel } => write!(f, "{channel} dropout"),
            Self::ClockJump { jump_s } => write!(f, "clock jumping by {jump_s} s"),
            Self::ClockStuck => write!(f, "clock stuck"),
            Self::ClockReset => write!(f, "clock reset to 0"),
            Self::ClockNan => write!(f, "clock stamps not a number"),
        }
    }
}

/// `port 5 stuck from 45 s to 50 s`; `... from 30 s` when it never ends.
impl std::fmt::Display for Fault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} from {} s", self.kind, self.at_s)?;
        if self.until_s.is_finite() {
            write!(f, " to {} s", self.until_s)?;
        }
        Ok(())
    }
}

impl Fault {
    /// Whether active at `t`.
    #[must_use]
    pub fn active(&self, t: f64) -> bool {
        t >= self.at_s && t < self.until_s
    }
}

/// Motion limits beyond the speed limit in [`RobotSpec`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MotionLimits {
    /// Largest turn rate of the head's direction of travel, rad/s.
    pub turn_rate_limit_rad_per_s: f64,
    /// How far the skin may be pressed into a wall before the head is
    /// stopped, m.
    pub skin_compliance_m: f64,
}

/// Where the robot starts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Start {
    /// Head front-face centre, map frame, m.
    pub position_m: V3,
    /// Head axis (unit); `None`: upstream along the start conduit.
    pub heading: Option<V3>,
    /// Line and column of `[start]` in the source, for later errors.
    pub line_column: (usize, usize),
}

/// Scoring parameters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Scoring {
    /// The source counts as reached within this distance of its node, m.
    pub reach_distance_m: f64,
    /// Spacing of the true wall samples, m.
    pub wall_sample_spacing_m: f64,
}

/// A validated scenario.
#[derive(Debug, Clone, PartialEq)]
pub struct Scenario {
    /// Name.
    pub name: String,
    /// Description.
    pub description: String,
    /// Seed of every noise stream.
    pub seed: u64,
    /// Fixed time step, s.
    pub time_step_s: f64,
    /// Suggested run length, s.
    pub duration_s: f64,
    /// Gas.
    pub gas: GasSetting,
    /// Nodes.
    pub nodes: Vec<Node>,
    /// Conduits.
    pub conduits: Vec<Conduit>,
    /// The robot.
    pub robot: RobotSpec,
    /// Motion limits.
    pub motion: MotionLimits,
    /// Sensor imperfections.
    pub sensors: SensorSettings,
    /// Fault schedule.
    pub faults: Vec<Fault>,
    /// Start.
    pub start: Start,
    /// Scoring.
    pub scoring: Scoring,
}

/// Number of probe ports of a layout.
#[must_use]
pub fn port_count(layout: &ProbeLayoutSpec) -> usize {
    match layout {
        ProbeLayoutSpec::FivePort { .. } => 5,
        ProbeLayoutSpec::SevenPort { .. } => 7,
        ProbeLayoutSpec::Custom { normals } => normals.len(),
    }
}

// ---------------------------------------------------------------- parsing

fn finite_pos(
    ctx: &Ctx,
    v: &S<f64>,
    element: &str,
    kind: ScenarioErrorKind,
) -> Result<f64, ScenarioError> {
    let x = *v.get_ref();
    if x.is_finite() && x > 0.0 {
        Ok(x)
    } else {
        Err(ctx.err(
            kind,
            v.span(),
            element,
            format!("must be finite and positive, got {x}"),
        ))
    }
}

fn finite_nonneg(
    ctx: &Ctx,
    v: f64,
    span: core::ops::Range<usize>,
    element: &str,
) -> Result<f64, ScenarioError> {
    if v.is_finite() && v >= 0.0 {
        Ok(v)
    } else {
        Err(ctx.err(
            ScenarioErrorKind::BadValue,
            span,
            element,
            format!("must be finite and not negative, got {v}"),
        ))
    }
}

fn finite3(ctx: &Ctx, v: &S<[f64; 3]>, element: &str) -> Result<V3, ScenarioError> {
    let x = *v.get_ref();
    if x.iter().all(|c| c.is_finite() && c.abs() < 1e6) {
        Ok(x)
    } else {
        Err(ctx.err(
            ScenarioErrorKind::BadValue,
            v.span(),
            element,
            "coordinates must be finite and within 1e6 m",
        ))
    }
}

fn ring_sensors(
    ctx: &Ctx,
    rings: &[RingDoc],
    length_m: f64,
    element: &str,
) -> Result<Vec<SensorSpec>, ScenarioError> {
    let mut out = Vec::new();
    for (k, r) in rings.iter().enumerate() {
        let ax = *r.axial_m.get_ref();
        if !(ax.is_finite() && (0.0..=length_m).contains(&ax)) {
            return Err(ctx.err(
                ScenarioErrorKind::BadValue,
                r.axial_m.span(),
                format!("{element} ring {k} axial_m"),
                format!("must lie on the module, 0..={length_m} m, got {ax}"),
            ));
        }
        let n = *r.count.get_ref();
        if n == 0 {
            return Err(ctx.err(
                ScenarioErrorKind::BadValue,
                r.count.span(),
                format!("{element} ring {k} count"),
                "a ring needs at least one sensor",
            ));
        }
        let a0 = r.first_angle_deg.unwrap_or(0.0);
        for i in 0..n {
            out.push(SensorSpec {
                axial_m: ax,
                angle_deg: a0 + 360.0 * f64::from(i) / f64::from(n),
                measures_normal: r.measures_normal.unwrap_or(true),
                cap_polar_deg: None,
            });
        }
    }
    Ok(out)
}

/// The nose-cap rings' sensors (appended after the head's skin sensors).
/// A ring at polar angle 0 is the nose tip: one sensor whatever `count`
/// says would be the same point, so `count` must be 1 there.
fn cap_sensors(ctx: &Ctx, rings: &[CapRingDoc]) -> Result<Vec<SensorSpec>, ScenarioError> {
    let mut out = Vec::new();
    for (k, r) in rings.iter().enumerate() {
        let th = *r.polar_deg.get_ref();
        if !(th.is_finite() && (0.0..=90.0).contains(&th)) {
            return Err(ctx.err(
                ScenarioErrorKind::BadValue,
                r.polar_deg.span(),
                format!("robot.nose_cap[{k}] polar_deg"),
                format!("must lie on the nose cap, 0..=90 deg from the head axis, got {th}"),
            ));
        }
        let n = *r.count.get_ref();
        if n == 0 || (th == 0.0 && n != 1) {
            return Err(ctx.err(
                ScenarioErrorKind::BadValue,
                r.count.span(),
                format!("robot.nose_cap[{k}] count"),
                "a ring needs at least one sensor, and the tip (polar_deg 0) exactly one",
            ));
        }
        let a0 = r.first_angle_deg.unwrap_or(0.0);
        for i in 0..n {
            out.push(SensorSpec {
                axial_m: 0.0,
                angle_deg: a0 + 360.0 * f64::from(i) / f64::from(n),
                measures_normal: false,
                cap_polar_deg: Some(th),
            });
        }
    }
    Ok(out)
}

impl Scenario {
    /// Read and validate a scenario file.
    ///
    /// # Errors
    /// [`ScenarioError`] (with line 0 when the file cannot be read).
    pub fn from_file(path: &std::path::Path) -> Result<Self, ScenarioError> {
        let src = std::fs::read_to_string(path).map_err(|e| ScenarioError {
            kind: ScenarioErrorKind::Syntax,
            line: 0,
            column: 0,
            element: path.display().to_string(),
            reason: format!("cannot read: {e}"),
        })?;
        Self::from_toml_str(&src)
    }

    /// Parse and validate scenario text.
    ///
    /// # Errors
    /// [`ScenarioError`] giving line, column, element and reason.
    #[allow(clippy::too_many_lines)]
    pub fn from_toml_str(src: &str) -> Result<Self, ScenarioError> {
        use ScenarioErrorKind as K;
        let ctx = Ctx { src };
        let doc: Doc = toml::from_str(src).map_err(|e| {
            let span = e.span().unwrap_or(0..0);
            ctx.err(K::Syntax, span, "document", e.message().to_string())
        })?;

        // [scenario]
        let meta = doc.scenario.get_ref();
        let time_step_s = match &meta.time_step_s {
            Some(v) => finite_pos(&ctx, v, "scenario.time_step_s", K::BadValue)?,
            None => 0.01,
        };
        let duration_s = match &meta.duration_s {
            Some(v) => finite_pos(&ctx, v, "scenario.duration_s", K::BadValue)?,
            None => 1800.0,
        };

        // [gas]
        let gd = doc.gas.get_ref();
        let species = match gd.species.get_ref().as_str() {
            "air" => GasSpecies::Air,
            "water_vapour" => GasSpecies::WaterVapour,
            other => {
                return Err(ctx.err(
                    K::BadValue,
                    gd.species.span(),
                    "gas.species",
                    format!("unknown species {other:?}: use \"air\" or \"water_vapour\""),
                ));
            }
        };
        let temperature_k = finite_pos(&ctx, &gd.temperature_k, "gas.temperature_k", K::BadValue)?;
        let viscosity_pa_s = match &gd.viscosity_pa_s {
            Some(v) => finite_pos(&ctx, v, "gas.viscosity_pa_s", K::BadValue)?,
            None => match species {
                GasSpecies::Air => air_viscosity_pa_s(temperature_k),
                GasSpecies::WaterVapour => vapour_viscosity_pa_s(temperature_k),
            },
        };
        let gas = GasSetting {
            species,
            temperature_k,
            viscosity_pa_s,
        };

        // [[node]]
        let mut node_index: BTreeMap<String, usize> = BTreeMap::new();
        let mut nodes = Vec::with_capacity(doc.node.len());
        for (i, nd) in doc.node.iter().enumerate() {
            let n = nd.get_ref();
            let id = n.id.get_ref().clone();
            let el = format!("node {id:?}");
            if node_index.insert(id.clone(), i).is_some() {
                return Err(ctx.err(K::DuplicateId, n.id.span(), el, "id used twice"));
            }
            let position_m = finite3(&ctx, &n.position_m, &format!("{el} position_m"))?;
            let kind_s = n.kind.as_ref().map_or("junction", |k| k.get_ref().as_str());
            let kind_span = n.kind.as_ref().map_or(nd.span(), |k| k.span());
            let kind = match kind_s {
                "junction" => NodeKind::Junction,
                "exit" => {
                    let Some(p) = &n.ambient_pressure_pa else {
                        return Err(ctx.err(
                            K::BadValue,
                            kind_span,
                            el,
                            "an exit needs ambient_pressure_pa",
                        ));
                    };
                    NodeKind::Exit {
                        ambient_pressure_pa: finite_pos(
                            &ctx,
                            p,
                            &format!("{el} ambient_pressure_pa"),
                            K::BadValue,
                        )?,
                    }
                }
                "source" => match (&n.stagnation_pressure_pa, &n.mass_flow_kg_per_s) {
                    (Some(p), None) => NodeKind::ReservoirSource {
                        stagnation_pressure_pa: finite_pos(
                            &ctx,
                            p,
                            &format!("{el} stagnation_pressure_pa"),
                            K::BadValue,
                        )?,
                    },
                    (None, Some(m)) => NodeKind::MassFlowSource {
                        mass_flow_kg_per_s: finite_pos(
                            &ctx,
                            m,
                            &format!("{el} mass_flow_kg_per_s"),
                            K::BadValue,
                        )?,
                    },
                    _ => {
                        return Err(ctx.err(
                            K::BadValue,
                            kind_span,
                            el,
                            "a source needs exactly one of stagnation_pressure_pa and mass_flow_kg_per_s",
                        ));
                    }
                },
                other => {
                    return Err(ctx.err(
                        K::BadValue,
                        kind_span,
                        format!("{el} kind"),
                        format!("unknown kind {other:?}: use \"junction\", \"source\" or \"exit\""),
                    ));
                }
            };
            nodes.push(Node {
                id,
                position_m,
                kind,
            });
        }

        // [[conduit]]
        let mut conduit_ids: BTreeMap<String, usize> = BTreeMap::new();
        let mut conduits = Vec::with_capacity(doc.conduit.len());
        for (ci, cd) in doc.conduit.iter().enumerate() {
            let c = cd.get_ref();
            let id = c.id.get_ref().clone();
            let el = format!("conduit {id:?}");
            if conduit_ids.insert(id.clone(), ci).is_some() {
                return Err(ctx.err(K::DuplicateId, c.id.span(), el, "id used twice"));
            }
            let look = |s: &S<String>, what: &str| {
                node_index.get(s.get_ref()).copied().ok_or_else(|| {
                    ctx.err(
                        K::UnknownId,
                        s.span(),
                        format!("{el} {what}"),
                        format!("no node has id {:?}", s.get_ref()),
                    )
                })
            };
            let from = look(&c.from, "from")?;
            let to = look(&c.to, "to")?;
            if from == to {
                return Err(ctx.err(
                    K::BadValue,
                    c.to.span(),
                    format!("{el} to"),
                    "a conduit must join two different nodes",
                ));
            }
            let mut pts = vec![nodes[from].position_m];
            for v in &c.via_m {
                pts.push(finite3(&ctx, v, &format!("{el} via_m"))?);
            }
            pts.push(nodes[to].position_m);
            for (k, w) in pts.windows(2).enumerate() {
                if vec3::dist(w[0], w[1]) < 1e-6 {
                    let span = if k == 0 {
                        c.from.span()
                    } else {
                        c.via_m[k - 1].span()
                    };
                    return Err(ctx.err(
                        K::BadValue,
                        span,
                        format!("{el} centreline"),
                        "two consecutive centreline points coincide",
                    ));
                }
            }
            let radius_profile = match (&c.radius_m, &c.radius_profile) {
                (Some(r), None) => {
                    vec![(
                        0.0,
                        finite_pos(&ctx, r, &format!("{el} radius_m"), K::NonPositiveRadius)?,
                    )]
                }
                (None, Some(prof)) => {
                    let pv = prof.get_ref();
                    if pv.len() < 2 {
                        return Err(ctx.err(
                            K::BadValue,
                            prof.span(),
                            format!("{el} radius_profile"),
                            "needs at least two [fraction, radius_m] entries",
                        ));
                    }
                    let mut out = Vec::with_capacity(pv.len());
                    for (k, e) in pv.iter().enumerate() {
                        let [f, r] = *e.get_ref();
                        if !(r.is_finite() && r > 0.0) {
                            return Err(ctx.err(
                                K::NonPositiveRadius,
                                e.span(),
                                format!("{el} radius_profile[{k}]"),
                                format!("radius must be finite and positive, got {r}"),
                            ));
                        }
                        let ok_f = f.is_finite()
                            && (0.0..=1.0).contains(&f)
                            && (k == 0 && f == 0.0
                                || k > 0 && f > out.last().map_or(0.0, |x: &(f64, f64)| x.0))
                            && (k + 1 < pv.len() || f == 1.0);
                        if !ok_f {
                            return Err(ctx.err(
                                K::BadValue,
                                e.span(),
                                format!("{el} radius_profile[{k}]"),
                                "fractions must rise strictly from 0.0 to 1.0",
                            ));
                        }
                        out.push((f, r));
                    }
                    out
                }
                _ => {
                    return Err(ctx.err(
                        K::BadValue,
                        c.id.span(),
                        el,
                        "give exactly one of radius_m and radius_profile",
                    ));
                }
            };
            let roughness_m = match &c.roughness_m {
                Some(r) => {
                    finite_nonneg(&ctx, *r.get_ref(), r.span(), &format!("{el} roughness_m"))?
                }
                None => 1e-3,
            };
            let compressible = c.compressible.as_ref().is_some_and(|b| *b.get_ref());
            if compressible {
                let span = c.compressible.as_ref().map_or(cd.span(), |b| b.span());
                if !matches!(nodes[from].kind, NodeKind::ReservoirSource { .. }) {
                    return Err(ctx.err(
                        K::BadCompressible,
                        span,
                        format!("{el} compressible"),
                        "a compressible conduit must start (from) at a source with a stagnation_pressure_pa",
                    ));
                }
                // One throat: radius falls, then rises.
                let rs: Vec<f64> = radius_profile.iter().map(|x| x.1).collect();
                let imin = rs
                    .iter()
                    .enumerate()
                    .min_by(|a, b| a.1.total_cmp(b.1))
                    .map_or(0, |x| x.0);
                let bad = (1..=imin).any(|i| rs[i] > rs[i - 1])
                    || (imin + 1..rs.len()).any(|i| rs[i] < rs[i - 1]);
                if bad {
                    return Err(ctx.err(
                        K::BadCompressible,
                        span,
                        format!("{el} radius_profile"),
                        "a compressible conduit must narrow to one throat and then widen (no second throat)",
                    ));
                }
            }
            conduits.push(Conduit {
                id,
                shape: ConduitShape {
                    from,
                    to,
                    centerline_m: pts,
                    radius_profile,
                },
                roughness_m,
                compressible,
            });
        }

        // Network checks.
        let whole = doc.scenario.span();
        if nodes.is_empty() || conduits.is_empty() {
            return Err(ctx.err(
                K::Disconnected,
                whole,
                "network",
                "needs at least two nodes and one conduit",
            ));
        }
        let mut adj = vec![Vec::new(); nodes.len()];
        for c in &conduits {
            adj[c.shape.from].push(c.shape.to);
            adj[c.shape.to].push(c.shape.from);
        }
        let mut seen = vec![false; nodes.len()];
        let mut stack = vec![0usize];
        seen[0] = true;
        while let Some(n) = stack.pop() {
            for &m in &adj[n] {
                if !seen[m] {
                    seen[m] = true;
                    stack.push(m);
                }
            }
        }
        if let Some(i) = seen.iter().position(|s| !s) {
            return Err(ctx.err(
                K::Disconnected,
                doc.node[i].get_ref().id.span(),
                format!("node {:?}", nodes[i].id),
                format!(
                    "not connected to node {:?}: the network is disconnected",
                    nodes[0].id
                ),
            ));
        }
        if !nodes
            .iter()
            .any(|n| matches!(n.kind, NodeKind::Exit { .. }))
        {
            return Err(ctx.err(
                K::NoExit,
                doc.node[0].span(),
                "network",
                "no exit: every network needs at least one node with kind = \"exit\"",
            ));
        }
        if !nodes.iter().any(|n| n.kind.is_source()) {
            return Err(ctx.err(
                K::NoSource,
                doc.node[0].span(),
                "network",
                "no source: nothing drives the flow and nothing can be found",
            ));
        }

        // [robot]
        let rd = doc.robot.get_ref();
        let speed = finite_pos(
            &ctx,
            &rd.speed_limit_m_per_s,
            "robot.speed_limit_m_per_s",
            K::BadValue,
        )?;
        let turn = match &rd.turn_rate_limit_rad_per_s {
            Some(v) => finite_pos(&ctx, v, "robot.turn_rate_limit_rad_per_s", K::BadValue)?,
            None => 1.5,
        };
        let compliance = match &rd.skin_compliance_m {
            Some(v) => finite_pos(&ctx, v, "robot.skin_compliance_m", K::BadValue)?,
            None => 0.005,
        };
        let mut modules = Vec::new();
        if rd.module.is_empty() {
            let (Some(n), Some(l), Some(r)) =
                (&rd.module_count, &rd.module_length_m, &rd.module_radius_m)
            else {
                return Err(ctx.err(K::BadValue, doc.robot.span(), "robot", "give module_count, module_length_m and module_radius_m, or [[robot.module]] tables"));
            };
            let l = finite_pos(&ctx, l, "robot.module_length_m", K::BadValue)?;
            let r = finite_pos(&ctx, r, "robot.module_radius_m", K::NonPositiveRadius)?;
            if *n.get_ref() == 0 || *n.get_ref() > 64 {
                return Err(ctx.err(
                    K::BadValue,
                    n.span(),
                    "robot.module_count",
                    "must be 1..=64",
                ));
            }
            let sensors = ring_sensors(&ctx, &rd.ring, l, "robot")?;
            for _ in 0..*n.get_ref() {
                modules.push(ModuleSpec {
                    length_m: l,
                    radius_m: r,
                    sensors: sensors.clone(),
                });
            }
        } else {
            if rd.module.len() > 64 {
                return Err(ctx.err(
                    K::BadValue,
                    rd.module[64].span(),
                    "robot.module",
                    "at most 64 modules",
                ));
            }
            for (k, m) in rd.module.iter().enumerate() {
                let md = m.get_ref();
                let el = format!("robot.module[{k}]");
                let l = finite_pos(&ctx, &md.length_m, &format!("{el} length_m"), K::BadValue)?;
                let r = finite_pos(
                    &ctx,
                    &md.radius_m,
                    &format!("{el} radius_m"),
                    K::NonPositiveRadius,
                )?;
                let rings = md.ring.as_ref().unwrap_or(&rd.ring);
                let sensors = ring_sensors(&ctx, rings, l, &el)?;
                modules.push(ModuleSpec {
                    length_m: l,
                    radius_m: r,
                    sensors,
                });
            }
        }
        let caps = cap_sensors(&ctx, &rd.nose_cap)?;
        modules[0].sensors.extend(caps);
        let pd = doc.robot.get_ref().probe.get_ref();
        let head_radius_m = finite_pos(
            &ctx,
            &pd.head_radius_m,
            "robot.probe.head_radius_m",
            K::NonPositiveRadius,
        )?;
        if head_radius_m > modules[0].radius_m {
            return Err(ctx.err(
                K::BadValue,
                pd.head_radius_m.span(),
                "robot.probe.head_radius_m",
                "the probe head is wider than the head module",
            ));
        }
        let cone = |default: f64| -> Result<f64, ScenarioError> {
            match &pd.cone_angle_deg {
                Some(c) => {
                    let v = *c.get_ref();
                    if v.is_finite() && v > 0.0 && v < 90.0 {
                        Ok(v)
                    } else {
                        Err(ctx.err(
                            K::BadValue,
                            c.span(),
                            "robot.probe.cone_angle_deg",
                            "must lie in (0, 90) deg",
                        ))
                    }
                }
                None => Ok(default),
            }
        };
        let layout = match pd.layout.get_ref().as_str() {
            "five_port" => ProbeLayoutSpec::FivePort {
                cone_angle_deg: cone(45.0)?,
            },
            "seven_port" => ProbeLayoutSpec::SevenPort {
                cone_angle_deg: cone(40.0)?,
            },
            "custom" => {
                let Some(ns) = &pd.normals else {
                    return Err(ctx.err(
                        K::BadValue,
                        pd.layout.span(),
                        "robot.probe",
                        "a custom layout needs normals",
                    ));
                };
                let mut out = Vec::new();
                for n in ns.get_ref() {
                    let Some(u) = vec3::unit(*n) else {
                        return Err(ctx.err(
                            K::BadValue,
                            ns.span(),
                            "robot.probe.normals",
                            "a port normal is zero",
                        ));
                    };
                    out.push(u);
                }
                if out.is_empty() {
                    return Err(ctx.err(
                        K::BadValue,
                        ns.span(),
                        "robot.probe.normals",
                        "needs at least one port",
                    ));
                }
                ProbeLayoutSpec::Custom { normals: out }
            }
            other => {
                return Err(ctx.err(
                    K::BadValue,
                    pd.layout.span(),
                    "robot.probe.layout",
                    format!(
                        "unknown layout {other:?}: use \"five_port\", \"seven_port\" or \"custom\""
                    ),
                ));
            }
        };
        let nports = port_count(&layout);

        // [sensors]
        let sd = &doc.sensors;
        let prob = |p: Option<f64>,
                    span: core::ops::Range<usize>,
                    el: &str|
         -> Result<f64, ScenarioError> {
            let v = p.unwrap_or(0.0);
            if (0.0..=1.0).contains(&v) {
                Ok(v)
            } else {
                Err(ctx.err(K::BadValue, span, el, "a probability must lie in 0..=1"))
            }
        };
        let pn = sd.probe.as_ref();
        let pspan = pn.map_or(0..0, |p| p.span());
        let pv = pn.map(|p| p.get_ref());
        let noise_pa = finite_nonneg(
            &ctx,
            pv.and_then(|p| p.noise_pa).unwrap_or(0.5),
            pspan.clone(),
            "sensors.probe.noise_pa",
        )?;
        let bias_sigma = finite_nonneg(
            &ctx,
            pv.and_then(|p| p.bias_sigma_pa).unwrap_or(0.0),
            pspan.clone(),
            "sensors.probe.bias_sigma_pa",
        )?;
        let bias_pa = match pv.and_then(|p| p.bias_pa.clone()) {
            Some(b) => {
                if b.len() != nports || b.iter().any(|x| !x.is_finite()) {
                    return Err(ctx.err(
                        K::BadValue,
                        pspan,
                        "sensors.probe.bias_pa",
                        format!("needs {nports} finite values, one per port"),
                    ));
                }
                b
            }
            None => {
                let mut r = super::rng::NormalRng::new(meta.seed, super::rng::stream::BIAS);
                (0..nports).map(|_| r.gauss(bias_sigma)).collect()
            }
        };
        let probe = ProbeNoise {
            noise_pa,
            bias_pa,
            latency_s: finite_nonneg(
                &ctx,
                pv.and_then(|p| p.latency_s).unwrap_or(0.0),
                pspan.clone(),
                "sensors.probe.latency_s",
            )?,
            time_constant_s: finite_nonneg(
                &ctx,
                pv.and_then(|p| p.time_constant_s).unwrap_or(0.0),
                pspan.clone(),
                "sensors.probe.time_constant_s",
            )?,
            misalignment_deg: pv.and_then(|p| p.misalignment_deg).unwrap_or([0.0; 3]),
            dropout_probability: prob(
                pv.and_then(|p| p.dropout_probability),
                pspan.clone(),
                "sensors.probe.dropout_probability",
            )?,
        };
        if probe
            .misalignment_deg
            .iter()
            .any(|a| !(a.is_finite() && a.abs() <= 45.0))
        {
            return Err(ctx.err(
                K::BadValue,
                pspan,
                "sensors.probe.misalignment_deg",
                "each angle must be finite and within 45 deg",
            ));
        }
        let cspan = sd.contact.as_ref().map_or(0..0, |p| p.span());
        let cv = sd.contact.as_ref().map(|p| p.get_ref());
        let contact = ContactNoise {
            stiffness_n_per_m: finite_nonneg(
                &ctx,
                cv.and_then(|c| c.stiffness_n_per_m).unwrap_or(4000.0),
                cspan.clone(),
                "sensors.contact.stiffness_n_per_m",
            )?,
            noise_n: finite_nonneg(
                &ctx,
                cv.and_then(|c| c.noise_n).unwrap_or(0.02),
                cspan.clone(),
                "sensors.contact.noise_n",
            )?,
            threshold_n: finite_nonneg(
                &ctx,
                cv.and_then(|c| c.threshold_n).unwrap_or(0.1),
                cspan.clone(),
                "sensors.contact.threshold_n",
            )?,
            normal_noise_rad: finite_nonneg(
                &ctx,
                cv.and_then(|c| c.normal_noise_rad).unwrap_or(0.02),
                cspan.clone(),
                "sensors.contact.normal_noise_rad",
            )?,
            dropout_probability: prob(
                cv.and_then(|c| c.dropout_probability),
                cspan,
                "sensors.contact.dropout_probability",
            )?,
        };
        let ospan = sd.odometry.as_ref().map_or(0..0, |p| p.span());
        let ov = sd.odometry.as_ref().map(|p| p.get_ref());
        let odometry = OdometryNoise {
            position_walk_m_per_sqrt_m: finite_nonneg(
                &ctx,
                ov.and_then(|o| o.position_walk_m_per_sqrt_m)
                    .unwrap_or(0.005),
                ospan.clone(),
                "sensors.odometry.position_walk_m_per_sqrt_m",
            )?,
            attitude_walk_rad_per_sqrt_m: finite_nonneg(
                &ctx,
                ov.and_then(|o| o.attitude_walk_rad_per_sqrt_m)
                    .unwrap_or(0.002),
                ospan.clone(),
                "sensors.odometry.attitude_walk_rad_per_sqrt_m",
            )?,
            scale_error: ov.and_then(|o| o.scale_error).unwrap_or(0.0),
            dropout_probability: prob(
                ov.and_then(|o| o.dropout_probability),
                ospan.clone(),
                "sensors.odometry.dropout_probability",
            )?,
        };
        if !(odometry.scale_error.is_finite() && odometry.scale_error.abs() < 0.5) {
            return Err(ctx.err(
                K::BadValue,
                ospan,
                "sensors.odometry.scale_error",
                "must be finite and within +-0.5",
            ));
        }
        let jspan = sd.joints.as_ref().map_or(0..0, |p| p.span());
        let jv = sd.joints.as_ref().map(|p| p.get_ref());
        let joints = JointNoise {
            noise_rad: finite_nonneg(
                &ctx,
                jv.and_then(|j| j.noise_rad).unwrap_or(0.002),
                jspan.clone(),
                "sensors.joints.noise_rad",
            )?,
            dropout_probability: prob(
                jv.and_then(|j| j.dropout_probability),
                jspan,
                "sensors.joints.dropout_probability",
            )?,
        };
        let tspan = sd.temperature.as_ref().map_or(0..0, |p| p.span());
        let tv = sd.temperature.as_ref().map(|p| p.get_ref());
        let temperature = TemperatureNoise {
            enabled: tv.and_then(|t| t.enabled).unwrap_or(true),
            noise_k: finite_nonneg(
                &ctx,
                tv.and_then(|t| t.noise_k).unwrap_or(0.1),
                tspan,
                "sensors.temperature.noise_k",
            )?,
        };

        // [[fault]]
        let mut faults = Vec::new();
        for (k, fd) in doc.fault.iter().enumerate() {
            let f = fd.get_ref();
            let el = format!("fault[{k}]");
            let at_s = finite_nonneg(
                &ctx,
                *f.at_s.get_ref(),
                f.at_s.span(),
                &format!("{el} at_s"),
            )?;
            let until_s = match &f.until_s {
                Some(u) => {
                    let v = *u.get_ref();
                    if !(v.is_finite() && v > at_s) {
                        return Err(ctx.err(
                            K::BadValue,
                            u.span(),
                            format!("{el} until_s"),
                            "must be finite and after at_s",
                        ));
                    }
                    v
                }
                None => f64::INFINITY,
            };
            let port = |what: &str| -> Result<usize, ScenarioError> {
                let Some(p) = &f.port else {
                    return Err(ctx.err(
                        K::BadFault,
                        f.kind.span(),
                        el.clone(),
                        format!("{what} needs port"),
                    ));
                };
                let v = *p.get_ref() as usize;
                if v >= nports {
                    return Err(ctx.err(
                        K::BadFault,
                        p.span(),
                        format!("{el} port"),
                        format!("the probe has ports 0..{nports}"),
                    ));
                }
                Ok(v)
            };
            let kind = match f.kind.get_ref().as_str() {
                "port_blocked" => FaultKind::PortBlocked {
                    port: port("port_blocked")?,
                },
                "port_stuck" => FaultKind::PortStuck {
                    port: port("port_stuck")?,
                },
                "port_leak" => {
                    let p = port("port_leak")?;
                    let fr = f.leak_fraction.as_ref().map_or(0.5, |x| *x.get_ref());
                    if !(0.0..=1.0).contains(&fr) {
                        let span = f.leak_fraction.as_ref().map_or(f.kind.span(), |x| x.span());
                        return Err(ctx.err(
                            K::BadFault,
                            span,
                            format!("{el} leak_fraction"),
                            "must lie in 0..=1",
                        ));
                    }
                    FaultKind::PortLeak {
                        port: p,
                        fraction: fr,
                    }
                }
                "contact_dead" => {
                    let (Some(m), Some(s)) = (&f.module, &f.sensor) else {
                        return Err(ctx.err(
                            K::BadFault,
                            f.kind.span(),
                            el,
                            "contact_dead needs module and sensor",
                        ));
                    };
                    let (mi, si) = (*m.get_ref() as usize, *s.get_ref() as usize);
                    if mi >= modules.len() {
                        return Err(ctx.err(
                            K::BadFault,
                            m.span(),
                            format!("{el} module"),
                            format!("the robot has modules 0..{}", modules.len()),
                        ));
                    }
                    if si >= modules[mi].sensors.len() {
                        return Err(ctx.err(
                            K::BadFault,
                            s.span(),
                            format!("{el} sensor"),
                            format!("module {mi} has sensors 0..{}", modules[mi].sensors.len()),
                        ));
                    }
                    FaultKind::ContactDead {
                        module: mi,
                        sensor: si,
                    }
                }
                "odometry_drift" => {
                    let d = f.drift_m_per_s.unwrap_or([0.0; 3]);
                    if d.iter().any(|x| !x.is_finite()) {
                        return Err(ctx.err(
                            K::BadFault,
                            f.kind.span(),
                            format!("{el} drift_m_per_s"),
                            "must be finite",
                        ));
                    }
                    FaultKind::OdometryDrift { drift_m_per_s: d }
                }
                "dropout" => {
                    let Some(c) = &f.channel else {
                        return Err(ctx.err(
                            K::BadFault,
                            f.kind.span(),
                            el,
                            "dropout needs channel",
                        ));
                    };
                    let channel = match c.get_ref().as_str() {
                        "probe" => Channel::Probe,
                        "pose" => Channel::Pose,
                        "joints" => Channel::Joints,
                        "contacts" => Channel::Contacts,
                        "temperature" => Channel::Temperature,
                        "all" => Channel::All,
                        other => {
                            return Err(ctx.err(
                                K::BadFault,
                                c.span(),
                                format!("{el} channel"),
                                format!("unknown channel {other:?}: use probe, pose, joints, contacts, temperature or all"),
                            ));
                        }
                    };
                    FaultKind::Dropout { channel }
                }
                "clock_jump" => {
                    let Some(j) = &f.jump_s else {
                        return Err(ctx.err(
                            K::BadFault,
                            f.kind.span(),
                            el,
                            "clock_jump needs jump_s",
                        ));
                    };
                    if !j.get_ref().is_finite() {
                        return Err(ctx.err(
                            K::BadFault,
                            j.span(),
                            format!("{el} jump_s"),
                            "must be finite",
                        ));
                    }
                    FaultKind::ClockJump {
                        jump_s: *j.get_ref(),
                    }
                }
                "clock_stuck" => FaultKind::ClockStuck,
                "clock_reset" => FaultKind::ClockReset,
                "clock_nan" => FaultKind::ClockNan,
                other => {
                    return Err(ctx.err(
                        K::BadFault,
                        f.kind.span(),
                        format!("{el} kind"),
                        format!("unknown fault {other:?}: use port_blocked, port_stuck, port_leak, contact_dead, odometry_drift, dropout, clock_jump, clock_stuck, clock_reset or clock_nan"),
                    ));
                }
            };
            faults.push(Fault {
                kind,
                at_s,
                until_s,
            });
        }

        // [start]
        let st = doc.start.get_ref();
        let position_m = finite3(&ctx, &st.position_m, "start.position_m")?;
        let heading = match &st.heading {
            Some(h) => Some(vec3::unit(*h.get_ref()).ok_or_else(|| {
                ctx.err(K::BadValue, h.span(), "start.heading", "must not be zero")
            })?),
            None => None,
        };
        let geometry = Geometry::new(&conduits.iter().map(|c| c.shape.clone()).collect::<Vec<_>>());
        let Some(hit) = geometry
            .best_hit(position_m)
            .filter(|h| h.clearance_m > 0.0)
        else {
            return Err(ctx.err(
                K::StartOutside,
                st.position_m.span(),
                "start.position_m",
                "the start point lies outside every conduit",
            ));
        };
        let robot_r = modules.iter().map(|m| m.radius_m).fold(0.0, f64::max);
        let cname = &conduits[hit.conduit as usize].id;
        if robot_r >= hit.radius_m {
            return Err(ctx.err(
                K::RobotTooWide,
                st.position_m.span(),
                "start.position_m",
                format!(
                    "the robot (radius {robot_r} m) is wider than conduit {cname:?} where it starts (radius {:.4} m)",
                    hit.radius_m
                ),
            ));
        }
        if hit.clearance_m + compliance < robot_r {
            return Err(ctx.err(
                K::RobotTooWide,
                st.position_m.span(),
                "start.position_m",
                format!(
                    "the head (radius {robot_r} m) at {:.3} m from the centreline of {cname:?} pierces its wall (radius {:.4} m)",
                    hit.rho_m, hit.radius_m
                ),
            ));
        }
        let (line, column) = line_column(src, doc.start.span().start);
        let sc = doc.scoring;
        let scoring = Scoring {
            reach_distance_m: sc.reach_distance_m.unwrap_or(0.5),
            wall_sample_spacing_m: sc.wall_sample_spacing_m.unwrap_or(0.03),
        };
        if !(scoring.reach_distance_m > 0.0
            && scoring.wall_sample_spacing_m >= 0.005
            && scoring.wall_sample_spacing_m.is_finite())
        {
            return Err(ctx.err(
                K::BadValue,
                whole,
                "scoring",
                "reach_distance_m must be positive and wall_sample_spacing_m at least 0.005 m",
            ));
        }
        Ok(Self {
            name: meta.name.clone(),
            description: meta.description.clone(),
            seed: meta.seed,
            time_step_s,
            duration_s,
            gas,
            nodes,
            conduits,
            robot: RobotSpec {
                modules,
                probe: ProbeSpec {
                    layout,
                    head_radius_m,
                    port_noise_pa: noise_pa,
                },
                max_speed_m_per_s: speed,
            },
            motion: MotionLimits {
                turn_rate_limit_rad_per_s: turn,
                skin_compliance_m: compliance,
            },
            sensors: SensorSettings {
                probe,
                contact,
                odometry,
                joints,
                temperature,
            },
            faults,
            start: Start {
                position_m,
                heading,
                line_column: (line, column),
            },
            scoring,
        })
    }

    /// Conduit shapes, for [`Geometry::new`].
    #[must_use]
    pub fn shapes(&self) -> Vec<ConduitShape> {
        self.conduits.iter().map(|c| c.shape.clone()).collect()
    }

    /// Largest module radius, m.
    #[must_use]
    pub fn robot_radius_m(&self) -> f64 {
        self.robot
            .modules
            .iter()
            .map(|m| m.radius_m)
            .fold(0.0, f64::max)
    }
}
