//! The embedding entry point: one sensor frame in, one command out.
//!
//! [`FrameNavigator`] is the one type an embedder needs (the lower-level
//! [`crate::navigator::Navigator`] takes map-frame observations instead of
//! sensor frames). [`DemoFrameNavigator`] and [`StandardFrameNavigator`]
//! name its capacities for the demo robots, so the nine const generics need
//! not be guessed; [`FrameNavigator::init`] builds one in storage the caller
//! owns (a `static` slot on a microcontroller).
//!
//! [`FrameNavigator`] owns every stage of the core and runs them in order
//! each step:
//!
//! 1. **probe**: port pressures → [`crate::probe::FlowSolution`] (probe
//!    frame) → rotated into the map frame with the head pose; ports the
//!    health stage has failed are left out of the fit, with a fit on every
//!    port each [`PORT_RECHECK_STEPS`] steps to let them back; the same
//!    pressures go into the windowed estimate ([`crate::flow_window`]),
//!    which stands in for the frame's flow when it is too weak for one
//!    frame (the solver's low-flow guard withheld the direction, or the
//!    dynamic pressure is below `nav.decide.min_dynamic_pressure_pa`);
//! 2. **tactile**: contacts → wall points ([`crate::tactile::TactileMap`]),
//!    and on a fixed cadence the cross-section at the head, the throat
//!    trend along the body and the openings around the head;
//! 3. **decision**: both observations → [`crate::navigator::Navigator`]
//!    (local map, health, follow / branch / back-out / hold) →
//!    [`Command`].
//!
//! Each stage reads only the one before it. Everything is built once from
//! an [`OnboardConfig`] and validated there; after that a step allocates
//! nothing, cannot panic, and does bounded work: one probe solve (its
//! iteration cap), one tactile ingest (at most `C` contacts), at most one
//! section fit per step (the cadence staggers the section, throat and
//! opening work so no step does all of it), and one decision.
//!
//! Capacities, all const generics: `P` probe ports, `J` joint slots and
//! `C` contact slots of a frame, `M` modules and `S` contact sensors of
//! the body, `TW` wall points the tactile layer keeps, `ST` map stations,
//! `W` wall-index points, `JN` junction records.

use crate::body::{Body, BodyConfig, BodyConfigError, ModulePoses};
use crate::decide::{
    FlowObservation, MAX_FRAME_WALL_POINTS, Opening, Throat, WallObservation, probe_cov_to_map,
};
use crate::flow_window::{FlowWindow, FlowWindowConfig, FlowWindowError};
use crate::frame::{HeadPose, JointAngles, SensorFrame};
use crate::gas::IdealGas;
use crate::map::{MAX_BRANCHES, Section, probe_to_map};
use crate::navigator::{Command, ConfigError, NavConfig, Navigator};
use crate::probe::{
    Direction, DirectionInvalid, FaultReport, FlowSolution, PortSet, ProbeError, ProbeLayout,
    ProbeSolver, SolveOptions, SolverConfig,
};
use core::mem::MaybeUninit;

use crate::tactile::{
    OpeningSettings, SectionEstimate, SectionSettings, SectionShape, TactileConfig, TactileError,
    TactileMap, ThroatSettings, ThroatStatus,
};
use crate::trust::ClockVerdict;

/// The windowed flow estimate is fed frames whose single-frame dynamic
/// pressure is below this many times the lost-flow threshold
/// (`decide.min_dynamic_pressure_pa`), so that it has gathered evidence by
/// the time the flow falls below the threshold; stronger frames skip it
/// (about 1.5 us a step on the host). The factor is ours, not from a
/// published source.
pub const WINDOW_FEED_FACTOR: f64 = 4.0;

/// Steps between fits with every port while some are excluded as failed
/// (1 s at 100 Hz).
pub const PORT_RECHECK_STEPS: u64 = 100;

/// Most stations the throat trend looks at.
pub const MAX_THROAT_STATIONS: usize = 6;

/// How the frame-level stages are tuned.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OnboardConfig<const P: usize, const M: usize, const S: usize> {
    /// The body: modules and contact sensors.
    pub body: BodyConfig<M, S>,
    /// The probe's port layout (with per-port sigma and bias).
    pub probe_layout: ProbeLayout<P>,
    /// Probe solver settings.
    pub probe: SolverConfig,
    /// The gas.
    pub gas: IdealGas,
    /// Static temperature assumed for density when the frame carries no
    /// total temperature, K.
    pub assumed_static_temperature_k: f64,
    /// Contacts to wall points.
    pub tactile: TactileConfig,
    /// Cross-section fits.
    pub section: SectionSettings,
    /// Throat trend.
    pub throat: ThroatSettings,
    /// Opening detection.
    pub openings: OpeningSettings,
    /// Steps between cross-section fits at the head (>= 1).
    pub section_every: u32,
    /// Steps between throat-trend evaluations (>= 1). The trend runs on
    /// the first step after each period that has no section fit, so with
    /// `section_every = 1` it never runs.
    pub throat_every: u32,
    /// Stations along the body for the throat trend (2 ..=
    /// [`MAX_THROAT_STATIONS`]).
    pub throat_stations: usize,
    /// Decision settings.
    pub nav: NavConfig,
    /// The windowed flow estimate for weak air.
    pub flow_window: FlowWindowConfig,
}

