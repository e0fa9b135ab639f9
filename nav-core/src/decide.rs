//! Decisions: follow the streamline upstream, choose a branch, back out,
//! hold. [`decide`] is a pure function of the map, the health view, the
//! current perception, the decision memory (phase) and the configuration;
//! it returns the command, the record of why, the next phase and the
//! junction verdict for the caller to write into the map.
//!
//! ## Follow
//! Heading = upstream (opposite the fused velocity direction) plus a
//! centring term `gain * offset / radius` toward the cross-section centre
//! (perpendicular part only, magnitude capped at 1), plus a push away from
//! the nearest wall point when it is closer than the required standoff
//! `robot_radius + standoff_margin`. Speed ramps from creep to cruise as the
//! standoff excess goes from 0 to `slow_band_m`, and is capped near throats
//! (linear in distance over `throat_lookahead_m`) and near junctions.
//! Without flow (tactile-only mode) the heading is the conduit axis signed
//! along the last heading; without tactile data (flow-only mode) speed is
//! capped at creep.
//!
//! ## Branch
//! At an unresolved junction each eligible branch is sampled in turn (the
//! robot stops and points its head into the branch; the caller adds one
//! mass-flux sample per aligned frame), then [`choose_branch`] picks the
//! strongest eligible branch. A switch away from the incumbent needs the
//! challenger to exceed it by the hysteresis fraction. Continuity
//! (sum of branch fluxes against the trunk flux) is recorded; when it
//! fails, under-sampled branches get a second round.
//!
//! ## Back out
//! A wall across the path, flow lost for `lost_flow_s`, or a throat ahead
//! narrower than `2 robot_radius + width_margin` marks the entered branch a
//! dead end, and the robot retraces its stations (following their
//! `prev_seq` links) to the junction anchor, then enters the next-best
//! branch. A junction with nothing left passes the failure to its parent;
//! with no parent the navigator gives up and holds.

use crate::health::{ChannelState, OperatingMode};
use crate::map::{
    BranchStatus, DeadEndCause, FlowEstimate, Junction, LocalMap, MAX_BRANCHES, RejectReason,
    Section, add, dist_sq, dot, finite3, norm, reject, scale, sub, unit,
};

pub use crate::map::{head_forward_map, probe_to_map};

/// How far behind the head a stored wall point still counts as "beside"
/// it for the standoff (about one body length of a demo robot), m.
pub const WALL_BESIDE_M: f64 = 1.0;

/// A wall felt across the path with live flow whose upstream direction is
/// within this (cosine) of the head's forward axis is the source: the flow
/// comes out of the wall ahead.
pub const SOURCE_AHEAD_COS: f64 = 0.9;

/// Wall points per wall observation.
pub const MAX_FRAME_WALL_POINTS: usize = 32;

/// Rotate a probe-frame covariance into the map frame: `R C R^T`, with `R`
/// the head orientation. `None` when the quaternion is unusable.
#[must_use]
pub fn probe_cov_to_map(
    cov_probe: [[f64; 3]; 3],
    pose: &crate::frame::HeadPose,
) -> Option<[[f64; 3]; 3]> {
    let c0 = probe_to_map([1.0, 0.0, 0.0], pose)?;
    let c1 = probe_to_map([0.0, 1.0, 0.0], pose)?;
    let c2 = probe_to_map([0.0, 0.0, 1.0], pose)?;
    let r = nalgebra::Matrix3::new(
        c0[0], c1[0], c2[0], c0[1], c1[1], c2[1], c0[2], c1[2], c2[2],
    );
    let c = nalgebra::Matrix3::from_fn(|i, j| {
        cov_probe
            .get(i)
            .and_then(|row| row.get(j))
            .copied()
            .unwrap_or(0.0)
    });
    Some(mat3_to_arr(&(r * c * r.transpose())))
}

/// A nalgebra 3x3 matrix as row arrays.
#[must_use]
pub fn mat3_to_arr(m: &nalgebra::Matrix3<f64>) -> [[f64; 3]; 3] {
    let mut out = [[0.0; 3]; 3];
    for (i, row) in out.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = m.get((i, j)).copied().unwrap_or(0.0);
        }
    }
    out
}

// ------------------------------------------------------------ observations

/// One flow observation, already in the map frame (a probe flow solution
/// rotated by [`probe_to_map`] / [`probe_cov_to_map`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowObservation {
    /// Velocity direction (where the gas moves), unit, map frame; `None`
    /// when the probe solution is invalid.
    pub velocity_dir_map: Option<[f64; 3]>,
    /// Covariance of the direction, map frame, rad^2.
    pub dir_cov_map: [[f64; 3]; 3],
    /// Dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Its 1-sigma, Pa.
    pub dynamic_pressure_sigma_pa: f64,
    /// Static pressure, Pa (recorded, not steered on).
    pub static_pressure_pa: f64,
    /// Mach number (recorded, not steered on).
    pub mach: f64,
    /// Gas density, kg/m^3 (from static pressure and temperature via
    /// `gas::IdealGas::density_kg_per_m3`).
    pub density_kg_per_m3: f64,
    /// The probe marked the solution degraded (a port excluded, poor fit).
    pub degraded: bool,
    /// Bit k: port k suspect.
    pub port_suspect_mask: u32,
    /// Bit k: port k failed (isolated).
    pub port_failed_mask: u32,
}

/// A throat (narrowing) the tactile layer found ahead.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Throat {
    /// Smallest clear diameter, m.
    pub min_clear_diameter_m: f64,
    /// Distance ahead of the head along the path, m (0 when at it).
    pub distance_ahead_m: f64,
}

/// One opening (candidate branch) the tactile layer found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Opening {
    /// Direction into the opening, unit, map frame.
    pub direction_map: [f64; 3],
    /// Centre of the opening's mouth (where its axis leaves the current
    /// conduit), map frame, m.
    pub mouth_m: [f64; 3],
    /// Clear width, m.
    pub clear_width_m: f64,
    /// True when the width is only a lower bound.
    pub width_is_lower_bound: bool,
}

impl Opening {
    /// A placeholder slot.
    pub const EMPTY: Self = Self {
        direction_map: [1.0, 0.0, 0.0],
        mouth_m: [0.0; 3],
        clear_width_m: 0.0,
        width_is_lower_bound: true,
    };
}

/// One wall observation, map frame (a tactile section fit, its throat and
/// openings, and the contact points it used).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WallObservation {
    /// Cross-section at the head.
    pub section: Section,
    /// Conduit axis (either sign), unit, map frame, if estimated.
    pub conduit_axis_map: Option<[f64; 3]>,
    /// Narrowest point ahead, if one was found.
    pub throat: Option<Throat>,
    /// Wall across the path ahead: no continuation.
    pub end_ahead: bool,
    /// Openings ahead or aside (every continuation, including straight on;
    /// the trunk behind may be included, it is rejected as "came from").
    pub openings: [Opening; MAX_BRANCHES],
    /// Valid entries in `openings`.
    pub opening_count: u8,
    /// Wall points touched this frame, map frame, m.
    pub wall_points_m: [[f64; 3]; MAX_FRAME_WALL_POINTS],
    /// Valid entries in `wall_points_m`.
    pub wall_point_count: u8,
    /// Bit k: contact sensor k suspect.
    pub contact_suspect_mask: u64,
    /// Bit k: contact sensor k failed.
    pub contact_failed_mask: u64,
}

