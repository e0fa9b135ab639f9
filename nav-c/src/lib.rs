//! C interface to `nav-core`.
//!
//! The header is `include/upcurrent_nav.h`, generated from this crate by
//! cbindgen (`nav-c/cbindgen.toml`); CI fails when it is stale.
//!
//! # How a C program uses it
//!
//! 1. Fill a [`UpcConfig`]: start from [`upc_config_default`] (every tunable
//!    at its documented default, no robot yet), then the body (modules and
//!    contact sensors), the probe layout and the gas.
//! 2. Ask [`upc_navigator_size`] and [`upc_navigator_align`], and give
//!    [`upc_navigator_init`] memory the caller owns (a `static` buffer in
//!    flight software). The library initialises the navigator in place; it
//!    allocates nothing and keeps no global state, so any number of
//!    independent navigators can live side by side.
//! 3. Each sample, fill a [`UpcFrame`] and call [`upc_navigator_step`],
//!    which writes a [`UpcCommand`]: heading, speed, mode, health, the
//!    reason code and every number of the decision record.
//!
//! Every function returns a stable numbered code (`UPC_OK` is 0, errors
//! are negative) and, when the caller passes a [`UpcError`], writes the
//! code, the field at fault and a message saying what and where.
//! [`upc_error_name`] gives the code's name.
//!
//! # Capacities
//!
//! Fixed, the same as the host tools' navigator (`replay`), so a C run and
//! a `replay run` of the same log give the same trace bit for bit: 5- or
//! 7-port probes, up to 8 modules (7 joints), 64 contact sensors, 64
//! contact slots per frame, 256 tactile points, 128 map stations, 512
//! wall-index points, 8 junctions.
//!
//! # Host-only helpers (feature `host`, on by default)
//!
//! `upc_log_*` read a log file and its header, `upc_config_from_header_json`
//! turns the header's JSON into a [`UpcConfig`], and `upc_trace_line`
//! writes the decision-trace line of a command exactly as `replay run`
//! does. They allocate (on the host); the embedded build
//! (`--no-default-features`) has none of them.
#![cfg_attr(not(feature = "host"), no_std)]
// The C boundary needs raw pointers; every unsafe block says why it holds.
#![allow(unsafe_code)]
// A fault carries its message in a fixed buffer (no allocation on the
// target); it is made once, on the error path, and copied to the caller.
#![allow(clippy::result_large_err)]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::cast_possible_truncation,
        clippy::cast_possible_wrap,
        clippy::cast_sign_loss,
    )
)]

mod convert;
#[cfg(feature = "host")]
mod host;

pub use convert::{command_from_c, onboard_config_for};
#[cfg(feature = "host")]
pub use host::*;

use core::ffi::c_char;
use core::mem::{align_of, size_of, MaybeUninit};
use nav_core::onboard::{DemoFrameNavigator, OnboardConfig};

/// Most probe ports a frame carries.
pub const UPC_MAX_PORTS: usize = 7;
/// Most body modules.
pub const UPC_MAX_MODULES: usize = 8;
/// Most joints (modules - 1).
pub const UPC_MAX_JOINTS: usize = 7;
/// Most contact sensors on the body.
pub const UPC_MAX_SENSORS: usize = 64;
/// Most contacts in one frame.
pub const UPC_MAX_CONTACTS: usize = 64;
/// Most branches at a junction.
pub const UPC_MAX_BRANCHES: usize = 6;
/// Bytes of the field name in a [`UpcError`] (with the terminating NUL).
pub const UPC_FIELD_LEN: usize = 48;
/// Bytes of the message in a [`UpcError`] (with the terminating NUL).
pub const UPC_MESSAGE_LEN: usize = 200;

// ---------------------------------------------------------------- codes

/// Success.
pub const UPC_OK: i32 = 0;
/// A pointer argument was NULL.
pub const UPC_ERR_NULL: i32 = -1;
/// The storage given to `upc_navigator_init` is smaller than
/// `upc_navigator_size()`.
pub const UPC_ERR_STORAGE_SIZE: i32 = -2;
/// The storage is not aligned to `upc_navigator_align()`.
pub const UPC_ERR_STORAGE_ALIGN: i32 = -3;
/// The navigator handle was not initialised by `upc_navigator_init`.
pub const UPC_ERR_NOT_INITIALISED: i32 = -4;
/// A count in the configuration or frame exceeds this library's
/// capacity (`UPC_MAX_*`).
pub const UPC_ERR_CAPACITY: i32 = -5;
/// An enumeration field holds an unknown value.
pub const UPC_ERR_ENUM: i32 = -6;
/// The body (modules, sensors, joint sigma) was refused.
pub const UPC_ERR_BODY: i32 = -10;
/// The probe layout or solver settings were refused.
pub const UPC_ERR_PROBE: i32 = -11;
/// The gas was refused.
pub const UPC_ERR_GAS: i32 = -12;
/// The tactile settings were refused.
pub const UPC_ERR_TACTILE: i32 = -13;
/// The decision settings were refused.
pub const UPC_ERR_NAV: i32 = -14;
/// A cadence, count or temperature setting out of range.
pub const UPC_ERR_SETTING: i32 = -15;
/// The frame does not match the navigator (port count).
pub const UPC_ERR_FRAME: i32 = -20;
/// Host only: a file could not be opened or read.
pub const UPC_ERR_IO: i32 = -30;
/// Host only: the log is damaged or not a log.
pub const UPC_ERR_LOG: i32 = -31;
/// Host only: the header JSON could not be read.
pub const UPC_ERR_JSON: i32 = -32;
/// The output buffer is too small.
pub const UPC_ERR_BUFFER: i32 = -33;