impl<const P: usize, const M: usize, const S: usize> OnboardConfig<P, M, S> {
    /// Defaults around a body, a probe layout and a gas: the navigator's
    /// defaults for the body's largest module radius; sections every 4
    /// steps and the throat every 8 (at 100 Hz: 25 Hz and 12.5 Hz, common
    /// practice for a slow crawler, not from a published source); the
    /// ellipse refinement off (it costs about 20 µs a fit).
    #[must_use]
    pub fn new(body: BodyConfig<M, S>, probe_layout: ProbeLayout<P>, gas: IdealGas) -> Self {
        let radius = body
            .modules
            .iter()
            .take(body.module_count)
            .map(|m| m.radius_m)
            .fold(0.0, f64::max);
        let thinnest = body
            .modules
            .iter()
            .take(body.module_count)
            .map(|m| m.radius_m)
            .fold(f64::INFINITY, f64::min);
        let mut section = SectionSettings::default();
        section.fit.ellipse_min_coverage_rad = f64::INFINITY;
        // A wall the skin touches is at least the thinnest module's radius
        // from its axis, less the skin's give (taken as a tenth of it).
        section.fit.min_radius_m = if thinnest.is_finite() {
            0.9 * thinnest
        } else {
            0.0
        };
        section.half_window_m = 2.0 * radius;
        section.max_distance_m = 12.0 * radius;
        section.max_age_s = 30.0;
        Self {
            body,
            probe_layout,
            probe: SolverConfig::default(),
            gas,
            assumed_static_temperature_k: 293.15,
            tactile: TactileConfig::default(),
            section,
            throat: ThroatSettings::default(),
            openings: OpeningSettings::default(),
            section_every: 4,
            throat_every: 8,
            throat_stations: 4,
            nav: NavConfig::for_robot(radius),
            flow_window: FlowWindowConfig::default(),
        }
    }
}

/// Why a [`FrameNavigator`] could not be built.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum OnboardError {
    /// The body configuration.
    Body(BodyConfigError),
    /// The probe layout or solver settings.
    Probe(ProbeError),
    /// The tactile settings.
    Tactile(TactileError),
    /// The decision settings.
    Nav(ConfigError),
    /// The windowed flow estimate's settings.
    FlowWindow(FlowWindowError),
    /// A cadence or count out of range.
    Setting {
        /// Field name.
        field: &'static str,
        /// Value given.
        value: f64,
    },
}

/// Counters kept by the frame stages (for the operator and the tests).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct OnboardCounters {
    /// Steps taken.
    pub steps: u64,
    /// Probe solves that returned an error (bad input, cannot tell).
    pub probe_errors: u64,
    /// Frames whose contacts the tactile layer refused.
    pub tactile_errors: u64,
    /// Cross-section fits run.
    pub section_fits: u64,
    /// Probe fits that left failed ports out.
    pub fits_without_failed_ports: u64,
    /// Frames whose time stamp was not trusted (no stage ran).
    pub untrusted_frames: u64,
    /// Poses refused as implausible (see [`crate::trust::PoseLimits`]).
    pub implausible_poses: u64,
    /// Frames whose contact channel did not report (a silent skin).
    pub silent_skin_frames: u64,
    /// Steps whose flow was too weak for one frame (the windowed estimate
    /// stood in).
    pub weak_flow_steps: u64,
}