impl WallObservation {
    /// An observation with nothing in it.
    pub const EMPTY: Self = Self {
        section: Section::Unknown,
        conduit_axis_map: None,
        throat: None,
        end_ahead: false,
        openings: [Opening::EMPTY; MAX_BRANCHES],
        opening_count: 0,
        wall_points_m: [[0.0; 3]; MAX_FRAME_WALL_POINTS],
        wall_point_count: 0,
        contact_suspect_mask: 0,
        contact_failed_mask: 0,
    };

    /// The valid openings.
    #[must_use]
    pub fn openings(&self) -> &[Opening] {
        let n = usize::from(self.opening_count).min(MAX_BRANCHES);
        self.openings.get(..n).unwrap_or(&[])
    }
    /// The valid wall points.
    #[must_use]
    pub fn wall_points(&self) -> &[[f64; 3]] {
        let n = usize::from(self.wall_point_count).min(MAX_FRAME_WALL_POINTS);
        self.wall_points_m.get(..n).unwrap_or(&[])
    }
    /// Add an opening; false when full.
    pub fn push_opening(&mut self, o: Opening) -> bool {
        match self.openings.get_mut(usize::from(self.opening_count)) {
            Some(s) => {
                *s = o;
                self.opening_count += 1;
                true
            }
            None => false,
        }
    }
    /// Add a wall point; false when full.
    pub fn push_wall_point(&mut self, p: [f64; 3]) -> bool {
        match self
            .wall_points_m
            .get_mut(usize::from(self.wall_point_count))
        {
            Some(s) => {
                *s = p;
                self.wall_point_count += 1;
                true
            }
            None => false,
        }
    }
}

// ------------------------------------------------------------------ config

/// Decision thresholds. Validated by the navigator's config.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DecideConfig {
    /// Robot (module) radius, m.
    pub robot_radius_m: f64,
    /// Standoff margin: required standoff = radius + margin, m.
    pub standoff_margin_m: f64,
    /// Width margin: a branch needs clear width >= 2 radius + margin, m.
    pub width_margin_m: f64,
    /// Cruise speed, m/s.
    pub cruise_speed_m_per_s: f64,
    /// Creep speed (near walls, flow-only, back-out), m/s.
    pub creep_speed_m_per_s: f64,
    /// Speed cap near junctions, m/s.
    pub junction_speed_m_per_s: f64,
    /// Speed cap when the clearance is unknown (the skin is quiet and no
    /// cross-section is known), m/s: slow enough that the first touch of
    /// an unseen wall is gentle.
    pub feel_speed_m_per_s: f64,
    /// Standoff excess over which speed ramps from creep to cruise, m.
    pub slow_band_m: f64,
    /// Look-ahead distance for throats, m.
    pub throat_lookahead_m: f64,
    /// Centring gain (dimensionless).
    pub centring_gain: f64,
    /// Dynamic pressure below which the flow counts as lost, Pa.
    pub min_dynamic_pressure_pa: f64,
    /// Time flow must stay lost before back-out, s.
    pub lost_flow_s: f64,
    /// Branch flux below which a branch counts as carrying no flow, kg/s.
    pub min_branch_flux_kg_per_s: f64,
    /// Hysteresis: a challenger must exceed the incumbent's flux by this
    /// fraction to take over.
    pub branch_hysteresis_frac: f64,
    /// Samples per branch before a choice.
    pub min_branch_samples: u32,
    /// Longest dwell sampling one branch, s.
    pub sample_timeout_s: f64,
    /// Head alignment within which a sample counts, rad.
    pub sample_align_rad: f64,
    /// Openings within this of a known junction anchor merge into it, and
    /// the branch is "entered" once this far from the anchor, m.
    pub junction_radius_m: f64,
    /// Angle between fused upstream and the conduit axis that counts as
    /// flow divergence, rad.
    pub divergence_rad: f64,
    /// Relative continuity residual tolerated, |sum - trunk| / trunk.
    pub continuity_tolerance: f64,
    /// Back-out: a station counts as reached within this distance, m.
    pub arrive_m: f64,
    /// Branches whose direction has cosine below this with the trunk
    /// upstream direction are "the way we came".
    pub came_from_cos: f64,
}

impl DecideConfig {
    /// Required standoff, m.
    #[must_use]
    pub fn required_standoff_m(&self) -> f64 {
        self.robot_radius_m + self.standoff_margin_m
    }
    /// Required branch / throat clear width, m.
    #[must_use]
    pub fn required_width_m(&self) -> f64 {
        2.0 * self.robot_radius_m + self.width_margin_m
    }
}

// ----------------------------------------------------------- phase, record

/// Why a back-out started.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum BackOutCause {
    /// Wall across the path.
    DeadEnd,
    /// Flow lost.
    LostFlow,
    /// Throat too narrow ahead.
    ThroatTooNarrow,
    /// Every branch of a child junction failed.
    ChildExhausted,
}

impl BackOutCause {
    const fn dead_end_cause(self) -> DeadEndCause {
        match self {
            Self::DeadEnd | Self::ChildExhausted => DeadEndCause::Blocked,
            Self::LostFlow => DeadEndCause::LostFlow,
            Self::ThroatTooNarrow => DeadEndCause::ThroatTooNarrow,
        }
    }
}

/// What the navigator is doing (the decision memory between steps).
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum Phase {
    /// Following the streamline.
    Follow,
    /// Pointing the head into a branch to sample its flow.
    Sample {
        /// Junction id.
        junction: u16,
        /// Branch index.
        branch: u8,
        /// When this branch's sampling began, s.
        since_s: f64,
        /// Second round (after a continuity failure).
        second_round: bool,
    },
    /// Entering the chosen branch (still within the junction radius).
    Enter {
        /// Junction id.
        junction: u16,
        /// Branch index.
        branch: u8,
    },
    /// Retracing stations toward a junction.
    BackOut {
        /// Junction id.
        junction: u16,
        /// Station to reach next.
        cursor_seq: u32,
        /// Why.
        cause: BackOutCause,
    },
    /// Nothing left to try.
    GaveUp,
    /// Wall across the path with the flow coming through it: the source.
    AtSource,
}

/// Decision memory carried between steps.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DecideState {
    /// Phase.
    pub phase: Phase,
    /// The junction whose branch the robot is in.
    pub in_junction: Option<u16>,
    /// The last commanded heading, unit, map frame.
    pub last_heading_map: [f64; 3],
}

/// The reason code of a decision.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum ReasonCode {
    /// Heading upstream, centred, standoff kept.
    FollowUpstream,
    /// Standoff below required: steering back to the centre at creep.
    Recentre,
    /// Flow failed: following the conduit axis by feel.
    FollowByFeel,
    /// Tactile failed: creeping upstream on flow alone.
    FollowFlowOnly,
    /// Flow too weak for one frame: following the windowed estimate
    /// upstream slowly.
    FollowWeakFlow,
    /// Flow too weak for one frame and not yet resolved by the windowed
    /// estimate: stopped, integrating.
    DwellWeakFlow,
    /// Pointing into a branch to sample its flow.
    SampleBranch,
    /// Entering the chosen branch.
    EnterBranch,
    /// The incumbent branch lost by more than the hysteresis band.
    SwitchBranch,
    /// Retracing toward the last junction.
    BackOut,
    /// Reached the junction after a back-out; entering the next-best branch.
    ResumeNextBranch,
    /// Both sensing channels unhealthy.
    HoldChannelsUnhealthy,
    /// The conduit here is narrower than the required standoff.
    HoldNoSafeStandoff,
    /// No head pose yet.
    HoldNoPose,
    /// At a junction without flow evidence (flow channel failed).
    HoldNoFlowAtJunction,
    /// No branch left anywhere.
    GaveUp,
    /// Arrived: a wall across the path, and the flow comes out of it.
    HoldAtSource,
    /// Holding while the operating mode settles: the channels no longer
    /// call for a hold (at start-up, or after both recovered), but the mode
    /// waits out its recovery dwell before it moves. (Last, so the codes
    /// before it keep their numbers in digests.)
    HoldModeSettling,
    /// The frame's time stamp is not trusted (not finite, stale, a jump,
    /// or a clock that stopped): stopped until it is (see
    /// [`crate::trust`]).
    HoldClockUntrusted,
}