/// `upc_log_next_frame`: a frame was written.
pub const UPC_FRAME: i32 = 1;
/// `upc_log_next_frame`: the log has no more frames.
pub const UPC_END: i32 = 0;

/// Probe layout: tip port plus 4 on a cone (azimuths 0, 90, 180, 270°).
pub const UPC_PROBE_FIVE_PORT: u32 = 1;
/// Probe layout: tip port plus 6 on a cone (azimuths 0, 60, ..., 300°).
pub const UPC_PROBE_SEVEN_PORT: u32 = 2;
/// Probe layout: the port normals given in `port_normals`.
pub const UPC_PROBE_CUSTOM: u32 = 3;

/// Operating mode: both channels ok.
pub const UPC_MODE_NOMINAL: u32 = 0;
/// Operating mode: flow usable but degraded.
pub const UPC_MODE_FLOW_DEGRADED: u32 = 1;
/// Operating mode: flow failed, following by feel.
pub const UPC_MODE_TACTILE_ONLY: u32 = 2;
/// Operating mode: tactile failed, creeping on flow alone.
pub const UPC_MODE_FLOW_ONLY: u32 = 3;
/// Operating mode: holding.
pub const UPC_MODE_HOLD: u32 = 4;
/// Operating mode: flow too weak for one frame; following the windowed
/// estimate slowly, or dwelling while it integrates.
pub const UPC_MODE_FLOW_WEAK: u32 = 5;

/// Channel state: usable.
pub const UPC_CHANNEL_OK: u32 = 0;
/// Channel state: usable, reduced confidence.
pub const UPC_CHANNEL_DEGRADED: u32 = 1;
/// Channel state: not usable.
pub const UPC_CHANNEL_FAILED: u32 = 2;
/// Channel state: the probe works but the flow is too weak for one frame
/// (the windowed estimate leads).
pub const UPC_CHANNEL_WEAK: u32 = 3;

/// Reason: heading upstream, centred, standoff kept.
pub const UPC_REASON_FOLLOW_UPSTREAM: u32 = 0;
/// Reason: standoff below required, steering back to the centre.
pub const UPC_REASON_RECENTRE: u32 = 1;
/// Reason: flow failed, following the conduit axis by feel.
pub const UPC_REASON_FOLLOW_BY_FEEL: u32 = 2;
/// Reason: tactile failed, creeping upstream on flow alone.
pub const UPC_REASON_FOLLOW_FLOW_ONLY: u32 = 3;
/// Reason: pointing into a branch to sample its flow.
pub const UPC_REASON_SAMPLE_BRANCH: u32 = 4;
/// Reason: entering the chosen branch.
pub const UPC_REASON_ENTER_BRANCH: u32 = 5;
/// Reason: the incumbent branch lost by more than the hysteresis band.
pub const UPC_REASON_SWITCH_BRANCH: u32 = 6;
/// Reason: retracing toward the last junction.
pub const UPC_REASON_BACK_OUT: u32 = 7;
/// Reason: back at the junction, entering the next-best branch.
pub const UPC_REASON_RESUME_NEXT_BRANCH: u32 = 8;
/// Reason: both sensing channels unhealthy.
pub const UPC_REASON_HOLD_CHANNELS_UNHEALTHY: u32 = 9;
/// Reason: the conduit is narrower than the required standoff.
pub const UPC_REASON_HOLD_NO_SAFE_STANDOFF: u32 = 10;
/// Reason: no head pose yet.
pub const UPC_REASON_HOLD_NO_POSE: u32 = 11;
/// Reason: at a junction without flow evidence.
pub const UPC_REASON_HOLD_NO_FLOW_AT_JUNCTION: u32 = 12;
/// Reason: no branch left anywhere.
pub const UPC_REASON_GAVE_UP: u32 = 13;
/// Reason: arrived at the source.
pub const UPC_REASON_HOLD_AT_SOURCE: u32 = 14;
/// Reason: holding while the operating mode settles (the channels no
/// longer call for a hold).
pub const UPC_REASON_HOLD_MODE_SETTLING: u32 = 15;
/// Reason: the frame's time stamp is not trusted.
pub const UPC_REASON_HOLD_CLOCK_UNTRUSTED: u32 = 16;
/// Reason: flow too weak for one frame; following the windowed estimate
/// upstream slowly.
pub const UPC_REASON_FOLLOW_WEAK_FLOW: u32 = 17;
/// Reason: flow too weak for one frame and not yet resolved; stopped,
/// integrating.
pub const UPC_REASON_DWELL_WEAK_FLOW: u32 = 18;
/// Reason: stalled while backing out (the way back is blocked too);
/// holding.
pub const UPC_REASON_HOLD_STALLED: u32 = 19;

/// Speed cap: cruise.
pub const UPC_SPEED_CRUISE: u32 = 0;
/// Speed cap: standoff excess below the slow band.
pub const UPC_SPEED_WALL: u32 = 1;
/// Speed cap: throat ahead.
pub const UPC_SPEED_THROAT: u32 = 2;
/// Speed cap: junction near.
pub const UPC_SPEED_JUNCTION: u32 = 3;
/// Speed cap: operating mode.
pub const UPC_SPEED_MODE: u32 = 4;
/// Speed cap: no wall within reach, no section: the feel speed.
pub const UPC_SPEED_FEEL: u32 = 5;
/// Speed cap: back-out speed.
pub const UPC_SPEED_BACK_OUT: u32 = 6;
/// Speed cap: stopped.
pub const UPC_SPEED_STOPPED: u32 = 7;
/// Speed cap: the nose is touching; creeping while sliding off.
pub const UPC_SPEED_TOUCH: u32 = 8;