/// The navigator as embedded: frames in, commands out.
///
/// Build it once from an [`OnboardConfig`] ([`FrameNavigator::new`], or
/// [`FrameNavigator::init`] into storage you own), then call
/// [`FrameNavigator::step`] with each sensor frame.
///
/// The capacities are const generics, checked at compile time (a
/// navigator with `P > 32` ports, `C > 64` contact slots, or zero map
/// stations, wall points or junctions does not build): `P` probe ports,
/// `J` joint slots and `C` contact slots of a frame, `M` modules and `S`
/// contact sensors of the body, `TW` tactile points, `ST` map stations,
/// `W` wall-index points, `JN` junction records. [`DemoFrameNavigator`]
/// has the capacities the host tools run the demo robots with.
///
/// ```
/// use nav_core::body::{BodyConfig, ModuleSpec, SensorSpec};
/// use nav_core::frame::{HeadPose, SensorFrame};
/// use nav_core::gas::IdealGas;
/// use nav_core::onboard::{DemoFrameNavigator, OnboardConfig};
/// use nav_core::probe::ProbeLayout;
///
/// // A body of four modules, 0.3 m long and 0.05 m in radius, with a ring
/// // of eight contact sensors on the head.
/// let mut body = BodyConfig::uniform(4, ModuleSpec { length_m: 0.3, radius_m: 0.05 });
/// for k in 0..8u8 {
///     let angle_rad = f64::from(k) * core::f64::consts::FRAC_PI_4;
///     body.push_sensor(SensorSpec { module: 0, axial_m: 0.02, angle_rad, cap_polar_rad: None });
/// }
/// let probe = ProbeLayout::<7>::seven_port(0.7, 2.0).unwrap();
/// let air = IdealGas::new(1.4, 287.05).unwrap();
/// let config = OnboardConfig::new(body, probe, air);
/// // About 85 KB: build it on the heap here; on a microcontroller use
/// // `FrameNavigator::init` into a static slot.
/// let mut nav = Box::new(DemoFrameNavigator::<7>::new(config).unwrap());
///
/// // A partial frame: a pose only, no probe, no contacts.
/// let mut frame = SensorFrame::empty(0.01);
/// frame.pose = Some(HeadPose {
///     position_m: [0.0; 3],
///     orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
///     position_sigma_m: 0.01,
///     attitude_sigma_rad: 0.01,
/// });
/// let command = nav.step(&frame);
/// assert!(command.speed_m_per_s >= 0.0);
/// let n = command.heading_map.iter().map(|x| x * x).sum::<f64>().sqrt();
/// assert!((n - 1.0).abs() < 1e-9);
/// ```
///
/// A capacity outside the rules is a compile-time error, here 65 contact
/// slots (the health masks are 64 bits):
///
/// ```compile_fail
/// use nav_core::onboard::{FrameNavigator, OnboardConfig};
/// fn build(c: OnboardConfig<7, 8, 48>) {
///     let _ = FrameNavigator::<7, 7, 65, 8, 48, 256, 128, 512, 8>::new(c);
/// }
/// let c: Option<OnboardConfig<7, 8, 48>> = None;
/// if let Some(c) = c {
///     build(c);
/// }
/// ```
///
/// The same with 64 slots builds:
///
/// ```
/// use nav_core::onboard::{FrameNavigator, OnboardConfig};
/// fn build(c: OnboardConfig<7, 8, 48>) {
///     let _ = FrameNavigator::<7, 7, 64, 8, 48, 256, 128, 512, 8>::new(c);
/// }
/// let c: Option<OnboardConfig<7, 8, 48>> = None;
/// if let Some(c) = c {
///     build(c);
/// }
/// ```
#[derive(Debug, Clone)]
pub struct FrameNavigator<
    const P: usize,
    const J: usize,
    const C: usize,
    const M: usize,
    const S: usize,
    const TW: usize,
    const ST: usize,
    const W: usize,
    const JN: usize,
> {
    config: StepSettings,
    body: Body<M, S>,
    solver: ProbeSolver<P>,
    window: FlowWindow<P>,
    tactile: TactileMap<TW>,
    nav: Navigator<P, S, ST, W, JN>,
    last_pose: Option<HeadPose>,
    last_joints: Option<[JointAngles; J]>,
    section: Option<SectionEstimate>,
    wall_template: WallObservation,
    throat_due: bool,
    excluded_ports: u32,
    cleared_ports: u32,
    head_arc_m: f64,
    body_length_m: f64,
    counters: OnboardCounters,
}

/// The settings a step reads that no stage keeps itself (the body, the
/// probe layout and the decision settings live in their stages: one copy
/// of each in the state).
#[derive(Debug, Clone, Copy, PartialEq)]
struct StepSettings {
    gas: IdealGas,
    assumed_static_temperature_k: f64,
    section: SectionSettings,
    throat: ThroatSettings,
    openings: OpeningSettings,
    section_every: u32,
    throat_every: u32,
    throat_stations: usize,
}

/// A frame navigator for the demo robots: 7 ports, up to 8 modules (7
/// joints), 48 contact slots and sensors, 256 tactile points, 128
/// stations, 512 wall-index points, 8 junctions.
pub type StandardFrameNavigator = FrameNavigator<7, 7, 48, 8, 48, 256, 128, 512, 8>;

/// A frame navigator with the capacities the host tools (`replay`) run the
/// demo robots with, for a `P`-port probe (5 or 7): up to 8 modules (7
/// joints), 64 contact slots and sensors, 256 tactile points, 128
/// stations, 512 wall-index points, 8 junctions. The same frames give the
/// same commands, bit for bit, as `replay run`.
pub type DemoFrameNavigator<const P: usize> = FrameNavigator<P, 7, 64, 8, 64, 256, 128, 512, 8>;

impl<
    const P: usize,
    const J: usize,
    const C: usize,
    const M: usize,
    const S: usize,
    const TW: usize,
    const ST: usize,
    const W: usize,
    const JN: usize,
