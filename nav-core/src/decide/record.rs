//! The decision's memory (phase), its inputs (health view, perception) and
//! its outputs (command, record of why, verdict for the map).

use crate::health::{ChannelState, OperatingMode};
use crate::map::{BranchOrigin, BranchStatus, DeadEndCause, FlowEstimate, MAX_BRANCHES, Section};

use super::observe::WallObservation;

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
    /// The head stalled with its nose loaded: something across the way
    /// ahead that the body cannot pass.
    Obstruction,
    /// The head stalled with nothing felt ahead (the way is blocked where
    /// no sensor reaches, or the body is wedged).
    Stalled,
    /// The nose felt the way ahead narrower than the body needs.
    NarrowingAhead,
}

impl BackOutCause {
    pub(super) const fn dead_end_cause(self) -> DeadEndCause {
        match self {
            Self::DeadEnd | Self::ChildExhausted | Self::Obstruction | Self::Stalled => {
                DeadEndCause::Blocked
            }
            Self::LostFlow => DeadEndCause::LostFlow,
            Self::ThroatTooNarrow | Self::NarrowingAhead => DeadEndCause::ThroatTooNarrow,
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
    /// Progress watch for stall detection.
    pub stall: StallWatch,
}

/// Progress watch: the window over which odometry progress is compared
/// with the commanded speed (see `stall.rs`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StallWatch {
    /// When the current window began, s (`None`: no window open).
    pub since_s: Option<f64>,
    /// Head position at the start of the window, map frame, m.
    pub from_m: [f64; 3],
    /// Distance commanded since the window began, m.
    pub commanded_m: f64,
    /// Time of the last decision, s.
    pub last_time_s: f64,
    /// Speed commanded at the last decision, m/s.
    pub last_speed_m_per_s: f64,
    /// The last decision moved tail first.
    pub last_reverse: bool,
    /// The last closed window showed a stall.
    pub stalled: Option<StallRecord>,
}

impl StallWatch {
    /// Nothing watched yet.
    pub const NEW: Self = Self {
        since_s: None,
        from_m: [0.0; 3],
        commanded_m: 0.0,
        last_time_s: f64::NEG_INFINITY,
        last_speed_m_per_s: 0.0,
        last_reverse: false,
        stalled: None,
    };
}

/// What the skin felt while the head stalled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum StallLoad {
    /// The nose was loaded: an obstruction ahead.
    NoseLoaded,
    /// Only the body's sides were touching (wedged or dragging).
    SidesOnly,
    /// Nothing was felt.
    Unfelt,
}

/// A stall: the head did not advance as commanded over a whole window.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct StallRecord {
    /// What the skin felt.
    pub load: StallLoad,
    /// Window length, s (from the speed and the sensing latency).
    pub window_s: f64,
    /// Distance commanded over the window, less what the sensing latency
    /// still hides, m.
    pub expected_m: f64,
    /// Distance the odometry shows over the window, m.
    pub advanced_m: f64,
}

/// The dead end behind a back-out or a hold: why, and what comes next.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub struct DeadEndRecord {
    /// Why the way ahead ended.
    pub cause: BackOutCause,
    /// Clear width the nose measured ahead, when it measured one, m.
    pub width_m: Option<f64>,
    /// The junction backed out to (`None`: none known, the robot holds).
    pub junction: Option<u16>,
    /// The branch to be entered next there (`None`: nothing left at that
    /// junction; the failure passes up or the robot holds).
    pub next_branch: Option<u8>,
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
    /// Stalled while backing out: the way back is blocked too; holding.
    HoldStalled,
    /// Holding while the operating mode settles: the channels no longer
    /// call for a hold (at start-up, or after both recovered), but the mode
    /// waits out its recovery dwell before it moves.
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
    /// The nose is touching: creep while sliding off.
    Touch,
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
    /// The junction was seen through the flow, not felt.
    pub seen_by_flow: bool,
    /// Where each branch came from.
    pub origin: [BranchOrigin; MAX_BRANCHES],
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
    /// Stall detected over the last window.
    pub stall: Option<StallRecord>,
    /// The dead end found this step: its cause and the next branch.
    pub dead_end: Option<DeadEndRecord>,
}

/// What [`decide`](super::decide) tells the caller to write into a junction record.
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
    /// The position was reported this frame (not held over a pose
    /// dropout).
    pub pose_fresh: bool,
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