/// Frame disposition: used in full.
pub const UPC_FRAME_USED: u32 = 0;
/// Frame disposition: some channels rejected as non-finite or out of range.
pub const UPC_FRAME_PARTLY_REJECTED: u32 = 1;
/// Frame disposition: late, within the reorder window: wall points merged.
pub const UPC_FRAME_LATE_MERGED: u32 = 2;
/// Frame disposition: older than the reorder window: ignored.
pub const UPC_FRAME_DROPPED_STALE: u32 = 3;
/// Frame disposition: time stamp not finite: ignored.
pub const UPC_FRAME_DROPPED_INVALID: u32 = 4;
/// Frame disposition: time stamp jumped beyond the trusted limit: ignored.
pub const UPC_FRAME_DROPPED_CLOCK_JUMP: u32 = 5;

/// Phase: following the streamline.
pub const UPC_PHASE_FOLLOW: u32 = 0;
/// Phase: sampling a branch (junction, branch, since_s, second_round).
pub const UPC_PHASE_SAMPLE: u32 = 1;
/// Phase: entering a branch (junction, branch).
pub const UPC_PHASE_ENTER: u32 = 2;
/// Phase: backing out (junction, cursor_seq, cause).
pub const UPC_PHASE_BACK_OUT: u32 = 3;
/// Phase: nothing left to try.
pub const UPC_PHASE_GAVE_UP: u32 = 4;
/// Phase: at the source.
pub const UPC_PHASE_AT_SOURCE: u32 = 5;

/// Back-out cause: wall across the path.
pub const UPC_BACK_OUT_DEAD_END: u32 = 0;
/// Back-out cause: flow lost.
pub const UPC_BACK_OUT_LOST_FLOW: u32 = 1;
/// Back-out cause: throat too narrow ahead.
pub const UPC_BACK_OUT_THROAT_TOO_NARROW: u32 = 2;
/// Back-out cause: every branch of a child junction failed.
pub const UPC_BACK_OUT_CHILD_EXHAUSTED: u32 = 3;
/// Back-out cause: stalled with the nose loaded (an obstruction ahead).
pub const UPC_BACK_OUT_OBSTRUCTION: u32 = 4;
/// Back-out cause: stalled with nothing felt ahead.
pub const UPC_BACK_OUT_STALLED: u32 = 5;
/// Back-out cause: the nose felt the way ahead narrower than the body.
pub const UPC_BACK_OUT_NARROWING_AHEAD: u32 = 6;

/// Stall load: the nose was loaded.
pub const UPC_STALL_NOSE_LOADED: u32 = 0;
/// Stall load: only the body's sides were touching.
pub const UPC_STALL_SIDES_ONLY: u32 = 1;
/// Stall load: nothing was felt.
pub const UPC_STALL_UNFELT: u32 = 2;

/// Branch origin: an opening the skin felt.
pub const UPC_ORIGIN_FELT: u32 = 0;
/// Branch origin: the branch the flow led into at a junction seen through
/// the flow (width unmeasured).
pub const UPC_ORIGIN_FOLLOWED: u32 = 1;
/// Branch origin: a direction a flow turn suggests, nothing measured.
pub const UPC_ORIGIN_GUESSED: u32 = 2;

/// Branch status: not yet decided.
pub const UPC_BRANCH_UNEXPLORED: u32 = 0;
/// Branch status: chosen and entered.
pub const UPC_BRANCH_ENTERED: u32 = 1;
/// Branch status: rejected (`detail` is a `UPC_REJECT_*`).
pub const UPC_BRANCH_REJECTED: u32 = 2;
/// Branch status: a dead end (`detail` is a `UPC_DEAD_END_*`).
pub const UPC_BRANCH_DEAD_END: u32 = 3;

/// Rejected: too narrow (`value_a` width, `value_b` required width, m).
pub const UPC_REJECT_TOO_NARROW: u32 = 0;
/// Rejected: points back the way the robot came (`value_a` cosine).
pub const UPC_REJECT_CAME_FROM: u32 = 1;
/// Rejected: weaker flow (`value_a` its flux, `value_b` the chosen, kg/s).
pub const UPC_REJECT_WEAKER_FLOW: u32 = 2;
/// Rejected: flow below the floor (`value_a` flux, kg/s).
pub const UPC_REJECT_NO_FLOW: u32 = 3;

/// Dead end: wall across the path.
pub const UPC_DEAD_END_BLOCKED: u32 = 0;
/// Dead end: flow lost inside.
pub const UPC_DEAD_END_LOST_FLOW: u32 = 1;
/// Dead end: a throat too narrow.
pub const UPC_DEAD_END_THROAT_TOO_NARROW: u32 = 2;

// ---------------------------------------------------------------- structs

/// An error: the code, the field at fault and a message (NUL-terminated).
#[repr(C)]
#[derive(Debug, Clone, Copy)]
pub struct UpcError {
    /// One of the `UPC_ERR_*` codes (`UPC_OK` when nothing went wrong).
    pub code: i32,
    /// The field at fault (`"modules[2].radius_m"`), or empty.
    pub field: [c_char; UPC_FIELD_LEN],
    /// What is wrong and where, with the value given.
    pub message: [c_char; UPC_MESSAGE_LEN],
}

/// One body module.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcModule {
    /// Length along its axis, m (> 0).
    pub length_m: f64,
    /// Skin radius, m (> 0).
    pub radius_m: f64,
}

/// One contact sensor on the skin.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcSensor {
    /// Module carrying it (0 is the head).
    pub module: u16,
    /// Axial distance behind the module's front face, m.
    pub axial_m: f64,
    /// Angle around the module axis from +y toward +z, rad.
    pub angle_rad: f64,
    /// The sensor sits on the head's nose cap (`module` must be 0) at
    /// polar angle `cap_polar_rad` from the head axis; `axial_m` is then
    /// unused. False (the zeroed default): on the side skin.
    pub on_nose_cap: bool,
    /// Polar angle from the head axis, rad, in `[0, pi/2]` (nose cap only).
    pub cap_polar_rad: f64,
}