> FrameNavigator<P, J, C, M, S, TW, ST, W, JN>
{
    /// The capacity rules, checked when the type is used (a compile-time
    /// error, not a run-time one): the navigator's health masks are 32 bits
    /// for ports and 64 for contact slots, and the map needs room for at
    /// least one station, wall point and junction.
    const CAPACITY_CHECK: () = {
        assert!(P <= 32, "FrameNavigator: P (probe ports) must be <= 32");
        assert!(C <= 64, "FrameNavigator: C (contact slots) must be <= 64");
        assert!(S > 0, "FrameNavigator: S (contact sensors) must be > 0");
        assert!(W > 0, "FrameNavigator: W (wall-index points) must be > 0");
        assert!(
            JN > 0 && JN <= 65_535,
            "FrameNavigator: JN (junctions) must be 1 to 65535"
        );
        assert!(M > 0, "FrameNavigator: M (modules) must be > 0");
    };

    /// Build and validate every stage.
    ///
    /// The navigator is large (about 85 KB for [`DemoFrameNavigator`]) and
    /// is returned by value; on a small stack use [`FrameNavigator::init`].
    ///
    /// # Errors
    /// [`OnboardError`] naming the stage and field at fault.
    pub fn new(config: OnboardConfig<P, M, S>) -> Result<Self, OnboardError> {
        let () = Self::CAPACITY_CHECK;
        if config.section_every == 0 {
            return Err(OnboardError::Setting {
                field: "section_every",
                value: 0.0,
            });
        }
        if config.throat_every == 0 {
            return Err(OnboardError::Setting {
                field: "throat_every",
                value: 0.0,
            });
        }
        if !(2..=MAX_THROAT_STATIONS).contains(&config.throat_stations) {
            return Err(OnboardError::Setting {
                field: "throat_stations",
                value: f64::from(u32::try_from(config.throat_stations).unwrap_or(u32::MAX)),
            });
        }
        let t = config.assumed_static_temperature_k;
        if !(t.is_finite() && t > 0.0) {
            return Err(OnboardError::Setting {
                field: "assumed_static_temperature_k",
                value: t,
            });
        }
        let body = Body::new(config.body).map_err(OnboardError::Body)?;
        let solver = ProbeSolver::new(config.probe_layout, config.gas, config.probe)
            .map_err(OnboardError::Probe)?;
        let window = FlowWindow::new(config.flow_window).map_err(OnboardError::FlowWindow)?;
        let tactile = TactileMap::new(config.tactile).map_err(OnboardError::Tactile)?;
        let valid = config.nav.validate().map_err(OnboardError::Nav)?;
        let nav = Navigator::new(valid).map_err(OnboardError::Nav)?;
        let head_len = body.module(0).map_or(0.0, |m| m.length_m);
        let body_length_m = (0..config.body.module_count)
            .filter_map(|k| body.module(k))
            .map(|m| m.length_m)
            .sum();
        Ok(Self {
            config: StepSettings {
                gas: config.gas,
                assumed_static_temperature_k: config.assumed_static_temperature_k,
                section: config.section,
                throat: config.throat,
                openings: config.openings,
                section_every: config.section_every,
                throat_every: config.throat_every,
                throat_stations: config.throat_stations,
            },
            body,
            solver,
            window,
            tactile,
            nav,
            last_pose: None,
            last_joints: None,
            section: None,
            wall_template: WallObservation::EMPTY,
            throat_due: false,
            excluded_ports: 0,
            cleared_ports: 0,
            head_arc_m: 0.5 * head_len,
            body_length_m,
            counters: OnboardCounters::default(),
        })
    }

    /// Build and validate every stage into `slot`, storage the caller owns
    /// (a `static`, a field of a larger structure, or heap memory on the
    /// host), and return the navigator there. The configuration is checked
    /// the same way as by [`FrameNavigator::new`]; on error `slot` is left
    /// uninitialised.
    ///
    /// Without `unsafe` the stages are still assembled before being moved
    /// into the slot, so this bounds where the navigator lives, not the
    /// stack used while building it; the firmware example measures that.
    ///
    /// # Errors
    /// [`OnboardError`] naming the stage and field at fault.
    pub fn init(
        slot: &mut MaybeUninit<Self>,
        config: OnboardConfig<P, M, S>,
    ) -> Result<&mut Self, OnboardError> {
        Ok(slot.write(Self::new(config)?))
    }

    /// The decision stage (map, health, filter).
    #[must_use]
    pub const fn navigator(&self) -> &Navigator<P, S, ST, W, JN> {
        &self.nav
    }

    /// The windowed flow estimate.
    #[must_use]
    pub const fn flow_window(&self) -> &FlowWindow<P> {
        &self.window
    }

    /// The tactile stage.
    #[must_use]
    pub const fn tactile(&self) -> &TactileMap<TW> {
        &self.tactile
    }

    /// The last cross-section fitted at the head.
    #[must_use]
    pub const fn last_section(&self) -> Option<&SectionEstimate> {
        self.section.as_ref()
    }

    /// Counters.
    #[must_use]
    pub const fn counters(&self) -> OnboardCounters {
        self.counters
    }

    /// The body (its configuration: [`Body::config`]). The probe layout
    /// is the solver's and the decision settings the navigator's
    /// ([`Navigator::config`]); the navigator keeps one copy of each.
    #[must_use]
    pub const fn body(&self) -> &Body<M, S> {
        &self.body
    }

    /// One step: one sensor frame in, one command out.
    ///
    /// **Reads** every channel the frame carries, each optional (a partial
    /// frame):
    /// - `port_pressures_pa` (with `total_temperature_k` when measured):
    ///   one probe solve, rotated into the map frame with this frame's
    ///   pose, or the last pose seen when the frame has none; no probe
    ///   solve at all before the first pose;
    /// - `contacts` (the first `contact_count`) with `joints` (the last
    ///   joint angles seen when absent): wall points, and on the section
    ///   and throat cadences the cross-section and throat trend;
    /// - `pose`: the head pose for the map. A pose older than
    ///   `nav.pose_timeout_s` (default 0.5 s) stops the robot
    ///   ([`crate::decide::ReasonCode::HoldNoPose`]).
    ///
    /// **Returns** the [`Command`]: unit heading (map frame), speed in m/s
    /// (never negative), reverse flag, operating mode, health flags, and the
    /// decision record (reason code, standoff, section, throat, flow
    /// numbers, speed cap, the branch comparison at a junction, and what
    /// happened to the frame). Every number is finite.
    ///
    /// **Timing.** `time_s` is the robot's monotonic clock. A frame whose
    /// time is not finite is dropped, and a frame not newer than the last
    /// one taken is late: within `nav.reorder_window_s` (default 0.2 s) it
    /// is marked `LateMerged`, older it is `DroppedStale`; either way the
    /// previous command is repeated with that disposition in its record.
    /// The tactile layer refuses the contacts of a frame earlier than the
    /// last (counted in [`OnboardCounters::tactile_errors`]); a frame at
    /// the same time as the last still has its wall points merged. So the
    /// filters, health counters and decision memory only move forward in
    /// time. Channels with non-finite or
    /// out-of-range values are rejected one by one
    /// (`FrameDisposition::PartlyRejected`) and the rest of the frame is
    /// used.
    ///
    /// **Clock trust.** The frame's stamp is judged first ([`crate::trust`]):
    /// a frame whose stamp is not trusted (not finite, stale, a jump, a
    /// stopped clock) reaches no stage and the command holds
    /// ([`crate::decide::ReasonCode::HoldClockUntrusted`]); after a
    /// re-anchor every stage sees the navigator's time. A pose the
    /// navigator finds implausible is not used by any stage either.
    ///
    /// Allocates nothing, cannot panic, bounded work (see the module
    /// documentation for the per-step budget).
    pub fn step(&mut self, frame: &SensorFrame<P, J, C>) -> Command {
        self.counters.steps = self.counters.steps.saturating_add(1);
        let verdict = self.nav.judge_time(frame.time_s);
        let time_s = match verdict {
            ClockVerdict::Hold(_) => {
                self.counters.untrusted_frames = self.counters.untrusted_frames.saturating_add(1);
                let obs = crate::navigator::Observation {
                    time_s: frame.time_s,
                    pose: None,
                    flow: None,
                    wall: None,
                };
                return self.nav.step_judged(&obs, verdict, None);
            }
            ClockVerdict::Late { time_s, .. } | ClockVerdict::Use { time_s, .. } => time_s,
        };
        if time_s.to_bits() == frame.time_s.to_bits() {
            self.step_at(frame, verdict)
        } else {
            // Re-anchored clock: the stages see the navigator's time (a
            // copy, only on this rare path).
            let mut shifted = *frame;
            shifted.time_s = time_s;
            self.step_at(&shifted, verdict)
        }
    }

    fn step_at(&mut self, frame: &SensorFrame<P, J, C>, verdict: ClockVerdict) -> Command {
        let frame_pose = frame
            .pose
            .filter(|p| self.nav.pose_plausible(p, frame.time_s));
        if frame.pose.is_some() && frame_pose.is_none() {
            self.counters.implausible_poses = self.counters.implausible_poses.saturating_add(1);
        }
        if let Some(p) = frame_pose {
            self.last_pose = Some(p);
        }
        if let Some(j) = frame.joints {
            self.last_joints = Some(j);
        }
        let pose = frame_pose.or(self.last_pose);
        let mut weak = false;
        let flow = match (frame.port_pressures_pa.as_ref(), pose.as_ref()) {
            (Some(pr), Some(pose)) => {
                let (f, w, near) = self.flow_observation(pr, frame.total_temperature_k, pose);
                // The window gathers evidence only where the flow is weak
                // or near it (strong flow needs none, and its fading memory
                // discounts what it gathered before a gap).
                if near {
                    self.window_add(frame.time_s, pr, frame.total_temperature_k, pose);
                }
                weak = w;
                Some(f)
            }
            _ => None,
        };
        if weak {
            self.counters.weak_flow_steps = self.counters.weak_flow_steps.saturating_add(1);
        }
        let mut obs = crate::navigator::Observation {
            time_s: frame.time_s,
            pose: frame.pose,
            flow,
            wall: None,
        };
        // Built in place: the observation is about a kilobyte.
        self.wall_observation(frame, pose.as_ref(), &mut obs.wall);
        let window = weak.then_some(self.window.estimate());
        self.nav.step_judged(&obs, verdict, window)
    }

    /// Fold the frame's pressures into the windowed estimate (ports out of
    /// the probe fit stay out of it too). Density from the mean port
    /// pressure (the static pressure to within the dynamic pressure, which
    /// is what makes a flow weak) and the static temperature. A refused
    /// frame (a time not after the last, a bad pose) leaves the window as
    /// it was.
    fn window_add(
        &mut self,
        time_s: f64,
        pressures: &[f64; P],
        total_temperature_k: Option<f64>,
        pose: &HeadPose,
    ) {
        let (mut sum, mut n) = (0.0, 0u32);
        for p in pressures.iter().filter(|p| p.is_finite()) {
            sum += p;
            n += 1;
        }
        if n == 0 {
            return;
        }
        let t = total_temperature_k
            .filter(|t| t.is_finite() && *t > 0.0)
            .unwrap_or(self.config.assumed_static_temperature_k);
        let Ok(rho) = self.config.gas.density_kg_per_m3(sum / f64::from(n), t) else {
            return;
        };
        let _ = self.window.add(
            time_s,
            pressures,
            self.solver.model().layout(),
            pose,
            rho,
            self.excluded_ports,
        );
    }

    /// The frame's flow observation, whether its flow is too weak for one
    /// frame (the low-flow guard withheld the direction, or a valid
    /// solution's dynamic pressure is below the decision stage's lost-flow
    /// threshold), and whether it is near that (weak, below
    /// [`WINDOW_FEED_FACTOR`] times the threshold, or no solution): the
    /// frames the windowed estimate is fed.
    fn flow_observation(
        &mut self,
        pressures: &[f64; P],
        total_temperature_k: Option<f64>,
        pose: &HeadPose,
    ) -> (FlowObservation, bool, bool) {
        // Ports the health stage has failed stay out of the fit, so a
        // persistent fault costs one fit a frame instead of a leave-one-out
        // search every frame. Every PORT_RECHECK_STEPS steps the fit uses
        // every port again, and only the ports that fit still blames stay
        // out.
        let failed = self.nav.health().failed_port_mask() & all_ports_mask(P);
        // A port a recheck cleared is not taken out again while the health
        // stage is still catching up with it.
        self.cleared_ports &= failed;
        self.excluded_ports |= failed & !self.cleared_ports;
        let recheck = self.counters.steps.is_multiple_of(PORT_RECHECK_STEPS);
        let solved = if self.excluded_ports != 0 && !recheck {
            let options = SolveOptions {
                excluded: PortSet::from_bits(self.excluded_ports),
                start: None,
            };
            match self
                .solver
                .solve_with(pressures, total_temperature_k, &options)
            {
                Ok(sol) => {
                    self.counters.fits_without_failed_ports =
                        self.counters.fits_without_failed_ports.saturating_add(1);
                    Ok((sol, self.excluded_ports))
                }
                // Too few ports left: try them all.
                Err(_) => self
                    .solver
                    .solve(pressures, total_temperature_k)
                    .map(|s| (s, 0)),
            }
        } else {
            self.solver
                .solve(pressures, total_temperature_k)
                .map(|s| (s, 0))
        };
        if recheck && let Ok((sol, 0)) = &solved {
            // Keep out only what the all-port fit still blames.
            let keep = match sol.fault {
                FaultReport::Consistent { .. } => 0,
                FaultReport::Isolated { port, .. } if port < 32 => 1u32 << port,
                _ => self.excluded_ports,
            };
            self.cleared_ports |= self.excluded_ports & !keep;
            self.excluded_ports &= keep;
        }
        match solved {
            Ok((sol, excluded)) => {
                let q_lost_pa = self.nav.config().decide.min_dynamic_pressure_pa;
                let (weak, near) = match sol.direction {
                    Direction::Invalid(DirectionInvalid::LowFlow { .. }) => (true, true),
                    Direction::Valid { .. } => (
                        sol.dynamic_pressure_pa < q_lost_pa,
                        sol.dynamic_pressure_pa < WINDOW_FEED_FACTOR * q_lost_pa,
                    ),
                    // No direction for another reason (outside the cone,
                    // not converged, unresolved) while the fitted dynamic
                    // pressure is below the lost-flow threshold: the flow
                    // is too weak for this frame, not the probe broken.
                    Direction::Invalid(_) => {
                        let w = sol.dynamic_pressure_pa < q_lost_pa;
                        (w, w)
                    }
                };
                let mut f = flow_from_solution(
                    &sol,
                    pose,
                    &self.config.gas,
                    total_temperature_k,
                    self.config.assumed_static_temperature_k,
                    P,
                );
                // Still out of the fit: still failed.
                f.port_failed_mask |= excluded;
                (f, weak, near)
            }
            Err(_) => {
                self.counters.probe_errors = self.counters.probe_errors.saturating_add(1);
                let f = FlowObservation {
                    velocity_dir_map: None,
                    dir_cov_map: [[0.0; 3]; 3],
                    dynamic_pressure_pa: 0.0,
                    dynamic_pressure_sigma_pa: 0.0,
                    static_pressure_pa: 0.0,
                    mach: 0.0,
                    density_kg_per_m3: 0.0,
                    degraded: true,
                    port_suspect_mask: all_ports_mask(P),
                    port_failed_mask: 0,
                };
                (f, false, true)
            }
        }
    }

    fn poses(&self, pose: &HeadPose) -> Option<ModulePoses<M>> {
        let joints: &[JointAngles] = match self.last_joints.as_ref() {
            Some(j) => j,
            None => &[],
        };
        self.body.module_poses(pose, joints).ok()
    }

    /// This step's wall observation into `out` (left `None` when there is
    /// none).
    fn wall_observation(
        &mut self,
        frame: &SensorFrame<P, J, C>,
        pose: Option<&HeadPose>,
        out: &mut Option<WallObservation>,
    ) {
        *out = None;
        if !frame.skin_reported() {
            // The contact channel is silent: nothing is known of the walls
            // this frame (not the same as a quiet skin, which reported that
            // nothing touches).
            self.counters.silent_skin_frames = self.counters.silent_skin_frames.saturating_add(1);
            return;
        }
        if frame.contact_count > 0 {
            if self.tactile.ingest(frame, &self.body).is_err() {
                self.counters.tactile_errors = self.counters.tactile_errors.saturating_add(1);
                return;
            }
        } else if self.section.is_none() {
            // Nothing felt yet: the skin is quiet, which is itself a report
            // (no wall within reach), with no geometry.
            *out = Some(WallObservation::EMPTY);
            return;
        }
        let Some(pose) = pose else {
            return;
        };
        let step = self.counters.steps;
        let w = out.insert(self.wall_template);
        if step.is_multiple_of(u64::from(self.config.throat_every)) {
            self.throat_due = true;
        }
        let section_step =
            step.is_multiple_of(u64::from(self.config.section_every)) || self.section.is_none();
        if section_step {
            // Module poses are needed only on the steps that fit something.
            let Some(poses) = self.poses(pose) else {
                *out = None;
                return;
            };
            if let Some(station) = self.body.station(&poses, self.head_arc_m) {
                let est = self.tactile.section_at(&station, &self.config.section);
                self.counters.section_fits = self.counters.section_fits.saturating_add(1);
                self.section = Some(est);
                w.section = section_for_map(&est);
                w.conduit_axis_map = Some([est.axis_map.x, est.axis_map.y, est.axis_map.z]);
                let report = self.tactile.openings::<MAX_BRANCHES>(
                    &est,
                    &self.config.section,
                    &self.config.openings,
                );
                let mut count = 0u8;
                for (slot, c) in w.openings.iter_mut().zip(report.candidates()) {
                    let r = est.clear_diameter_m().map_or(0.0, |d| 0.5 * d);
                    let centre = est.centre_map_m().unwrap_or(est.station.point_map_m);
                    let dir = [c.direction_map.x, c.direction_map.y, c.direction_map.z];
                    *slot = Opening {
                        direction_map: dir,
                        mouth_m: [
                            centre.x + dir[0] * r,
                            centre.y + dir[1] * r,
                            centre.z + dir[2] * r,
                        ],
                        clear_width_m: c.clear_width_m,
                        width_is_lower_bound: true,
                    };
                    count = count.saturating_add(1);
                }
                w.opening_count = count;
            }
        } else if self.throat_due {
            // The first step without a section fit after the throat period
            // came round: the two fits never share a step.
            self.throat_due = false;
            let Some(poses) = self.poses(pose) else {
                *out = None;
                return;
            };
            w.throat = self.throat_now(&poses);
        }
        // This frame's touched wall points, and whether one lies across
        // the path ahead of the head.
        let forward = probe_to_map([1.0, 0.0, 0.0], pose).unwrap_or([1.0, 0.0, 0.0]);
        let mut n = 0usize;
        let mut end_ahead = false;
        // Nose contacts: their offsets across the head axis, and their sum.
        let head = pose.position_m;
        let mut nose = [[0.0f64; 3]; NOSE_POINTS];
        let mut nose_n = 0usize;
        let mut nose_sum = [0.0f64; 3];
        for p in self
            .tactile
            .points_since(frame.time_s)
            .filter(|p| p.touched && p.time_s == frame.time_s)
        {
            let q = [p.point_map_m.x, p.point_map_m.y, p.point_map_m.z];
            if let Some(slot) = w.wall_points_m.get_mut(n) {
                *slot = q;
                n += 1;
            }
            let along = p.normal_map.x * forward[0]
                + p.normal_map.y * forward[1]
                + p.normal_map.z * forward[2];
            if p.module == 0 && along > END_AHEAD_COS {
                end_ahead = true;
            }
            if p.module == 0 && along > NOSE_COS {
                let rel = crate::map::sub(q, head);
                let lat = crate::map::reject(rel, forward);
                if let Some(slot) = nose.get_mut(nose_n) {
                    *slot = lat;
                    nose_n += 1;
                    nose_sum = crate::map::add(nose_sum, q);
                }
            }
        }
        w.wall_point_count = u8::try_from(n.min(MAX_FRAME_WALL_POINTS)).unwrap_or(u8::MAX);
        w.end_ahead = end_ahead;
        w.nose_loaded = nose_n > 0;
        w.nose_point_m = (nose_n > 0).then(|| {
            let k = 1.0 / f64::from(u32::try_from(nose_n).unwrap_or(1));
            crate::map::scale(nose_sum, k)
        });
        w.nose_width_m = nose_span_m(nose.get(..nose_n).unwrap_or(&[]));
        // Keep the geometry for the steps between fits: the template's
        // per-frame fields (wall points, their count, end ahead) stay
        // cleared, the rest follows this step.
        let t = &mut self.wall_template;
        t.section = w.section;
        t.conduit_axis_map = w.conduit_axis_map;
        t.throat = w.throat;
        t.openings = w.openings;
        t.opening_count = w.opening_count;
        t.contact_suspect_mask = w.contact_suspect_mask;
        t.contact_failed_mask = w.contact_failed_mask;
    }

    fn throat_now(&self, poses: &ModulePoses<M>) -> Option<Throat> {
        let k = self.config.throat_stations;
        let span = (self.body_length_m - self.head_arc_m).max(0.0);
        let first = self.body.station(poses, self.head_arc_m)?;
        let mut list = [first; MAX_THROAT_STATIONS];
        let mut n = 0usize;
        let denom = f64::from(u32::try_from(k.max(2) - 1).unwrap_or(1));
        for i in (0u32..).take(k) {
            let frac = f64::from(i) / denom;
            if let Some(s) = self
                .body
                .station(poses, self.head_arc_m + frac * 0.9 * span)
                && let Some(slot) = list.get_mut(n)
            {
                *slot = s;
                n += 1;
            }
        }
        let report = self
            .tactile
            .throat(list.get(..n)?, &self.config.section, &self.config.throat);
        match (report.status, report.min_clear_diameter_m) {
            (ThroatStatus::Narrowing, Some(d)) => Some(Throat {
                min_clear_diameter_m: d,
                distance_ahead_m: 0.0,
            }),
            _ => None,
        }
    }
}