/// What capped the speed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum SpeedLimit {
    /// Nothing: cruise.
    Cruise,
    /// Standoff excess below the slow band.
    Wall,
    /// Throat ahead.
    Throat,
    /// Junction near.
    Junction,
    /// Operating mode (flow-only, degraded).
    Mode,
    /// No wall within reach and no cross-section known: the feel speed.
    Feel,
    /// Back-out speed.
    BackOut,
    /// Stopped (sampling or holding).
    Stopped,
}

/// The branch comparison behind a decision at a junction.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct BranchRecord {
    /// Junction id.
    pub junction: u16,
    /// Chosen branch.
    pub chosen: Option<u8>,
    /// Best other eligible branch.
    pub runner_up: Option<u8>,
    /// The incumbent before this decision.
    pub incumbent: Option<u8>,
    /// The incumbent was kept only because of the hysteresis band.
    pub held_by_hysteresis: bool,
    /// Hysteresis fraction in force.
    pub hysteresis_frac: f64,
    /// Trunk mass-flux proxy, kg/s.
    pub trunk_flux_kg_per_s: f64,
    /// (sum of branch fluxes - trunk) / trunk; 0 when trunk unknown.
    pub continuity_residual: f64,
    /// |residual| within tolerance.
    pub continuity_ok: bool,
    /// Required clear width, m.
    pub required_width_m: f64,
    /// Branches at the junction.
    pub count: u8,
    /// Mean mass-flux proxy per branch, kg/s.
    pub flux_kg_per_s: [f64; MAX_BRANCHES],
    /// Clear width per branch, m.
    pub width_m: [f64; MAX_BRANCHES],
    /// Samples per branch.
    pub samples: [u32; MAX_BRANCHES],
    /// Status per branch after this decision (rejection reasons included).
    pub status: [BranchStatus; MAX_BRANCHES],
}

/// Health flags carried with every command.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct HealthFlags {
    /// Flow channel state.
    pub flow: ChannelState,
    /// Tactile channel state.
    pub tactile: ChannelState,
    /// Bit k: port k failed.
    pub failed_ports: u32,
    /// Bit k: contact sensor k failed.
    pub failed_contacts: u64,
    /// Operating mode from health alone.
    pub health_mode: OperatingMode,
}

/// Why the frame was (or was not) used.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum FrameDisposition {
    /// Used in full.
    Used,
    /// Some channels were rejected as non-finite or out of range.
    PartlyRejected,
    /// Older than the last frame but within the reorder window: its wall
    /// points were merged, the rest ignored; the command repeats.
    LateMerged,
    /// Older than the reorder window: ignored; the command repeats.
    DroppedStale,
    /// The time stamp was not finite: ignored; the command repeats.
    DroppedInvalid,
    /// The time stamp jumped forward beyond the trusted limit: ignored
    /// until a steady new clock confirms it; the robot holds.
    DroppedClockJump,
}

/// The record of one decision: the reason and the numbers behind it.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct DecisionRecord {
    /// Frame time, s.
    pub time_s: f64,
    /// Reason code.
    pub reason: ReasonCode,
    /// Phase after the decision.
    pub phase: Phase,
    /// What happened to the frame.
    pub frame: FrameDisposition,
    /// Standoff (head axis to nearest wall, section or wall point), m.
    pub standoff_m: Option<f64>,
    /// Required standoff, m.
    pub required_standoff_m: f64,
    /// Section radius, m.
    pub section_radius_m: Option<f64>,
    /// Head offset from the section centre (perpendicular to heading), m.
    pub centre_offset_m: Option<f64>,
    /// Distance to the nearest stored wall point (across the travel
    /// direction when it lies beside or behind the head), m.
    pub nearest_wall_m: Option<f64>,
    /// Throat ahead: clear diameter, m.
    pub throat_diameter_m: Option<f64>,
    /// Throat ahead: distance, m.
    pub throat_distance_m: Option<f64>,
    /// Fused upstream direction, map frame.
    pub upstream_map: Option<[f64; 3]>,
    /// Fused direction 1-sigma (sqrt of covariance trace), rad.
    pub flow_dir_sigma_rad: f64,
    /// Fused dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Seconds the flow has been below the lost-flow threshold.
    pub flow_weak_for_s: f64,
    /// Dynamic-pressure ridge cue steered on: relative lateral gradient
    /// |grad q| / q across the flow, 1/m (see [`crate::ridge`]).
    pub ridge_gradient_per_m: Option<f64>,
    /// What capped the speed.
    pub speed_limit: SpeedLimit,
    /// Branch comparison, when at a junction.
    pub branch: Option<BranchRecord>,
}

/// What [`decide`] tells the caller to write into a junction record.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Verdict {
    /// Junction id.
    pub junction: u16,
    /// Chosen branch to store.
    pub chosen: Option<u8>,
    /// Statuses to store (first `count`).
    pub status: [BranchStatus; MAX_BRANCHES],
    /// Branches.
    pub count: u8,
    /// Move the path tip to this station (after a back-out arrival).
    pub set_tip: Option<u32>,
}

/// A decision.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Decision {
    /// Direction of motion of the head, unit, map frame.
    pub heading_map: [f64; 3],
    /// Speed, m/s (>= 0).
    pub speed_m_per_s: f64,
    /// Move tail first (retracing).
    pub reverse: bool,
    /// Effective operating mode.
    pub mode: OperatingMode,
    /// Why.
    pub record: DecisionRecord,
    /// Memory for the next step.
    pub next: DecideState,
    /// Junction update for the map.
    pub verdict: Option<Verdict>,
}

/// What the decision sees of health.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HealthView {
    /// Mode from health (with its hysteresis).
    pub mode: OperatingMode,
    /// Flags to pass through.
    pub flags: HealthFlags,
}

/// What the decision sees of the current perception.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Perception<'a> {
    /// Frame time, s.
    pub time_s: f64,
    /// Head position, map frame, m (`None`: no pose yet).
    pub position_m: Option<[f64; 3]>,
    /// Head forward axis, map frame.
    pub forward_map: [f64; 3],
    /// Fused flow.
    pub flow: FlowEstimate,
    /// Since when the fused flow has been below the lost-flow threshold.
    pub flow_weak_since_s: Option<f64>,
    /// Latest usable section (within the tactile timeout).
    pub section: Section,
    /// This frame's wall observation.
    pub wall: Option<&'a WallObservation>,
    /// Dynamic-pressure ridge cue (centring where no wall is felt).
    pub ridge: Option<crate::ridge::RidgeCue>,
    /// How the frame was taken.
    pub frame: FrameDisposition,
}

// ----------------------------------------------------------- branch choice