/// Navigator configuration: a plain struct, filled by
/// [`upc_config_default`] and then by the caller.
///
/// Fields marked "NaN: default" take the navigator's default for the body
/// when left NaN.
#[repr(C)]
#[derive(Debug, Clone, Copy)]
pub struct UpcConfig {
    /// Modules in use (1 ..= `UPC_MAX_MODULES`). Default 0: the caller
    /// must give the body.
    pub module_count: u32,
    /// Module geometry, head first.
    pub modules: [UpcModule; UPC_MAX_MODULES],
    /// Contact sensors in use (0 ..= `UPC_MAX_SENSORS`), in index order
    /// per module. Default 0.
    pub sensor_count: u32,
    /// Sensor placements.
    pub sensors: [UpcSensor; UPC_MAX_SENSORS],
    /// 1-sigma joint-angle uncertainty, rad. Default 0.01.
    pub joint_sigma_rad: f64,
    /// `UPC_PROBE_FIVE_PORT`, `UPC_PROBE_SEVEN_PORT` or `UPC_PROBE_CUSTOM`.
    /// Default seven-port.
    pub probe_layout: u32,
    /// Cone half-angle of the side ports of a preset layout, rad. Default
    /// 45° (0.785...).
    pub cone_angle_rad: f64,
    /// Ports of a custom layout (5 or 7); ignored by the presets.
    pub port_count: u32,
    /// Unit port normals of a custom layout, probe frame.
    pub port_normals: [[f64; 3]; UPC_MAX_PORTS],
    /// Port transducer noise, 1 sigma, Pa (> 0). Default 1.0.
    pub port_noise_pa: f64,
    /// Ratio of specific heats. Default 1.4 (dry air).
    pub gas_gamma: f64,
    /// Specific gas constant, J/(kg K). Default 287.05 (dry air).
    pub gas_r_j_per_kg_k: f64,
    /// Static temperature assumed when a frame has no total temperature,
    /// K. Default 293.15.
    pub assumed_static_temperature_k: f64,
    /// Cruise speed, m/s; the robot's speed limit. NaN: default.
    pub cruise_speed_m_per_s: f64,
    /// Dynamic pressure below which the flow counts as lost, Pa. NaN:
    /// five times `port_noise_pa` (a 5-sigma floor, common practice).
    pub min_dynamic_pressure_pa: f64,
    /// Steps between cross-section fits (>= 1). Default 4.
    pub section_every: u32,
    /// Steps between throat-trend evaluations (>= 1). Default 8.
    pub throat_every: u32,
    /// Stations along the body for the throat trend (2 ..= 6). Default 4.
    pub throat_stations: u32,
}

/// A head pose.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcPose {
    /// Head module origin in the map frame, m.
    pub position_m: [f64; 3],
    /// Unit quaternion `[w, x, y, z]`, head frame to map frame.
    pub orientation_wxyz: [f64; 4],
    /// 1-sigma position uncertainty, m.
    pub position_sigma_m: f64,
    /// 1-sigma attitude uncertainty, rad.
    pub attitude_sigma_rad: f64,
}

/// One joint.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcJoint {
    /// Trailing module about the leading module's y axis, rad.
    pub pitch_rad: f64,
    /// Trailing module about the leading module's z axis, rad.
    pub yaw_rad: f64,
}

/// One skin contact.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcContact {
    /// Module index (0 is the head).
    pub module: u16,
    /// Sensor index on that module.
    pub sensor: u16,
    /// The sensor measured a contact normal (`normal_module` is valid).
    pub has_normal: bool,
    /// Normal force pressing the skin, N.
    pub force_n: f64,
    /// Outward contact normal, module frame (unit).
    pub normal_module: [f64; 3],
}

/// One sample of every sensor. A channel whose `has_*` flag is false is
/// absent from this sample (a partial frame).
#[repr(C)]
#[derive(Debug, Clone, Copy)]
pub struct UpcFrame {
    /// Sample time, s, on the robot's monotonic clock.
    pub time_s: f64,
    /// Odometry reported `pose`.
    pub has_pose: bool,
    /// Head pose.
    pub pose: UpcPose,
    /// Proprioception reported joints (`joint_count` of them; the rest
    /// read as zero).
    pub has_joints: bool,
    /// Joints given (0 ..= `UPC_MAX_JOINTS`).
    pub joint_count: u32,
    /// Joint angles, head first.
    pub joints: [UpcJoint; UPC_MAX_JOINTS],
    /// The probe reported `port_pressures_pa`.
    pub has_ports: bool,
    /// Ports given: must equal the navigator's probe.
    pub port_count: u32,
    /// Absolute port pressures, Pa, in layout order.
    pub port_pressures_pa: [f64; UPC_MAX_PORTS],
    /// `total_temperature_k` was measured.
    pub has_total_temperature: bool,
    /// Gas total temperature at the head, K.
    pub total_temperature_k: f64,
    /// The contact channel reported this frame (with or without contacts):
    /// `false` is a silent skin, not a quiet one. A frame with contacts
    /// counts as reported either way.
    pub has_contacts: bool,
    /// Contacts given (0 ..= `UPC_MAX_CONTACTS`).
    pub contact_count: u32,
    /// Contacts.
    pub contacts: [UpcContact; UPC_MAX_CONTACTS],
}