/// A touched head contact whose wall normal points this close to straight
/// ahead (cosine) counts as wall across the path.
const END_AHEAD_COS: f64 = 0.7;

/// A head contact whose normal has at least this cosine with the head axis
/// loads the nose (nose-cap sensors up to 60 degrees from the tip).
const NOSE_COS: f64 = 0.5;

/// Nose contacts kept per frame for the width across them.
const NOSE_POINTS: usize = 16;

/// The widest span between two nose contacts on opposite sides of the head
/// axis (their offsets across it more than 90 degrees apart): the clear
/// width of the way ahead that the nose has measured. `None` when every
/// contact is on one side (a wall to steer off, not a narrowing).
fn nose_span_m(lateral: &[[f64; 3]]) -> Option<f64> {
    let mut best: Option<f64> = None;
    for (i, a) in lateral.iter().enumerate() {
        for b in lateral.iter().skip(i + 1) {
            if crate::map::dot(*a, *b) < 0.0 {
                let d = crate::map::norm(crate::map::sub(*a, *b));
                if best.is_none_or(|x| d > x) {
                    best = Some(d);
                }
            }
        }
    }
    best
}

fn all_ports_mask(n: usize) -> u32 {
    if n >= 32 { u32::MAX } else { (1u32 << n) - 1 }
}