/// Result of [`choose_branch`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BranchChoice {
    /// The chosen branch.
    pub chosen: Option<u8>,
    /// The best other eligible branch.
    pub runner_up: Option<u8>,
    /// The incumbent stayed only thanks to the hysteresis band.
    pub held_by_hysteresis: bool,
    /// Statuses after the choice.
    pub status: [BranchStatus; MAX_BRANCHES],
}

/// Eligibility of one branch; `Err` gives the reason it is out.
fn eligibility(j: &Junction, k: usize, cfg: &DecideConfig) -> Result<f64, BranchStatus> {
    let b = j.branches().get(k).ok_or(BranchStatus::Unexplored)?;
    if let BranchStatus::DeadEnd(c) = b.status {
        return Err(BranchStatus::DeadEnd(c));
    }
    let required = cfg.required_width_m();
    if b.clear_width_m.is_nan() || b.clear_width_m < required {
        return Err(BranchStatus::Rejected(RejectReason::TooNarrow {
            width_m: b.clear_width_m,
            required_m: required,
        }));
    }
    let c = dot(b.direction_map, j.trunk_upstream_map);
    if c < cfg.came_from_cos {
        return Err(BranchStatus::Rejected(RejectReason::CameFrom {
            cos_to_upstream: c,
        }));
    }
    let f = b.evidence.mean_flux_kg_per_s;
    if b.evidence.samples == 0 || f.is_nan() || f < cfg.min_branch_flux_kg_per_s {
        return Err(BranchStatus::Rejected(RejectReason::NoFlow {
            flux_kg_per_s: f,
        }));
    }
    Ok(f)
}

/// Branches that still need samples (eligible by width and direction, not
/// dead, fewer than `need` samples), first in index order.
fn branch_needing_samples(
    j: &Junction,
    need: u32,
    cfg: &DecideConfig,
    after: Option<u8>,
) -> Option<u8> {
    for (k, b) in j.branches().iter().enumerate() {
        let ki = u8::try_from(k).ok()?;
        if after.is_some_and(|a| ki <= a) {
            continue;
        }
        if matches!(b.status, BranchStatus::DeadEnd(_)) {
            continue;
        }
        let wide = b.clear_width_m >= cfg.required_width_m();
        let ahead = dot(b.direction_map, j.trunk_upstream_map) >= cfg.came_from_cos;
        if wide && ahead && b.evidence.samples < need {
            return Some(ki);
        }
    }
    None
}

/// Choose the strongest eligible branch of `j`, keeping `incumbent` unless a
/// challenger beats it by more than the hysteresis fraction. Branches
/// narrower than the required width are never chosen. Ties go to the lower
/// index.
#[must_use]
pub fn choose_branch(j: &Junction, incumbent: Option<u8>, cfg: &DecideConfig) -> BranchChoice {
    let mut status = [BranchStatus::Unexplored; MAX_BRANCHES];
    let mut flux = [0.0f64; MAX_BRANCHES];
    let mut ok = [false; MAX_BRANCHES];
    let n = j.branches().len();
    for k in 0..n {
        match eligibility(j, k, cfg) {
            Ok(f) => {
                if let (Some(fl), Some(o)) = (flux.get_mut(k), ok.get_mut(k)) {
                    *fl = f;
                    *o = true;
                }
            }
            Err(s) => {
                if let Some(st) = status.get_mut(k) {
                    *st = s;
                }
            }
        }
    }
    let mut best: Option<usize> = None;
    for k in 0..n {
        if ok.get(k).copied().unwrap_or(false) && best.is_none_or(|b| flux.get(k) > flux.get(b)) {
            best = Some(k);
        }
    }
    let inc = incumbent
        .map(usize::from)
        .filter(|&i| ok.get(i).copied().unwrap_or(false));
    let mut held = false;
    let chosen = match (inc, best) {
        (Some(i), Some(b)) if b != i => {
            let fi = flux.get(i).copied().unwrap_or(0.0);
            let fb = flux.get(b).copied().unwrap_or(0.0);
            if fb > fi * (1.0 + cfg.branch_hysteresis_frac) {
                Some(b)
            } else {
                held = true;
                Some(i)
            }
        }
        (Some(i), _) => Some(i),
        (None, b) => b,
    };
    let chosen_flux = chosen.and_then(|c| flux.get(c).copied()).unwrap_or(0.0);
    let mut runner: Option<usize> = None;
    for k in 0..n {
        if Some(k) == chosen || !ok.get(k).copied().unwrap_or(false) {
            continue;
        }
        if runner.is_none_or(|r| flux.get(k) > flux.get(r)) {
            runner = Some(k);
        }
        if let Some(st) = status.get_mut(k) {
            *st = BranchStatus::Rejected(RejectReason::WeakerFlow {
                flux_kg_per_s: flux.get(k).copied().unwrap_or(0.0),
                chosen_flux_kg_per_s: chosen_flux,
            });
        }
    }
    if let Some(c) = chosen
        && let Some(st) = status.get_mut(c)
    {
        *st = BranchStatus::Entered;
    }
    BranchChoice {
        chosen: chosen.and_then(|c| u8::try_from(c).ok()),
        runner_up: runner.and_then(|c| u8::try_from(c).ok()),
        held_by_hysteresis: held,
        status,
    }
}

fn branch_record(
    j: &Junction,
    choice: &BranchChoice,
    incumbent: Option<u8>,
    cfg: &DecideConfig,
) -> BranchRecord {
    let mut flux = [0.0; MAX_BRANCHES];
    let mut width = [0.0; MAX_BRANCHES];
    let mut samples = [0u32; MAX_BRANCHES];
    let mut sum = 0.0;
    for (k, b) in j.branches().iter().enumerate() {
        if let (Some(f), Some(w), Some(s)) = (flux.get_mut(k), width.get_mut(k), samples.get_mut(k))
        {
            *f = b.evidence.mean_flux_kg_per_s;
            *w = b.clear_width_m;
            *s = b.evidence.samples;
        }
        let came_from = dot(b.direction_map, j.trunk_upstream_map) < cfg.came_from_cos;
        if !came_from && b.evidence.samples > 0 {
            sum += b.evidence.mean_flux_kg_per_s;
        }
    }
    let trunk = j.trunk_flux_kg_per_s;
    let residual = if trunk > 0.0 {
        (sum - trunk) / trunk
    } else {
        0.0
    };
    BranchRecord {
        junction: j.id,
        chosen: choice.chosen,
        runner_up: choice.runner_up,
        incumbent,
        held_by_hysteresis: choice.held_by_hysteresis,
        hysteresis_frac: cfg.branch_hysteresis_frac,
        trunk_flux_kg_per_s: trunk,
        continuity_residual: residual,
        continuity_ok: trunk <= 0.0 || libm::fabs(residual) <= cfg.continuity_tolerance,
        required_width_m: cfg.required_width_m(),
        count: j.branch_count,
        flux_kg_per_s: flux,
        width_m: width,
        samples,
        status: choice.status,
    }
}

fn verdict_of(j: &Junction, choice: &BranchChoice, set_tip: Option<u32>) -> Verdict {
    Verdict {
        junction: j.id,
        chosen: choice.chosen,
        status: choice.status,
        count: j.branch_count,
        set_tip,
    }
}

// ------------------------------------------------------------------ decide

struct Clearance {
    standoff_m: Option<f64>,
    section_radius_m: Option<f64>,
    centre_offset_m: Option<f64>,
    centre_vec: Option<[f64; 3]>,
    nearest_wall_m: Option<f64>,
    nearest_wall_point: Option<[f64; 3]>,
}