/// Status of one branch at a junction.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcBranchStatus {
    /// `UPC_BRANCH_*`.
    pub kind: u32,
    /// `UPC_REJECT_*` when rejected, `UPC_DEAD_END_*` when a dead end.
    pub detail: u32,
    /// First number of the reason (see the `UPC_REJECT_*` codes).
    pub value_a: f64,
    /// Second number of the reason.
    pub value_b: f64,
}

/// The branch comparison behind a decision at a junction.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcBranchRecord {
    /// Junction id.
    pub junction: u16,
    /// `chosen` is valid.
    pub has_chosen: bool,
    /// Chosen branch.
    pub chosen: u8,
    /// `runner_up` is valid.
    pub has_runner_up: bool,
    /// Best other eligible branch.
    pub runner_up: u8,
    /// `incumbent` is valid.
    pub has_incumbent: bool,
    /// The incumbent before this decision.
    pub incumbent: u8,
    /// The incumbent was kept only because of the hysteresis band.
    pub held_by_hysteresis: bool,
    /// Hysteresis fraction in force.
    pub hysteresis_frac: f64,
    /// Trunk mass-flux proxy, kg/s.
    pub trunk_flux_kg_per_s: f64,
    /// (sum of branch fluxes - trunk) / trunk.
    pub continuity_residual: f64,
    /// |residual| within tolerance.
    pub continuity_ok: bool,
    /// Required clear width, m.
    pub required_width_m: f64,
    /// Branches at the junction.
    pub count: u8,
    /// Mean mass-flux proxy per branch, kg/s.
    pub flux_kg_per_s: [f64; UPC_MAX_BRANCHES],
    /// Clear width per branch, m.
    pub width_m: [f64; UPC_MAX_BRANCHES],
    /// Samples per branch.
    pub samples: [u32; UPC_MAX_BRANCHES],
    /// Status per branch after this decision.
    pub status: [UpcBranchStatus; UPC_MAX_BRANCHES],
    /// The junction was seen through the flow, not felt.
    pub seen_by_flow: bool,
    /// Where each branch came from, `UPC_ORIGIN_*`.
    pub origin: [u32; UPC_MAX_BRANCHES],
}

/// One command: what to do, and the decision record saying why. Optional
/// numbers come with a `has_*` flag; when it is false the number is 0.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcCommand {
    /// Frame time, s.
    pub time_s: f64,
    /// Direction of motion of the head, unit, map frame.
    pub heading_map: [f64; 3],
    /// Speed, m/s (>= 0).
    pub speed_m_per_s: f64,
    /// Move tail first.
    pub reverse: bool,
    /// Effective operating mode, `UPC_MODE_*`.
    pub mode: u32,
    /// Health: flow channel, `UPC_CHANNEL_*`.
    pub health_flow: u32,
    /// Health: tactile channel, `UPC_CHANNEL_*`.
    pub health_tactile: u32,
    /// Health: bit k set when port k failed.
    pub failed_ports: u32,
    /// Health: bit k set when contact sensor k failed.
    pub failed_contacts: u64,
    /// Operating mode from health alone, `UPC_MODE_*`.
    pub health_mode: u32,
    /// Decision record: frame time, s.
    pub record_time_s: f64,
    /// Reason code, `UPC_REASON_*`.
    pub reason: u32,
    /// Phase after the decision, `UPC_PHASE_*`.
    pub phase: u32,
    /// Phase junction id (sample, enter, back-out).
    pub phase_junction: u16,
    /// Phase branch index (sample, enter).
    pub phase_branch: u8,
    /// Sampling began, s (sample).
    pub phase_since_s: f64,
    /// Second sampling round (sample).
    pub phase_second_round: bool,
    /// Station to reach next (back-out).
    pub phase_cursor_seq: u32,
    /// Why backing out, `UPC_BACK_OUT_*` (back-out).
    pub phase_cause: u32,
    /// What happened to the frame, `UPC_FRAME_*`.
    pub frame: u32,
    /// `standoff_m` is valid.
    pub has_standoff: bool,
    /// Standoff, head axis to nearest wall, m.
    pub standoff_m: f64,
    /// Required standoff, m.
    pub required_standoff_m: f64,
    /// `section_radius_m` is valid.
    pub has_section_radius: bool,
    /// Section radius, m.
    pub section_radius_m: f64,
    /// `centre_offset_m` is valid.
    pub has_centre_offset: bool,
    /// Head offset from the section centre, m.
    pub centre_offset_m: f64,
    /// `nearest_wall_m` is valid.
    pub has_nearest_wall: bool,
    /// Distance to the nearest stored wall point, m.
    pub nearest_wall_m: f64,
    /// `throat_diameter_m` is valid.
    pub has_throat_diameter: bool,
    /// Throat ahead: clear diameter, m.
    pub throat_diameter_m: f64,
    /// `throat_distance_m` is valid.
    pub has_throat_distance: bool,
    /// Throat ahead: distance, m.
    pub throat_distance_m: f64,
    /// `upstream_map` is valid.
    pub has_upstream: bool,
    /// Fused upstream direction, map frame.
    pub upstream_map: [f64; 3],
    /// Fused direction 1-sigma, rad.
    pub flow_dir_sigma_rad: f64,
    /// Fused dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Seconds the flow has been below the lost-flow threshold.
    pub flow_weak_for_s: f64,
    /// `ridge_gradient_per_m` is valid.
    pub has_ridge_gradient: bool,
    /// Dynamic-pressure ridge cue, 1/m.
    pub ridge_gradient_per_m: f64,
    /// What capped the speed, `UPC_SPEED_*`.
    pub speed_limit: u32,
    /// `branch` is valid (at a junction).
    pub has_branch: bool,
    /// Branch comparison.
    pub branch: UpcBranchRecord,
    /// `stall_*` are valid: the head did not advance as commanded over the
    /// last window.
    pub has_stall: bool,
    /// What the skin felt during the stall, `UPC_STALL_*`.
    pub stall_load: u32,
    /// Stall window length, s.
    pub stall_window_s: f64,
    /// Distance commanded over the window (less what the latency hides), m.
    pub stall_expected_m: f64,
    /// Distance the odometry shows over the window, m.
    pub stall_advanced_m: f64,
    /// `dead_end_*` are valid: a dead end was found this step.
    pub has_dead_end: bool,
    /// Why the way ahead ended, `UPC_BACK_OUT_*`.
    pub dead_end_cause: u32,
    /// `dead_end_width_m` is valid.
    pub has_dead_end_width: bool,
    /// Clear width the nose measured ahead, m.
    pub dead_end_width_m: f64,
    /// `dead_end_junction` is valid (false: no junction known; holding).
    pub has_dead_end_junction: bool,
    /// The junction backed out to.
    pub dead_end_junction: u16,
    /// `dead_end_next_branch` is valid (false: nothing left there).
    pub has_dead_end_next_branch: bool,
    /// The branch to be entered next at that junction.
    pub dead_end_next_branch: u8,
}