/// Turn a probe solution into a map-frame flow observation.
#[must_use]
pub fn flow_from_solution(
    sol: &FlowSolution,
    pose: &HeadPose,
    gas: &IdealGas,
    total_temperature_k: Option<f64>,
    assumed_static_temperature_k: f64,
    ports: usize,
) -> FlowObservation {
    let trustworthy = sol.is_trustworthy();
    let (velocity_dir_map, dir_cov_map) = match sol.direction {
        Direction::Valid {
            velocity_unit,
            covariance,
            ..
        } if trustworthy => {
            let cov = crate::decide::mat3_to_arr(&covariance);
            (
                probe_to_map([velocity_unit.x, velocity_unit.y, velocity_unit.z], pose),
                probe_cov_to_map(cov, pose).unwrap_or([[0.0; 3]; 3]),
            )
        }
        _ => (None, [[0.0; 3]; 3]),
    };
    // An isolated port is suspect; the health stage promotes it to failed
    // when it stays inconsistent. A fault that cannot be isolated marks the
    // solution degraded but blames no port.
    let _ = ports;
    let (suspect, failed) = match sol.fault {
        FaultReport::Isolated { port, .. } if port < 32 => (1u32 << port, 0),
        _ => (0, 0),
    };
    let static_t = match total_temperature_k {
        Some(t0) => gas
            .t0_over_t(sol.mach)
            .map_or(assumed_static_temperature_k, |r| t0 / r),
        None => assumed_static_temperature_k,
    };
    let density = gas
        .density_kg_per_m3(sol.static_pressure_pa, static_t)
        .unwrap_or(0.0);
    FlowObservation {
        velocity_dir_map,
        dir_cov_map,
        dynamic_pressure_pa: sol.dynamic_pressure_pa,
        dynamic_pressure_sigma_pa: sol.sigma.dynamic_pressure_pa,
        static_pressure_pa: sol.static_pressure_pa,
        mach: sol.mach,
        density_kg_per_m3: density,
        degraded: !trustworthy || sol.regime_ambiguous,
        port_suspect_mask: suspect,
        port_failed_mask: failed,
    }
}

/// The map's section summary of a tactile estimate.
#[must_use]
pub fn section_for_map(est: &SectionEstimate) -> Section {
    match est.plane.shape {
        SectionShape::Circle(c) => {
            let centre = est.plane_to_map(c.centre_plane_m);
            let cov = c.covariance;
            let centre_var = cov.m11.max(cov.m22).max(0.0);
            Section::Circle {
                centre_m: [centre.x, centre.y, centre.z],
                radius_m: c.radius_m,
                centre_sigma_m: libm::sqrt(centre_var) + est.kinematic_sigma_m,
                radius_sigma_m: c.radius_sigma_m,
            }
        }
        SectionShape::LowerBoundOnly { min_radius_m, .. } => {
            Section::LowerBoundOnly { min_radius_m }
        }
        SectionShape::Unknown { .. } => Section::Unknown,
    }
}