impl Clearance {
    /// The clearances a decision record already holds (no centring
    /// direction, no wall point): what steering needs away from follow.
    fn of_record(rec: &DecisionRecord) -> Self {
        Self {
            standoff_m: rec.standoff_m,
            section_radius_m: rec.section_radius_m,
            centre_offset_m: rec.centre_offset_m,
            centre_vec: None,
            nearest_wall_m: rec.nearest_wall_m,
            nearest_wall_point: None,
        }
    }
}

/// The circle of a section fit when the robot's own body does not
/// contradict it: centre and radius. A fit whose radius is below the
/// robot's radius, or that puts the head's axis outside the circle, cannot
/// describe the conduit the head is in (the head is physically inside it):
/// it is a fit failure (too few or clustered contacts), not evidence of a
/// narrow conduit, and is neither steered on nor held for.
fn credible_circle(
    section: &Section,
    pos: [f64; 3],
    along: [f64; 3],
    robot_radius_m: f64,
) -> Option<([f64; 3], f64)> {
    let Section::Circle {
        centre_m,
        radius_m,
        radius_sigma_m,
        ..
    } = *section
    else {
        return None;
    };
    let inside = norm(reject(sub(centre_m, pos), along)) <= radius_m;
    let plausible = radius_m >= robot_radius_m && radius_sigma_m.is_finite();
    (inside && plausible).then_some((centre_m, radius_m))
}

fn clearance<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    pos: [f64; 3],
    along: [f64; 3],
    section: &Section,
    wall: Option<&WallObservation>,
    robot_radius_m: f64,
) -> Clearance {
    use crate::map::WallIndex;
    let mut c = Clearance {
        standoff_m: None,
        section_radius_m: section.usable_radius_m(),
        centre_offset_m: None,
        centre_vec: None,
        nearest_wall_m: None,
        nearest_wall_point: None,
    };
    if let Some((centre_m, radius_m)) = credible_circle(section, pos, along, robot_radius_m) {
        let off = reject(sub(centre_m, pos), along);
        let d = norm(off);
        c.centre_offset_m = Some(d);
        c.centre_vec = Some(off);
        c.standoff_m = Some(radius_m - d);
    }
    // A wall point beside or behind the head (within `WALL_BESIDE_M`
    // along the travel direction) bounds the head axis' standoff by its
    // distance across the travel direction: the wall it lies on runs along
    // the conduit, past the head. (Its straight-line distance overstates
    // the standoff by the axial offset: a point felt by a sensor 0.15 m
    // behind the head on a wall 0.06 m from the axis is 0.16 m away in a
    // straight line.) A point ahead counts by its straight-line distance.
    let bound = |q: [f64; 3]| {
        let rel = sub(q, pos);
        let axial = dot(rel, along);
        if (-WALL_BESIDE_M..=0.0).contains(&axial) {
            norm(reject(rel, along))
        } else {
            norm(rel)
        }
    };
    let mut offer = |q: [f64; 3]| {
        let d = bound(q);
        if c.nearest_wall_m.is_none_or(|n| d < n) {
            c.nearest_wall_m = Some(d);
            c.nearest_wall_point = Some(q);
        }
    };
    if let Some(h) = map.walls.nearest(pos) {
        offer(h.point_m);
    }
    // This frame's touches count at once: the map keeps one frame of wall
    // points per station, so a touch between stations would otherwise go
    // unheeded until the next one.
    if let Some(w) = wall {
        for q in w.wall_points() {
            offer(*q);
        }
    }
    if let Some(d) = c.nearest_wall_m {
        c.standoff_m = Some(c.standoff_m.map_or(d, |s| if d < s { d } else { s }));
    }
    c
}

fn clamp01(x: f64) -> f64 {
    if x > 1.0 {
        1.0
    } else if x > 0.0 {
        x
    } else {
        0.0
    }
}