/// Counters kept by the navigator.
#[repr(C)]
#[derive(Debug, Clone, Copy, Default)]
pub struct UpcCounters {
    /// Steps taken.
    pub steps: u64,
    /// Probe solves that returned an error.
    pub probe_errors: u64,
    /// Frames whose contacts the tactile layer refused.
    pub tactile_errors: u64,
    /// Cross-section fits run.
    pub section_fits: u64,
}

/// A navigator in caller-provided storage. Opaque to C: only its size
/// and alignment matter (`upc_navigator_size`, `upc_navigator_align`).
#[derive(Debug)]
pub struct UpcNavigator {
    _opaque: [u8; 0],
}

/// What the storage holds: the magic word first (repr(C)), then the
/// navigator.
#[repr(C)]
struct Slot {
    magic: u64,
    inner: Inner,
}

const MAGIC: u64 = 0x5550_434e_4156_0001;

/// The 5-port navigator this library runs.
type Nav5 = DemoFrameNavigator<5>;
/// The 7-port navigator this library runs.
type Nav7 = DemoFrameNavigator<7>;

// The variants differ by 320 bytes of 86 KB: boxing is not an option
// without an allocator, and the storage is sized for the larger one anyway.
#[allow(clippy::large_enum_variant)]
enum Inner {
    Five(Nav5),
    Seven(Nav7),
}

impl Inner {
    const fn ports(&self) -> u32 {
        match self {
            Self::Five(_) => 5,
            Self::Seven(_) => 7,
        }
    }
}

/// Configuration of a 5- or 7-port navigator.
#[derive(Debug, Clone, Copy)]
pub(crate) enum AnyConfig {
    /// 5 ports.
    Five(OnboardConfig<5, UPC_MAX_MODULES, UPC_MAX_SENSORS>),
    /// 7 ports.
    Seven(OnboardConfig<7, UPC_MAX_MODULES, UPC_MAX_SENSORS>),
}

// ---------------------------------------------------------------- errors

/// Fixed-size text (truncates; always valid UTF-8 up to `len`).
#[derive(Clone, Copy)]
pub struct Msg<const N: usize> {
    buf: [u8; N],
    len: usize,
}

impl<const N: usize> Msg<N> {
    /// Empty.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            buf: [0; N],
            len: 0,
        }
    }

    /// Formatted.
    #[must_use]
    pub fn of(args: core::fmt::Arguments<'_>) -> Self {
        let mut m = Self::new();
        let _ = core::fmt::Write::write_fmt(&mut m, args);
        m
    }

    /// The text.
    #[must_use]
    pub fn as_str(&self) -> &str {
        let b = self.buf.get(..self.len).unwrap_or(&[]);
        core::str::from_utf8(b).unwrap_or("")
    }

    fn to_c(self, out: &mut [c_char]) {
        for slot in out.iter_mut() {
            *slot = 0;
        }
        // Keep the terminating NUL.
        let room = out.len().saturating_sub(1);
        for (slot, b) in out.iter_mut().zip(self.as_str().bytes().take(room)) {
            *slot = c_char::from_ne_bytes([b]);
        }
    }
}

impl<const N: usize> Default for Msg<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> core::fmt::Debug for Msg<N> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl<const N: usize> core::fmt::Write for Msg<N> {
    fn write_str(&mut self, s: &str) -> core::fmt::Result {
        for ch in s.chars() {
            let mut tmp = [0u8; 4];
            let enc = ch.encode_utf8(&mut tmp).as_bytes();
            let end = self.len + enc.len();
            // Leave room for the C side's NUL.
            if end >= N {
                break;
            }
            if let Some(dst) = self.buf.get_mut(self.len..end) {
                dst.copy_from_slice(enc);
                self.len = end;
            }
        }
        Ok(())
    }
}

/// An error on the Rust side, before it is written for C.
#[derive(Debug, Clone, Copy)]
pub struct Fault {
    /// `UPC_ERR_*`.
    pub code: i32,
    /// The field at fault.
    pub field: Msg<UPC_FIELD_LEN>,
    /// What is wrong, where, and the value given.
    pub message: Msg<UPC_MESSAGE_LEN>,
}

impl Fault {
    /// A fault.
    #[must_use]
    pub fn new(
        code: i32,
        field: core::fmt::Arguments<'_>,
        message: core::fmt::Arguments<'_>,
    ) -> Self {
        Self {
            code,
            field: Msg::of(field),
            message: Msg::of(message),
        }
    }
}