/// The decision for one step. Pure: same inputs, same output, bit for bit.
#[must_use]
pub fn decide<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    health: &HealthView,
    p: &Perception<'_>,
    state: &DecideState,
    cfg: &DecideConfig,
) -> Decision {
    let required = cfg.required_standoff_m();
    let last = unit(state.last_heading_map).unwrap_or([1.0, 0.0, 0.0]);
    let upstream = p.flow.velocity_dir_map.and_then(|v| unit(scale(v, -1.0)));
    let flow_usable = health.mode != OperatingMode::TactileOnly && upstream.is_some();
    let mut rec = DecisionRecord {
        time_s: p.time_s,
        reason: ReasonCode::FollowUpstream,
        phase: state.phase,
        frame: p.frame,
        standoff_m: None,
        required_standoff_m: required,
        section_radius_m: None,
        centre_offset_m: None,
        nearest_wall_m: None,
        throat_diameter_m: p
            .wall
            .and_then(|w| w.throat.map(|t| t.min_clear_diameter_m)),
        throat_distance_m: p.wall.and_then(|w| w.throat.map(|t| t.distance_ahead_m)),
        upstream_map: upstream,
        flow_dir_sigma_rad: libm::sqrt(libm::fabs(p.flow.dir_var_rad2())),
        dynamic_pressure_pa: p.flow.dynamic_pressure_pa,
        flow_weak_for_s: p.flow_weak_since_s.map_or(0.0, |t| p.time_s - t),
        ridge_gradient_per_m: None,
        speed_limit: SpeedLimit::Stopped,
        branch: None,
    };
    let mut next = *state;
    // A held robot keeps its head where it points (frame-independent).
    let hold_heading = if p.position_m.is_some() {
        unit(p.forward_map).unwrap_or(last)
    } else {
        last
    };
    let hold = |rec: DecisionRecord, reason: ReasonCode, next: DecideState| {
        let mut rec = rec;
        rec.reason = reason;
        rec.speed_limit = SpeedLimit::Stopped;
        rec.phase = next.phase;
        Decision {
            heading_map: hold_heading,
            speed_m_per_s: 0.0,
            reverse: false,
            mode: OperatingMode::Hold,
            record: rec,
            next: DecideState {
                last_heading_map: hold_heading,
                ..next
            },
            verdict: None,
        }
    };

    let Some(pos) = p.position_m else {
        return hold(rec, ReasonCode::HoldNoPose, next);
    };
    // Direction along the conduit for clearance geometry.
    let axis = p
        .wall
        .and_then(|w| w.conduit_axis_map)
        .and_then(unit)
        .map(|a| {
            if dot(a, last) < 0.0 {
                scale(a, -1.0)
            } else {
                a
            }
        });
    let along = if flow_usable {
        upstream.unwrap_or(last)
    } else {
        axis.unwrap_or(last)
    };
    let cl = clearance(map, pos, along, &p.section, p.wall, cfg.robot_radius_m);
    rec.standoff_m = cl.standoff_m;
    rec.section_radius_m = cl.section_radius_m;
    rec.centre_offset_m = cl.centre_offset_m;
    rec.nearest_wall_m = cl.nearest_wall_m;

    if health.mode == OperatingMode::Hold {
        let f = &health.flags;
        let reason = if crate::health::mode_for(f.flow, f.tactile) == OperatingMode::Hold {
            ReasonCode::HoldChannelsUnhealthy
        } else {
            ReasonCode::HoldModeSettling
        };
        return hold(rec, reason, next);
    }
    if matches!(state.phase, Phase::GaveUp) {
        return hold(rec, ReasonCode::GaveUp, next);
    }
    if matches!(state.phase, Phase::AtSource) {
        return hold(rec, ReasonCode::HoldAtSource, next);
    }
    // A section narrower than the required standoff stops the robot only
    // while the skin is actually squeezed (two or more touches this frame):
    // a remembered fit through a few close points, with nothing touching
    // now, would otherwise hold it for ever.
    let squeezed = p.wall.is_some_and(|w| w.wall_point_count >= 2);
    if let Some((_, radius_m)) = credible_circle(&p.section, pos, along, cfg.robot_radius_m)
        && radius_m < required
        && squeezed
    {
        return hold(rec, ReasonCode::HoldNoSafeStandoff, next);
    }

    // ---------------------------------------------------------- back-out
    if let Phase::BackOut {
        junction,
        cursor_seq,
        cause,
    } = state.phase
    {
        return back_out_step(
            map, p, pos, junction, cursor_seq, cause, rec, state, cfg, health,
        );
    }

    // ---------------------------------------------------- back-out triggers
    if matches!(state.phase, Phase::Follow | Phase::Enter { .. }) {
        let w = p.wall;
        let throat_bad = w.and_then(|w| w.throat).is_some_and(|t| {
            t.min_clear_diameter_m < cfg.required_width_m()
                && t.distance_ahead_m <= cfg.throat_lookahead_m
        });
        let lost = flow_usable_or_weak(health)
            && rec.flow_weak_for_s >= cfg.lost_flow_s
            && p.flow_weak_since_s.is_some();
        // A wall across the path with still air is a dead end (blind ends
        // carry no flow). With live flow coming straight out of it, it is
        // the end of the way passable to the robot (rubble, a grate, the
        // source itself): back out to the next branch if a junction is
        // behind, or hold there as arrived when none is. With live flow
        // that does not come out of it, it is a bend or a rock the wall
        // push steers round.
        let end_ahead = w.is_some_and(|w| w.end_ahead);
        let live = flow_usable && p.flow_weak_since_s.is_none();
        let out_of_it = upstream.is_some_and(|u| dot(u, p.forward_map) >= SOURCE_AHEAD_COS);
        let junction_behind = matches!(state.phase, Phase::Enter { .. })
            || state
                .in_junction
                .is_some_and(|id| map.junctions.get(id).is_some());
        if end_ahead && live && out_of_it && !junction_behind {
            next.phase = Phase::AtSource;
            return hold(rec, ReasonCode::HoldAtSource, next);
        }
        let cause = if end_ahead && (!live || out_of_it) {
            Some(BackOutCause::DeadEnd)
        } else if throat_bad {
            Some(BackOutCause::ThroatTooNarrow)
        } else if lost {
            Some(BackOutCause::LostFlow)
        } else {
            None
        };
        if let Some(cause) = cause {
            return start_back_out(map, p, pos, cause, rec, state, cfg, health);
        }
    }

    // ----------------------------------------------------------- junctions
    let near = map.junctions.near(pos, cfg.junction_radius_m);
    match state.phase {
        Phase::Sample {
            junction,
            branch,
            since_s,
            second_round,
        } => {
            if let Some(j) = map.junctions.get(junction) {
                return sampling_step(j, p, branch, since_s, second_round, rec, state, cfg, health);
            }
            next.phase = Phase::Follow;
        }
        Phase::Enter { junction, branch } => {
            if let Some(j) = map.junctions.get(junction) {
                if dist_sq(pos, j.anchor_position_m) > cfg.junction_radius_m * cfg.junction_radius_m
                {
                    next.phase = Phase::Follow;
                    next.in_junction = Some(junction);
                } else {
                    let choice = choose_branch(j, Some(branch), cfg);
                    let br = branch_record(j, &choice, Some(branch), cfg);
                    rec.branch = Some(br);
                    let Some(c) = choice.chosen else {
                        // The entered branch lost eligibility and nothing else
                        // is eligible: treat as a dead end.
                        return start_back_out(
                            map,
                            p,
                            pos,
                            BackOutCause::LostFlow,
                            rec,
                            state,
                            cfg,
                            health,
                        );
                    };
                    let switched = c != branch;
                    let dir = j
                        .branches()
                        .get(usize::from(c))
                        .map_or(last, |b| entry_heading(b, pos, cfg.arrive_m));
                    next.phase = Phase::Enter {
                        junction,
                        branch: c,
                    };
                    next.in_junction = Some(junction);
                    let reason = if switched {
                        ReasonCode::SwitchBranch
                    } else {
                        ReasonCode::EnterBranch
                    };
                    let verdict = switched.then(|| verdict_of(j, &choice, None));
                    return steer(
                        dir,
                        pos,
                        &cl,
                        p,
                        rec,
                        next,
                        cfg,
                        health,
                        reason,
                        SpeedLimit::Junction,
                        verdict,
                    );
                }
            } else {
                next.phase = Phase::Follow;
            }
        }
        Phase::Follow => {
            if let Some(j) = near
                && j.chosen.is_none()
                && Some(j.id) != state.in_junction
            {
                if !flow_usable {
                    return hold(rec, ReasonCode::HoldNoFlowAtJunction, next);
                }
                if let Some(b) = branch_needing_samples(j, cfg.min_branch_samples, cfg, None) {
                    return sampling_step(j, p, b, p.time_s, false, rec, state, cfg, health);
                }
                return resolve(map, j, p, pos, &cl, rec, state, cfg, health, None);
            }
        }
        Phase::BackOut { .. } | Phase::GaveUp | Phase::AtSource => {}
    }

    // -------------------------------------------------------------- follow
    let (dir, reason, limit) = if flow_usable {
        let r = match health.mode {
            OperatingMode::FlowOnly => ReasonCode::FollowFlowOnly,
            _ => ReasonCode::FollowUpstream,
        };
        (upstream.unwrap_or(last), r, SpeedLimit::Cruise)
    } else {
        (
            axis.unwrap_or(last),
            ReasonCode::FollowByFeel,
            SpeedLimit::Mode,
        )
    };
    steer(
        dir, pos, &cl, p, rec, next, cfg, health, reason, limit, None,
    )
}

/// Heading into branch `b` from `pos`: toward a point `arrive_m` inside the
/// mouth until the mouth is passed, then along the branch.
fn entry_heading(b: &crate::map::Branch, pos: [f64; 3], arrive_m: f64) -> [f64; 3] {
    if dot(sub(pos, b.mouth_m), b.direction_map) >= 0.0 {
        b.direction_map
    } else {
        unit(sub(add(b.mouth_m, scale(b.direction_map, arrive_m)), pos)).unwrap_or(b.direction_map)
    }
}

fn flow_usable_or_weak(h: &HealthView) -> bool {
    h.mode != OperatingMode::TactileOnly && h.flags.flow != ChannelState::Failed
}