/// Write `f` into `err` (when non-NULL) and return its code.
fn report(err: *mut UpcError, f: &Fault) -> i32 {
    // SAFETY: the caller passes NULL or a pointer to a UpcError it owns.
    if let Some(e) = unsafe { err.as_mut() } {
        e.code = f.code;
        f.field.to_c(&mut e.field);
        f.message.to_c(&mut e.message);
    }
    f.code
}

fn fail(err: *mut UpcError, code: i32, field: &str, message: core::fmt::Arguments<'_>) -> i32 {
    report(err, &Fault::new(code, format_args!("{field}"), message))
}

fn ok(err: *mut UpcError) -> i32 {
    // SAFETY: as in `report`.
    if let Some(e) = unsafe { err.as_mut() } {
        e.code = UPC_OK;
        e.field = [0; UPC_FIELD_LEN];
        e.message = [0; UPC_MESSAGE_LEN];
    }
    UPC_OK
}

/// The name of a code (`"UPC_ERR_BODY"`), as a static NUL-terminated
/// string; `"UPC_ERR_UNKNOWN"` for a code this library does not define.
#[no_mangle]
pub extern "C" fn upc_error_name(code: i32) -> *const c_char {
    let s: &'static [u8] = match code {
        UPC_OK => b"UPC_OK\0",
        UPC_ERR_NULL => b"UPC_ERR_NULL\0",
        UPC_ERR_STORAGE_SIZE => b"UPC_ERR_STORAGE_SIZE\0",
        UPC_ERR_STORAGE_ALIGN => b"UPC_ERR_STORAGE_ALIGN\0",
        UPC_ERR_NOT_INITIALISED => b"UPC_ERR_NOT_INITIALISED\0",
        UPC_ERR_CAPACITY => b"UPC_ERR_CAPACITY\0",
        UPC_ERR_ENUM => b"UPC_ERR_ENUM\0",
        UPC_ERR_BODY => b"UPC_ERR_BODY\0",
        UPC_ERR_PROBE => b"UPC_ERR_PROBE\0",
        UPC_ERR_GAS => b"UPC_ERR_GAS\0",
        UPC_ERR_TACTILE => b"UPC_ERR_TACTILE\0",
        UPC_ERR_NAV => b"UPC_ERR_NAV\0",
        UPC_ERR_SETTING => b"UPC_ERR_SETTING\0",
        UPC_ERR_FRAME => b"UPC_ERR_FRAME\0",
        UPC_ERR_IO => b"UPC_ERR_IO\0",
        UPC_ERR_LOG => b"UPC_ERR_LOG\0",
        UPC_ERR_JSON => b"UPC_ERR_JSON\0",
        UPC_ERR_BUFFER => b"UPC_ERR_BUFFER\0",
        _ => b"UPC_ERR_UNKNOWN\0",
    };
    s.as_ptr().cast()
}

// ---------------------------------------------------------------- config

/// The default configuration: every tunable at its documented default
/// (see the fields of [`UpcConfig`]) and no robot yet (`module_count` 0,
/// which `upc_navigator_init` refuses until the caller gives the body).
#[no_mangle]
pub extern "C" fn upc_config_default() -> UpcConfig {
    UpcConfig {
        module_count: 0,
        modules: [UpcModule::default(); UPC_MAX_MODULES],
        sensor_count: 0,
        sensors: [UpcSensor::default(); UPC_MAX_SENSORS],
        joint_sigma_rad: 0.01,
        probe_layout: UPC_PROBE_SEVEN_PORT,
        cone_angle_rad: core::f64::consts::FRAC_PI_4,
        port_count: 7,
        port_normals: [[0.0; 3]; UPC_MAX_PORTS],
        port_noise_pa: 1.0,
        gas_gamma: 1.4,
        gas_r_j_per_kg_k: 287.05,
        assumed_static_temperature_k: 293.15,
        cruise_speed_m_per_s: f64::NAN,
        min_dynamic_pressure_pa: f64::NAN,
        section_every: 4,
        throat_every: 8,
        throat_stations: 4,
    }
}

// ---------------------------------------------------------------- navigator

/// Bytes of storage a navigator needs.
#[no_mangle]
pub extern "C" fn upc_navigator_size() -> usize {
    size_of::<Slot>()
}

/// Alignment, in bytes, the storage must have.
#[no_mangle]
pub extern "C" fn upc_navigator_align() -> usize {
    align_of::<Slot>()
}