/// Heading `dir` plus centring and wall push; speed from clearances.
#[allow(clippy::too_many_arguments)]
fn steer(
    dir: [f64; 3],
    pos: [f64; 3],
    cl: &Clearance,
    p: &Perception<'_>,
    mut rec: DecisionRecord,
    mut next: DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    reason: ReasonCode,
    base_limit: SpeedLimit,
    verdict: Option<Verdict>,
) -> Decision {
    let required = cfg.required_standoff_m();
    let mut h = dir;
    if let (Some(off), Some(r)) = (cl.centre_vec, cl.section_radius_m)
        && r > 0.0
    {
        let mut c = scale(reject(off, dir), cfg.centring_gain / r);
        let m = norm(c);
        if m > 1.0 {
            c = scale(c, 1.0 / m);
        }
        h = add(h, c);
    } else if let Some(cue) = p.ridge
        && !cl.nearest_wall_m.is_some_and(|d| d < required)
        && matches!(
            reason,
            ReasonCode::FollowUpstream | ReasonCode::FollowFlowOnly
        )
    {
        // No cross-section to centre on: climb the dynamic-pressure ridge,
        // with the dither that keeps the ridge observable. Not while a wall
        // is within the required standoff: then only the push below
        // steers, so neither the cue nor the dither can hold the robot
        // against the wall.
        h = add(add(h, cue.tilt), cue.dither);
        rec.ridge_gradient_per_m = cue.relative_gradient_per_m;
    }
    let mut reason = reason;
    if let (Some(d), Some(wp)) = (cl.nearest_wall_m, cl.nearest_wall_point)
        && d < required
        && let Some(a) = unit(reject(sub(pos, wp), dir))
    {
        h = add(h, scale(a, clamp01((required - d) / required)));
    }
    let heading = unit(h).unwrap_or(dir);

    let cruise = cfg.cruise_speed_m_per_s;
    let creep = cfg.creep_speed_m_per_s;
    let mut v = cruise;
    let mut limit = SpeedLimit::Cruise;
    let cap = |cand: f64, why: SpeedLimit, v: &mut f64, limit: &mut SpeedLimit| {
        if cand < *v {
            *v = cand;
            *limit = why;
        }
    };
    match cl.standoff_m {
        Some(s) => {
            let f = clamp01((s - required) / cfg.slow_band_m);
            cap(
                creep + (cruise - creep) * f,
                SpeedLimit::Wall,
                &mut v,
                &mut limit,
            );
            if s < required
                && matches!(
                    reason,
                    ReasonCode::FollowUpstream | ReasonCode::FollowByFeel
                )
            {
                reason = ReasonCode::Recentre;
            }
        }
        // No clearance known: the feel speed while the flow leads; with
        // the flow failed too (following the conduit by feel, or the last
        // heading), creep.
        None if reason == ReasonCode::FollowByFeel => {
            cap(creep, SpeedLimit::Feel, &mut v, &mut limit);
        }
        None => cap(cfg.feel_speed_m_per_s, SpeedLimit::Feel, &mut v, &mut limit),
    }
    if let Some(t) = p.wall.and_then(|w| w.throat) {
        let f = clamp01(t.distance_ahead_m / cfg.throat_lookahead_m);
        cap(
            creep + (cruise - creep) * f,
            SpeedLimit::Throat,
            &mut v,
            &mut limit,
        );
    }
    if p.wall.is_some_and(|w| w.opening_count >= 2) || base_limit == SpeedLimit::Junction {
        cap(
            cfg.junction_speed_m_per_s,
            SpeedLimit::Junction,
            &mut v,
            &mut limit,
        );
    }
    match health.mode {
        OperatingMode::FlowOnly => cap(creep, SpeedLimit::Mode, &mut v, &mut limit),
        OperatingMode::FlowDegraded | OperatingMode::TactileOnly => {
            cap(
                cfg.junction_speed_m_per_s,
                SpeedLimit::Mode,
                &mut v,
                &mut limit,
            );
        }
        // Weak flow: the dwell while it integrates is the navigator's
        // (`navigator::weak_flow_conduct`); a resolved window is followed
        // at the usual caps (the head's motion is part of its model).
        OperatingMode::Nominal | OperatingMode::FlowWeak | OperatingMode::Hold => {}
    }
    let mut mode = health.mode;
    if base_limit == SpeedLimit::Stopped {
        v = 0.0;
        limit = SpeedLimit::Stopped;
    }
    if base_limit == SpeedLimit::BackOut {
        cap(creep, SpeedLimit::BackOut, &mut v, &mut limit);
    }
    if !(v.is_finite() && v >= 0.0) {
        v = 0.0;
        mode = OperatingMode::Hold;
    }
    rec.reason = reason;
    rec.speed_limit = limit;
    next.last_heading_map = heading;
    rec.phase = next.phase;
    Decision {
        heading_map: heading,
        speed_m_per_s: v,
        reverse: base_limit == SpeedLimit::BackOut,
        mode,
        record: rec,
        next,
        verdict,
    }
}