/// Build a navigator in `storage` (at least `upc_navigator_size()` bytes,
/// aligned to `upc_navigator_align()`), from `config`. Nothing is
/// allocated; the storage stays the caller's. Calling it again on the
/// same storage starts a fresh navigator. On error the storage holds no
/// navigator (`upc_navigator_step` on it returns
/// `UPC_ERR_NOT_INITIALISED`).
///
/// # Safety
/// `storage` is NULL or points to `size` writable bytes that nothing else
/// uses while the navigator lives; `config` is NULL or points to a
/// `UpcConfig`; `err` is NULL or points to a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_navigator_init(
    storage: *mut core::ffi::c_void,
    size: usize,
    config: *const UpcConfig,
    err: *mut UpcError,
) -> i32 {
    if storage.is_null() {
        return fail(
            err,
            UPC_ERR_NULL,
            "storage",
            format_args!("storage is NULL"),
        );
    }
    if size < size_of::<Slot>() {
        return fail(
            err,
            UPC_ERR_STORAGE_SIZE,
            "size",
            format_args!(
                "storage of {size} bytes; the navigator needs {}",
                size_of::<Slot>()
            ),
        );
    }
    if !(storage as usize).is_multiple_of(align_of::<Slot>()) {
        return fail(
            err,
            UPC_ERR_STORAGE_ALIGN,
            "storage",
            format_args!(
                "storage at {storage:p} is not aligned to {} bytes",
                align_of::<Slot>()
            ),
        );
    }
    let slot = storage.cast::<MaybeUninit<Slot>>();
    // SAFETY: non-NULL, aligned, and at least size_of::<Slot>()
    // bytes the caller gave us; the magic word is written first so a failed
    // init leaves storage that `step` refuses.
    let slot = unsafe { &mut *slot };
    // SAFETY: the magic word is the first field of the repr(C) struct and
    // the storage is aligned: zero it, so storage whose init fails below
    // is refused by `upc_navigator_step`.
    unsafe { slot.as_mut_ptr().cast::<u64>().write(0) };
    // SAFETY: the caller passes NULL or a valid pointer.
    let Some(cfg) = (unsafe { config.as_ref() }) else {
        return fail(err, UPC_ERR_NULL, "config", format_args!("config is NULL"));
    };
    let any = match convert::onboard_config(cfg) {
        Ok(a) => a,
        Err(f) => return report(err, &f),
    };
    let built = match any {
        AnyConfig::Five(c) => Nav5::new(c).map(Inner::Five),
        AnyConfig::Seven(c) => Nav7::new(c).map(Inner::Seven),
    };
    match built {
        Ok(inner) => {
            slot.write(Slot {
                magic: MAGIC,
                inner,
            });
            ok(err)
        }
        Err(e) => {
            let (code, field) = convert::onboard_error_code(&e);
            fail(err, code, field.as_str(), format_args!("{e}"))
        }
    }
}

/// The navigator behind a handle, when it was initialised.
///
/// # Safety
/// `nav` is NULL or points to storage given to `upc_navigator_init`.
unsafe fn navigator_mut<'a>(nav: *mut UpcNavigator) -> Option<&'a mut Slot> {
    let nav = nav.cast::<Slot>();
    if nav.is_null() || !(nav as usize).is_multiple_of(align_of::<Slot>()) {
        return None;
    }
    // SAFETY: aligned and non-NULL; storage given to `upc_navigator_init`
    // starts with an initialised word (the magic after a successful init,
    // zero after a failed one), the first field of the repr(C) struct.
    let first = unsafe { nav.cast::<u64>().read() };
    if first != MAGIC {
        return None;
    }
    // SAFETY: the magic is written only together with a whole navigator.
    Some(unsafe { &mut *nav })
}

/// One step: `frame` in, `out` written. Reads the frame's present
/// channels (see [`UpcFrame`]); a frame older than the last one is merged
/// (wall points) or dropped as the decision record's `frame` field says,
/// and the command then repeats. Allocates nothing, cannot panic, bounded
/// work.
///
/// Returns `UPC_OK`, or an error (nothing stepped, `out` unchanged) when
/// the handle is not initialised or the frame does not fit.
///
/// # Safety
/// `nav` is NULL or storage given to `upc_navigator_init`; `frame` NULL or
/// a `UpcFrame`; `out` NULL or a `UpcCommand`; `err` NULL or a `UpcError`.
#[no_mangle]
pub unsafe extern "C" fn upc_navigator_step(
    nav: *mut UpcNavigator,
    frame: *const UpcFrame,
    out: *mut UpcCommand,
    err: *mut UpcError,
) -> i32 {
    // SAFETY: the caller's contract.
    let Some(n) = (unsafe { navigator_mut(nav) }) else {
        return fail(
            err,
            UPC_ERR_NOT_INITIALISED,
            "nav",
            format_args!("the navigator storage was not initialised by upc_navigator_init"),
        );
    };
    // SAFETY: the caller passes NULL or valid pointers.
    let (Some(frame), Some(out)) = (unsafe { frame.as_ref() }, unsafe { out.as_mut() }) else {
        return fail(
            err,
            UPC_ERR_NULL,
            "frame",
            format_args!("frame or out is NULL"),
        );
    };
    let cmd = match &mut n.inner {
        Inner::Five(nav) => convert::sensor_frame::<5>(frame).map(|f| nav.step(&f)),
        Inner::Seven(nav) => convert::sensor_frame::<7>(frame).map(|f| nav.step(&f)),
    };
    match cmd {
        Ok(c) => {
            convert::command_to_c(&c, out);
            ok(err)
        }
        Err(f) => report(err, &f),
    }
}

/// The navigator's counters (zero when the handle is not initialised).
///
/// # Safety
/// `nav` is NULL or storage given to `upc_navigator_init`.
#[no_mangle]
pub unsafe extern "C" fn upc_navigator_counters(nav: *mut UpcNavigator) -> UpcCounters {
    // SAFETY: the caller's contract.
    let Some(n) = (unsafe { navigator_mut(nav) }) else {
        return UpcCounters::default();
    };
    let c = match &n.inner {
        Inner::Five(x) => x.counters(),
        Inner::Seven(x) => x.counters(),
    };
    UpcCounters {
        steps: c.steps,
        probe_errors: c.probe_errors,
        tactile_errors: c.tactile_errors,
        section_fits: c.section_fits,
    }
}

#[cfg(all(feature = "panic-handler", not(feature = "host"), not(test)))]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo<'_>) -> ! {
    // nav-core cannot panic (clippy denies every panicking construct); this
    // only satisfies the no_std staticlib.
    loop {}
}

/// Probe ports of the navigator (5 or 7; 0 when the handle is not
/// initialised).
///
/// # Safety
/// `nav` is NULL or storage given to `upc_navigator_init`.
#[no_mangle]
pub unsafe extern "C" fn upc_navigator_ports(nav: *mut UpcNavigator) -> u32 {
    // SAFETY: the caller's contract.
    unsafe { navigator_mut(nav) }.map_or(0, |n| n.inner.ports())
}