/// Point into branch `b` of `j` and wait for samples; move on when enough.
#[allow(clippy::too_many_arguments)]
fn sampling_step(
    j: &Junction,
    p: &Perception<'_>,
    b: u8,
    since_s: f64,
    second_round: bool,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let need = if second_round {
        cfg.min_branch_samples.saturating_mul(2)
    } else {
        cfg.min_branch_samples
    };
    let mut cur = Some((b, since_s));
    match j.branches().get(usize::from(b)) {
        Some(br) => {
            if br.evidence.samples >= need || p.time_s - since_s >= cfg.sample_timeout_s {
                // Branches are sampled in index order; a timed-out branch is
                // not revisited in this round.
                cur = branch_needing_samples(j, need, cfg, Some(b)).map(|k| (k, p.time_s));
            }
        }
        None => cur = None,
    }
    let mut next = *state;
    let pos = p.position_m.unwrap_or([0.0; 3]);
    match cur {
        Some((k, t)) => {
            next.phase = Phase::Sample {
                junction: j.id,
                branch: k,
                since_s: t,
                second_round,
            };
            let dir = j
                .branches()
                .get(usize::from(k))
                .map_or(state.last_heading_map, |x| x.direction_map);
            let mut rec = rec;
            let choice = choose_branch(j, None, cfg);
            rec.branch = Some(branch_record(j, &choice, None, cfg));
            let cl = Clearance::of_record(&rec);
            steer(
                dir,
                pos,
                &cl,
                p,
                rec,
                next,
                cfg,
                health,
                ReasonCode::SampleBranch,
                SpeedLimit::Stopped,
                None,
            )
        }
        None => {
            // Sampling round over: choose.
            let choice = choose_branch(j, None, cfg);
            let br = branch_record(j, &choice, None, cfg);
            if !br.continuity_ok
                && !second_round
                && let Some(k) =
                    branch_needing_samples(j, cfg.min_branch_samples.saturating_mul(2), cfg, None)
            {
                return sampling_step(j, p, k, p.time_s, true, rec, state, cfg, health);
            }
            let mut rec = rec;
            rec.branch = Some(br);
            enter_choice(
                j,
                &choice,
                pos,
                p,
                rec,
                next,
                cfg,
                health,
                ReasonCode::EnterBranch,
                None,
            )
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn enter_choice(
    j: &Junction,
    choice: &BranchChoice,
    pos: [f64; 3],
    p: &Perception<'_>,
    rec: DecisionRecord,
    mut next: DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    reason: ReasonCode,
    set_tip: Option<u32>,
) -> Decision {
    let verdict = verdict_of(j, choice, set_tip);
    match choice.chosen {
        Some(c) => {
            next.phase = Phase::Enter {
                junction: j.id,
                branch: c,
            };
            next.in_junction = Some(j.id);
            let dir = j
                .branches()
                .get(usize::from(c))
                .map_or(next.last_heading_map, |b| {
                    entry_heading(b, pos, cfg.arrive_m)
                });
            let cl = Clearance::of_record(&rec);
            steer(
                dir,
                pos,
                &cl,
                p,
                rec,
                next,
                cfg,
                health,
                reason,
                SpeedLimit::Junction,
                Some(verdict),
            )
        }
        None => {
            // Nothing eligible here: this junction is exhausted.
            let mut d = exhausted(j, health, rec, next);
            d.verdict = Some(verdict);
            d
        }
    }
}

/// Junction `j` has no eligible branch left: pass the failure to its
/// parent (back out there) or give up.
fn exhausted(
    j: &Junction,
    health: &HealthView,
    mut rec: DecisionRecord,
    mut next: DecideState,
) -> Decision {
    let last = unit(next.last_heading_map).unwrap_or([1.0, 0.0, 0.0]);
    match j.parent {
        Some(parent) => {
            next.phase = Phase::BackOut {
                junction: parent,
                cursor_seq: j.anchor_prev_seq.unwrap_or(0),
                cause: BackOutCause::ChildExhausted,
            };
            next.in_junction = Some(parent);
            rec.reason = ReasonCode::BackOut;
        }
        None => {
            next.phase = Phase::GaveUp;
            rec.reason = ReasonCode::GaveUp;
        }
    }
    rec.phase = next.phase;
    rec.speed_limit = SpeedLimit::Stopped;
    Decision {
        heading_map: last,
        speed_m_per_s: 0.0,
        reverse: false,
        mode: if matches!(next.phase, Phase::GaveUp) {
            OperatingMode::Hold
        } else {
            health.mode
        },
        record: rec,
        next,
        verdict: None,
    }
}

/// Resolve an unresolved junction whose sampling is complete.
#[allow(clippy::too_many_arguments)]
fn resolve<const S: usize, const W: usize, const JN: usize>(
    _map: &LocalMap<S, W, JN>,
    j: &Junction,
    p: &Perception<'_>,
    pos: [f64; 3],
    _cl: &Clearance,
    mut rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    set_tip: Option<u32>,
) -> Decision {
    let choice = choose_branch(j, None, cfg);
    rec.branch = Some(branch_record(j, &choice, None, cfg));
    let reason = if set_tip.is_some() {
        ReasonCode::ResumeNextBranch
    } else {
        ReasonCode::EnterBranch
    };
    enter_choice(
        j, &choice, pos, p, rec, *state, cfg, health, reason, set_tip,
    )
}

#[allow(clippy::too_many_arguments)]
fn start_back_out<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    p: &Perception<'_>,
    pos: [f64; 3],
    cause: BackOutCause,
    mut rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let mut next = *state;
    let jid = match state.phase {
        Phase::Enter { junction, .. } => Some(junction),
        _ => state.in_junction,
    };
    let Some(j) = jid.and_then(|id| map.junctions.get(id)) else {
        next.phase = Phase::GaveUp;
        let last = unit(state.last_heading_map).unwrap_or([1.0, 0.0, 0.0]);
        rec.reason = ReasonCode::GaveUp;
        rec.phase = next.phase;
        rec.speed_limit = SpeedLimit::Stopped;
        return Decision {
            heading_map: last,
            speed_m_per_s: 0.0,
            reverse: false,
            mode: OperatingMode::Hold,
            record: rec,
            next,
            verdict: None,
        };
    };
    // Mark the entered branch dead.
    let mut status = [BranchStatus::Unexplored; MAX_BRANCHES];
    for (s, b) in status.iter_mut().zip(j.branches().iter()) {
        *s = b.status;
    }
    if let Some(c) = j.chosen
        && let Some(s) = status.get_mut(usize::from(c))
    {
        *s = BranchStatus::DeadEnd(cause.dead_end_cause());
    }
    let verdict = Verdict {
        junction: j.id,
        chosen: j.chosen,
        status,
        count: j.branch_count,
        set_tip: None,
    };
    let cursor = map.tip.unwrap_or(j.anchor_seq);
    next.phase = Phase::BackOut {
        junction: j.id,
        cursor_seq: cursor,
        cause,
    };
    next.in_junction = Some(j.id);
    let mut d = back_out_step(map, p, pos, j.id, cursor, cause, rec, &next, cfg, health);
    d.verdict = Some(verdict);
    d
}

/// One step of retracing toward junction `jid`.
#[allow(clippy::too_many_arguments)]
fn back_out_step<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    p: &Perception<'_>,
    pos: [f64; 3],
    jid: u16,
    cursor_seq: u32,
    cause: BackOutCause,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let mut next = *state;
    let Some(j) = map.junctions.get(jid) else {
        let mut rec = rec;
        next.phase = Phase::GaveUp;
        rec.reason = ReasonCode::GaveUp;
        rec.phase = next.phase;
        return Decision {
            heading_map: unit(state.last_heading_map).unwrap_or([1.0, 0.0, 0.0]),
            speed_m_per_s: 0.0,
            reverse: false,
            mode: OperatingMode::Hold,
            record: rec,
            next,
            verdict: None,
        };
    };
    let arrive2 = cfg.arrive_m * cfg.arrive_m;
    let mut cursor = cursor_seq;
    // Advance over every station already reached (bounded by the ring).
    let mut target = map.retrace_target(jid, cursor);
    for _ in 0..S.saturating_add(1) {
        match target {
            Some((t, false)) if dist_sq(t, pos) <= arrive2 => {
                cursor = map
                    .stations
                    .by_seq(cursor)
                    .and_then(|s| s.prev_seq)
                    .unwrap_or(j.anchor_seq);
                if cursor <= j.anchor_seq {
                    cursor = j.anchor_seq;
                }
                target = map.retrace_target(jid, cursor);
            }
            _ => break,
        }
    }
    match target {
        Some((t, true)) if dist_sq(t, pos) <= arrive2 => {
            // At the junction: take the next-best branch.
            let mut jj = *j;
            let _ = cause;
            for b in jj.branches.iter_mut() {
                if matches!(b.status, BranchStatus::Entered) {
                    b.status = BranchStatus::DeadEnd(DeadEndCause::Blocked);
                }
            }
            next.phase = Phase::Follow;
            next.in_junction = j.parent;
            let cl = Clearance::of_record(&rec);
            resolve(
                map,
                &jj,
                p,
                pos,
                &cl,
                rec,
                &next,
                cfg,
                health,
                Some(j.anchor_seq),
            )
        }
        Some((t, _)) => {
            next.phase = Phase::BackOut {
                junction: jid,
                cursor_seq: cursor,
                cause,
            };
            let dir = unit(sub(t, pos)).unwrap_or(state.last_heading_map);
            let cl = Clearance::of_record(&rec);
            steer(
                dir,
                pos,
                &cl,
                p,
                rec,
                next,
                cfg,
                health,
                ReasonCode::BackOut,
                SpeedLimit::BackOut,
                None,
            )
        }
        None => {
            let mut rec = rec;
            next.phase = Phase::GaveUp;
            rec.reason = ReasonCode::GaveUp;
            rec.phase = next.phase;
            Decision {
                heading_map: unit(state.last_heading_map).unwrap_or([1.0, 0.0, 0.0]),
                speed_m_per_s: 0.0,
                reverse: false,
                mode: OperatingMode::Hold,
                record: rec,
                next,
                verdict: None,
            }
        }
    }
}

/// Sanity for callers: a heading is a finite unit vector.
#[must_use]
pub fn is_unit_heading(h: [f64; 3]) -> bool {
    finite3(h) && libm::fabs(norm(h) - 1.0) < 1e-9
}
