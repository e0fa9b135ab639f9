//! Between the C structs and nav-core's types. Every code is mapped by an
//! explicit table, never by an enum's discriminant, so reordering a Rust
//! enum cannot change a C number.

use crate::{
    AnyConfig, Fault, Msg, UpcBranchRecord, UpcBranchStatus, UpcCommand, UpcConfig, UpcFrame,
    UPC_BACK_OUT_CHILD_EXHAUSTED, UPC_BACK_OUT_DEAD_END, UPC_BACK_OUT_LOST_FLOW,
    UPC_BACK_OUT_THROAT_TOO_NARROW, UPC_BRANCH_DEAD_END, UPC_BRANCH_ENTERED, UPC_BRANCH_REJECTED,
    UPC_BRANCH_UNEXPLORED, UPC_CHANNEL_DEGRADED, UPC_CHANNEL_FAILED, UPC_CHANNEL_OK,
    UPC_DEAD_END_BLOCKED, UPC_DEAD_END_LOST_FLOW, UPC_DEAD_END_THROAT_TOO_NARROW, UPC_ERR_BODY,
    UPC_ERR_CAPACITY, UPC_ERR_ENUM, UPC_ERR_FRAME, UPC_ERR_GAS, UPC_ERR_NAV, UPC_ERR_PROBE,
    UPC_ERR_SETTING, UPC_ERR_TACTILE, UPC_FIELD_LEN, UPC_MAX_BRANCHES, UPC_MAX_CONTACTS,
    UPC_MAX_JOINTS, UPC_MAX_MODULES, UPC_MAX_SENSORS, UPC_PROBE_CUSTOM, UPC_PROBE_FIVE_PORT,
    UPC_PROBE_SEVEN_PORT,
};
use nav_core::body::{BodyConfig, BodyConfigError, ModuleSpec, SensorSpec};
use nav_core::decide::{
    BackOutCause, BranchRecord, DeadEndRecord, DecisionRecord, FrameDisposition, HealthFlags,
    Phase, ReasonCode, SpeedLimit, StallLoad, StallRecord,
};
use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use nav_core::gas::IdealGas;
use nav_core::health::{ChannelState, OperatingMode};
use nav_core::map::{BranchOrigin, BranchStatus, DeadEndCause, RejectReason};
use nav_core::navigator::Command;
use nav_core::onboard::{OnboardConfig, OnboardError};
use nav_core::probe::{LayoutError, Port, ProbeError, ProbeLayout};

fn count(v: u32) -> usize {
    usize::try_from(v).unwrap_or(usize::MAX)
}

fn capacity(field: &str, given: u32, most: usize) -> Fault {
    Fault::new(
        UPC_ERR_CAPACITY,
        format_args!("{field}"),
        format_args!("{field} = {given}: this library takes at most {most}"),
    )
}

type Body = BodyConfig<UPC_MAX_MODULES, UPC_MAX_SENSORS>;

fn body_and_gas(c: &UpcConfig) -> Result<(Body, IdealGas), Fault> {
    let n = count(c.module_count);
    if n > UPC_MAX_MODULES {
        return Err(capacity("module_count", c.module_count, UPC_MAX_MODULES));
    }
    let ns = count(c.sensor_count);
    if ns > UPC_MAX_SENSORS {
        return Err(capacity("sensor_count", c.sensor_count, UPC_MAX_SENSORS));
    }
    let mut body = Body::uniform(
        n,
        ModuleSpec {
            length_m: 0.0,
            radius_m: 0.0,
        },
    );
    for (slot, m) in body.modules.iter_mut().zip(c.modules.iter()).take(n) {
        *slot = ModuleSpec {
            length_m: m.length_m,
            radius_m: m.radius_m,
        };
    }
    for s in c.sensors.iter().take(ns) {
        body.push_sensor(SensorSpec {
            module: s.module,
            axial_m: s.axial_m,
            angle_rad: s.angle_rad,
            cap_polar_rad: s.on_nose_cap.then_some(s.cap_polar_rad),
        });
    }
    body.joint_sigma_rad = c.joint_sigma_rad;
    let gas = IdealGas::new(c.gas_gamma, c.gas_r_j_per_kg_k).map_err(|e| {
        let field = match e {
            nav_core::gas::GasError::InvalidGasConstant { .. } => "gas_r_j_per_kg_k",
            _ => "gas_gamma",
        };
        Fault::new(
            UPC_ERR_GAS,
            format_args!("{field}"),
            format_args!("gas: {e}"),
        )
    })?;
    Ok((body, gas))
}

/// Probe ports the configuration describes (5 or 7).
fn ports_of(c: &UpcConfig) -> Result<usize, Fault> {
    let ports = match c.probe_layout {
        UPC_PROBE_FIVE_PORT => 5,
        UPC_PROBE_SEVEN_PORT => 7,
        UPC_PROBE_CUSTOM => count(c.port_count),
        other => {
            return Err(Fault::new(
                UPC_ERR_ENUM,
                format_args!("probe_layout"),
                format_args!(
                    "probe_layout = {other}: not UPC_PROBE_FIVE_PORT, _SEVEN_PORT or _CUSTOM"
                ),
            ));
        }
    };
    if ports == 5 || ports == 7 {
        Ok(ports)
    } else {
        Err(Fault::new(
            UPC_ERR_CAPACITY,
            format_args!("port_count"),
            format_args!("port_count = {ports}: this library runs 5- and 7-port probes"),
        ))
    }
}

/// A C configuration as nav-core's, exactly as `replay` builds it from a
/// log header (same layout construction, same defaults), so the two give
/// the same navigator.
pub(crate) fn onboard_config(c: &UpcConfig) -> Result<AnyConfig, Fault> {
    match ports_of(c)? {
        5 => Ok(AnyConfig::Five(onboard_config_for::<5>(c)?)),
        _ => Ok(AnyConfig::Seven(onboard_config_for::<7>(c)?)),
    }
}

/// A C configuration as nav-core's for a `P`-port navigator (the mapping
/// `upc_navigator_init` uses), for Rust firmware that keeps its robot in
/// a [`UpcConfig`] and embeds [`nav_core::onboard::DemoFrameNavigator`]
/// directly. The result still goes through the navigator's validation.
///
/// # Errors
/// A [`Fault`] naming the field when the configuration does not describe a
/// `P`-port robot within the capacities, or its layout or gas is refused.
pub fn onboard_config_for<const P: usize>(
    c: &UpcConfig,
) -> Result<OnboardConfig<P, UPC_MAX_MODULES, UPC_MAX_SENSORS>, Fault> {
    let ports = ports_of(c)?;
    if ports != P {
        return Err(Fault::new(
            UPC_ERR_CAPACITY,
            format_args!("port_count"),
            format_args!("the configuration has {ports} ports, the navigator {P}"),
        ));
    }
    let (body, gas) = body_and_gas(c)?;
    Ok(finish(c, body, layout::<P>(c)?, gas))
}

fn layout_fault(e: LayoutError) -> Fault {
    let mut field = Msg::<UPC_FIELD_LEN>::new();
    let _ = match e {
        LayoutError::ConeAngle { .. } => core::fmt::Write::write_str(&mut field, "cone_angle_rad"),
        LayoutError::Sigma { .. } => core::fmt::Write::write_str(&mut field, "port_noise_pa"),
        LayoutError::NonFiniteNormal { port } | LayoutError::NotUnitNormal { port, .. } => {
            core::fmt::Write::write_fmt(&mut field, format_args!("port_normals[{port}]"))
        }
        LayoutError::DuplicateNormals { second, .. } => {
            core::fmt::Write::write_fmt(&mut field, format_args!("port_normals[{second}]"))
        }
        _ => core::fmt::Write::write_str(&mut field, "port_normals"),
    };
    Fault {
        code: UPC_ERR_PROBE,
        field,
        message: Msg::of(format_args!("probe layout: {e}")),
    }
}

fn layout<const N: usize>(c: &UpcConfig) -> Result<ProbeLayout<N>, Fault> {
    let sigma = c.port_noise_pa;
    // The presets go through their normals into a custom layout, as
    // `replay` builds them, so both give the same bits.
    let normals: [[f64; 3]; N] = match c.probe_layout {
        UPC_PROBE_FIVE_PORT => {
            let l = ProbeLayout::<5>::five_port(c.cone_angle_rad, sigma).map_err(layout_fault)?;
            let n = l.normals().map(|v| [v.x, v.y, v.z]);
            core::array::from_fn(|i| n.get(i).copied().unwrap_or([0.0; 3]))
        }
        UPC_PROBE_SEVEN_PORT => {
            let l = ProbeLayout::<7>::seven_port(c.cone_angle_rad, sigma).map_err(layout_fault)?;
            let n = l.normals().map(|v| [v.x, v.y, v.z]);
            core::array::from_fn(|i| n.get(i).copied().unwrap_or([0.0; 3]))
        }
        _ => core::array::from_fn(|i| c.port_normals.get(i).copied().unwrap_or([0.0; 3])),
    };
    let ports = normals.map(|normal| Port {
        normal,
        bias_pa: 0.0,
        sigma_pa: sigma,
    });
    ProbeLayout::custom(ports).map_err(layout_fault)
}

fn finish<const P: usize>(
    c: &UpcConfig,
    body: Body,
    layout: ProbeLayout<P>,
    gas: IdealGas,
) -> OnboardConfig<P, UPC_MAX_MODULES, UPC_MAX_SENSORS> {
    let mut cfg = OnboardConfig::new(body, layout, gas);
    // NaN leaves the default (f64::min returns the other operand).
    cfg.nav.decide.cruise_speed_m_per_s = c
        .cruise_speed_m_per_s
        .min(cfg.nav.decide.cruise_speed_m_per_s);
    cfg.nav.decide.min_dynamic_pressure_pa = if c.min_dynamic_pressure_pa.is_nan() {
        5.0 * c.port_noise_pa
    } else {
        c.min_dynamic_pressure_pa
    };
    cfg.assumed_static_temperature_k = c.assumed_static_temperature_k;
    cfg.section_every = c.section_every;
    cfg.throat_every = c.throat_every;
    cfg.throat_stations = count(c.throat_stations);
    cfg
}

/// The code and the field at fault of a refused configuration.
pub(crate) fn onboard_error_code(e: &OnboardError) -> (i32, Msg<UPC_FIELD_LEN>) {
    match *e {
        OnboardError::Body(b) => (UPC_ERR_BODY, body_field(b)),
        OnboardError::Probe(p) => match p {
            ProbeError::Layout(l) => (UPC_ERR_PROBE, layout_fault(l).field),
            _ => (UPC_ERR_PROBE, Msg::of(format_args!("probe"))),
        },
        OnboardError::Tactile(t) => (
            UPC_ERR_TACTILE,
            match t {
                nav_core::tactile::TactileError::InvalidConfig { field, .. } => {
                    Msg::of(format_args!("tactile.{field}"))
                }
                _ => Msg::of(format_args!("tactile")),
            },
        ),
        OnboardError::Nav(n) => (UPC_ERR_NAV, Msg::of(format_args!("{}", n.field.name()))),
        OnboardError::Setting { field, .. } => (UPC_ERR_SETTING, Msg::of(format_args!("{field}"))),
        OnboardError::FlowWindow(w) => (
            UPC_ERR_SETTING,
            match w {
                nav_core::flow_window::FlowWindowError::Config { field, .. } => {
                    Msg::of(format_args!("flow_window.{field}"))
                }
                _ => Msg::of(format_args!("flow_window")),
            },
        ),
    }
}

fn body_field(b: BodyConfigError) -> Msg<UPC_FIELD_LEN> {
    match b {
        BodyConfigError::ModuleCount { .. } => Msg::of(format_args!("module_count")),
        BodyConfigError::ModuleLength { module, .. } => {
            Msg::of(format_args!("modules[{module}].length_m"))
        }
        BodyConfigError::ModuleRadius { module, .. } => {
            Msg::of(format_args!("modules[{module}].radius_m"))
        }
        BodyConfigError::SensorCount { .. } => Msg::of(format_args!("sensor_count")),
        BodyConfigError::SensorModule { sensor, .. } => {
            Msg::of(format_args!("sensors[{sensor}].module"))
        }
        BodyConfigError::SensorAxial { sensor, .. } => {
            Msg::of(format_args!("sensors[{sensor}].axial_m"))
        }
        BodyConfigError::SensorAngle { sensor, .. } => {
            Msg::of(format_args!("sensors[{sensor}].angle_rad"))
        }
        BodyConfigError::JointSigma { .. } => Msg::of(format_args!("joint_sigma_rad")),
        BodyConfigError::SensorCap { sensor, .. } => {
            Msg::of(format_args!("sensors[{sensor}].cap_polar_rad"))
        }
    }
}

/// A C frame as nav-core's, for a `P`-port navigator.
pub(crate) fn sensor_frame<const P: usize>(
    f: &UpcFrame,
) -> Result<SensorFrame<P, UPC_MAX_JOINTS, UPC_MAX_CONTACTS>, Fault> {
    let mut out = SensorFrame::<P, UPC_MAX_JOINTS, UPC_MAX_CONTACTS>::empty(f.time_s);
    if f.has_pose {
        out.pose = Some(HeadPose {
            position_m: f.pose.position_m,
            orientation_wxyz: f.pose.orientation_wxyz,
            position_sigma_m: f.pose.position_sigma_m,
            attitude_sigma_rad: f.pose.attitude_sigma_rad,
        });
    }
    if f.has_joints {
        let n = count(f.joint_count);
        if n > UPC_MAX_JOINTS {
            return Err(capacity("joint_count", f.joint_count, UPC_MAX_JOINTS));
        }
        out.joints = Some(core::array::from_fn(|i| {
            if i < n {
                f.joints
                    .get(i)
                    .map_or(JointAngles::default(), |j| JointAngles {
                        pitch_rad: j.pitch_rad,
                        yaw_rad: j.yaw_rad,
                    })
            } else {
                JointAngles::default()
            }
        }));
    }
    if f.has_ports {
        if count(f.port_count) != P {
            return Err(Fault::new(
                UPC_ERR_FRAME,
                format_args!("port_count"),
                format_args!(
                    "port_count = {}: the navigator's probe has {P} ports",
                    f.port_count
                ),
            ));
        }
        out.port_pressures_pa = Some(core::array::from_fn(|i| {
            f.port_pressures_pa.get(i).copied().unwrap_or(f64::NAN)
        }));
    }
    if f.has_total_temperature {
        out.total_temperature_k = Some(f.total_temperature_k);
    }
    out.contacts_reported = f.has_contacts;
    let nc = count(f.contact_count);
    if nc > UPC_MAX_CONTACTS {
        return Err(capacity("contact_count", f.contact_count, UPC_MAX_CONTACTS));
    }
    for c in f.contacts.iter().take(nc) {
        out.push_contact(Contact {
            module: c.module,
            sensor: c.sensor,
            force_n: c.force_n,
            normal_module: c.has_normal.then_some(c.normal_module),
        });
    }
    Ok(out)
}

// ------------------------------------------------------------- the codes

const MODES: [(OperatingMode, u32); 6] = [
    (OperatingMode::Nominal, crate::UPC_MODE_NOMINAL),
    (OperatingMode::FlowDegraded, crate::UPC_MODE_FLOW_DEGRADED),
    (OperatingMode::TactileOnly, crate::UPC_MODE_TACTILE_ONLY),
    (OperatingMode::FlowOnly, crate::UPC_MODE_FLOW_ONLY),
    (OperatingMode::Hold, crate::UPC_MODE_HOLD),
    (OperatingMode::FlowWeak, crate::UPC_MODE_FLOW_WEAK),
];

const CHANNELS: [(ChannelState, u32); 4] = [
    (ChannelState::Ok, UPC_CHANNEL_OK),
    (ChannelState::Degraded, UPC_CHANNEL_DEGRADED),
    (ChannelState::Failed, UPC_CHANNEL_FAILED),
    (ChannelState::Weak, crate::UPC_CHANNEL_WEAK),
];

const REASONS: [(ReasonCode, u32); 20] = [
    (
        ReasonCode::FollowUpstream,
        crate::UPC_REASON_FOLLOW_UPSTREAM,
    ),
    (ReasonCode::Recentre, crate::UPC_REASON_RECENTRE),
    (ReasonCode::FollowByFeel, crate::UPC_REASON_FOLLOW_BY_FEEL),
    (
        ReasonCode::FollowFlowOnly,
        crate::UPC_REASON_FOLLOW_FLOW_ONLY,
    ),
    (ReasonCode::SampleBranch, crate::UPC_REASON_SAMPLE_BRANCH),
    (ReasonCode::EnterBranch, crate::UPC_REASON_ENTER_BRANCH),
    (ReasonCode::SwitchBranch, crate::UPC_REASON_SWITCH_BRANCH),
    (ReasonCode::BackOut, crate::UPC_REASON_BACK_OUT),
    (
        ReasonCode::ResumeNextBranch,
        crate::UPC_REASON_RESUME_NEXT_BRANCH,
    ),
    (
        ReasonCode::HoldChannelsUnhealthy,
        crate::UPC_REASON_HOLD_CHANNELS_UNHEALTHY,
    ),
    (
        ReasonCode::HoldNoSafeStandoff,
        crate::UPC_REASON_HOLD_NO_SAFE_STANDOFF,
    ),
    (ReasonCode::HoldNoPose, crate::UPC_REASON_HOLD_NO_POSE),
    (
        ReasonCode::HoldNoFlowAtJunction,
        crate::UPC_REASON_HOLD_NO_FLOW_AT_JUNCTION,
    ),
    (ReasonCode::GaveUp, crate::UPC_REASON_GAVE_UP),
    (ReasonCode::HoldAtSource, crate::UPC_REASON_HOLD_AT_SOURCE),
    (
        ReasonCode::HoldModeSettling,
        crate::UPC_REASON_HOLD_MODE_SETTLING,
    ),
    (
        ReasonCode::HoldClockUntrusted,
        crate::UPC_REASON_HOLD_CLOCK_UNTRUSTED,
    ),
    (
        ReasonCode::FollowWeakFlow,
        crate::UPC_REASON_FOLLOW_WEAK_FLOW,
    ),
    (ReasonCode::DwellWeakFlow, crate::UPC_REASON_DWELL_WEAK_FLOW),
    (ReasonCode::HoldStalled, crate::UPC_REASON_HOLD_STALLED),
];

const ORIGINS: [(BranchOrigin, u32); 3] = [
    (BranchOrigin::Felt, crate::UPC_ORIGIN_FELT),
    (BranchOrigin::Followed, crate::UPC_ORIGIN_FOLLOWED),
    (BranchOrigin::Guessed, crate::UPC_ORIGIN_GUESSED),
];

const STALLS: [(StallLoad, u32); 3] = [
    (StallLoad::NoseLoaded, crate::UPC_STALL_NOSE_LOADED),
    (StallLoad::SidesOnly, crate::UPC_STALL_SIDES_ONLY),
    (StallLoad::Unfelt, crate::UPC_STALL_UNFELT),
];

const SPEEDS: [(SpeedLimit, u32); 9] = [
    (SpeedLimit::Cruise, crate::UPC_SPEED_CRUISE),
    (SpeedLimit::Wall, crate::UPC_SPEED_WALL),
    (SpeedLimit::Throat, crate::UPC_SPEED_THROAT),
    (SpeedLimit::Junction, crate::UPC_SPEED_JUNCTION),
    (SpeedLimit::Mode, crate::UPC_SPEED_MODE),
    (SpeedLimit::Feel, crate::UPC_SPEED_FEEL),
    (SpeedLimit::BackOut, crate::UPC_SPEED_BACK_OUT),
    (SpeedLimit::Stopped, crate::UPC_SPEED_STOPPED),
    (SpeedLimit::Touch, crate::UPC_SPEED_TOUCH),
];

const FRAMES: [(FrameDisposition, u32); 6] = [
    (FrameDisposition::Used, crate::UPC_FRAME_USED),
    (
        FrameDisposition::PartlyRejected,
        crate::UPC_FRAME_PARTLY_REJECTED,
    ),
    (FrameDisposition::LateMerged, crate::UPC_FRAME_LATE_MERGED),
    (
        FrameDisposition::DroppedStale,
        crate::UPC_FRAME_DROPPED_STALE,
    ),
    (
        FrameDisposition::DroppedInvalid,
        crate::UPC_FRAME_DROPPED_INVALID,
    ),
    (
        FrameDisposition::DroppedClockJump,
        crate::UPC_FRAME_DROPPED_CLOCK_JUMP,
    ),
];

const CAUSES: [(BackOutCause, u32); 7] = [
    (BackOutCause::DeadEnd, UPC_BACK_OUT_DEAD_END),
    (BackOutCause::LostFlow, UPC_BACK_OUT_LOST_FLOW),
    (
        BackOutCause::ThroatTooNarrow,
        UPC_BACK_OUT_THROAT_TOO_NARROW,
    ),
    (BackOutCause::ChildExhausted, UPC_BACK_OUT_CHILD_EXHAUSTED),
    (BackOutCause::Obstruction, crate::UPC_BACK_OUT_OBSTRUCTION),
    (BackOutCause::Stalled, crate::UPC_BACK_OUT_STALLED),
    (
        BackOutCause::NarrowingAhead,
        crate::UPC_BACK_OUT_NARROWING_AHEAD,
    ),
];

const DEAD_ENDS: [(DeadEndCause, u32); 3] = [
    (DeadEndCause::Blocked, UPC_DEAD_END_BLOCKED),
    (DeadEndCause::LostFlow, UPC_DEAD_END_LOST_FLOW),
    (
        DeadEndCause::ThroatTooNarrow,
        UPC_DEAD_END_THROAT_TOO_NARROW,
    ),
];

fn to_code<T: PartialEq + Copy, const N: usize>(table: &[(T, u32); N], v: T) -> u32 {
    table
        .iter()
        .find(|(t, _)| *t == v)
        .map_or(u32::MAX, |(_, c)| *c)
}

fn from_code<T: Copy, const N: usize>(
    table: &[(T, u32); N],
    code: u32,
    field: &str,
) -> Result<T, Fault> {
    table
        .iter()
        .find(|(_, c)| *c == code)
        .map(|(t, _)| *t)
        .ok_or_else(|| {
            Fault::new(
                UPC_ERR_ENUM,
                format_args!("{field}"),
                format_args!("{field} = {code}: not a defined code"),
            )
        })
}

fn opt(v: Option<f64>) -> (bool, f64) {
    v.map_or((false, 0.0), |x| (true, x))
}

fn branch_status_to_c(s: &BranchStatus) -> UpcBranchStatus {
    match *s {
        BranchStatus::Unexplored => UpcBranchStatus {
            kind: UPC_BRANCH_UNEXPLORED,
            ..UpcBranchStatus::default()
        },
        BranchStatus::Entered => UpcBranchStatus {
            kind: UPC_BRANCH_ENTERED,
            ..UpcBranchStatus::default()
        },
        BranchStatus::Rejected(r) => {
            let (detail, value_a, value_b) = match r {
                RejectReason::TooNarrow {
                    width_m,
                    required_m,
                } => (crate::UPC_REJECT_TOO_NARROW, width_m, required_m),
                RejectReason::CameFrom { cos_to_upstream } => {
                    (crate::UPC_REJECT_CAME_FROM, cos_to_upstream, 0.0)
                }
                RejectReason::WeakerFlow {
                    flux_kg_per_s,
                    chosen_flux_kg_per_s,
                } => (
                    crate::UPC_REJECT_WEAKER_FLOW,
                    flux_kg_per_s,
                    chosen_flux_kg_per_s,
                ),
                RejectReason::NoFlow { flux_kg_per_s } => {
                    (crate::UPC_REJECT_NO_FLOW, flux_kg_per_s, 0.0)
                }
            };
            UpcBranchStatus {
                kind: UPC_BRANCH_REJECTED,
                detail,
                value_a,
                value_b,
            }
        }
        BranchStatus::DeadEnd(c) => UpcBranchStatus {
            kind: UPC_BRANCH_DEAD_END,
            detail: to_code(&DEAD_ENDS, c),
            ..UpcBranchStatus::default()
        },
    }
}

fn branch_status_from_c(s: &UpcBranchStatus) -> Result<BranchStatus, Fault> {
    Ok(match s.kind {
        UPC_BRANCH_UNEXPLORED => BranchStatus::Unexplored,
        UPC_BRANCH_ENTERED => BranchStatus::Entered,
        UPC_BRANCH_REJECTED => BranchStatus::Rejected(match s.detail {
            crate::UPC_REJECT_TOO_NARROW => RejectReason::TooNarrow {
                width_m: s.value_a,
                required_m: s.value_b,
            },
            crate::UPC_REJECT_CAME_FROM => RejectReason::CameFrom {
                cos_to_upstream: s.value_a,
            },
            crate::UPC_REJECT_WEAKER_FLOW => RejectReason::WeakerFlow {
                flux_kg_per_s: s.value_a,
                chosen_flux_kg_per_s: s.value_b,
            },
            crate::UPC_REJECT_NO_FLOW => RejectReason::NoFlow {
                flux_kg_per_s: s.value_a,
            },
            other => {
                return Err(Fault::new(
                    UPC_ERR_ENUM,
                    format_args!("branch.status.detail"),
                    format_args!("branch.status.detail = {other}: not a UPC_REJECT_* code"),
                ));
            }
        }),
        UPC_BRANCH_DEAD_END => {
            BranchStatus::DeadEnd(from_code(&DEAD_ENDS, s.detail, "branch.status.detail")?)
        }
        other => {
            return Err(Fault::new(
                UPC_ERR_ENUM,
                format_args!("branch.status.kind"),
                format_args!("branch.status.kind = {other}: not a UPC_BRANCH_* code"),
            ));
        }
    })
}

/// A command as the C struct.
pub(crate) fn command_to_c(c: &Command, out: &mut UpcCommand) {
    let r = &c.record;
    let mut o = UpcCommand {
        time_s: c.time_s,
        heading_map: c.heading_map,
        speed_m_per_s: c.speed_m_per_s,
        reverse: c.reverse,
        mode: to_code(&MODES, c.mode),
        health_flow: to_code(&CHANNELS, c.health.flow),
        health_tactile: to_code(&CHANNELS, c.health.tactile),
        failed_ports: c.health.failed_ports,
        failed_contacts: c.health.failed_contacts,
        health_mode: to_code(&MODES, c.health.health_mode),
        record_time_s: r.time_s,
        reason: to_code(&REASONS, r.reason),
        frame: to_code(&FRAMES, r.frame),
        required_standoff_m: r.required_standoff_m,
        flow_dir_sigma_rad: r.flow_dir_sigma_rad,
        dynamic_pressure_pa: r.dynamic_pressure_pa,
        flow_weak_for_s: r.flow_weak_for_s,
        speed_limit: to_code(&SPEEDS, r.speed_limit),
        ..UpcCommand::default()
    };
    match r.phase {
        Phase::Follow => o.phase = crate::UPC_PHASE_FOLLOW,
        Phase::Sample {
            junction,
            branch,
            since_s,
            second_round,
        } => {
            o.phase = crate::UPC_PHASE_SAMPLE;
            o.phase_junction = junction;
            o.phase_branch = branch;
            o.phase_since_s = since_s;
            o.phase_second_round = second_round;
        }
        Phase::Enter { junction, branch } => {
            o.phase = crate::UPC_PHASE_ENTER;
            o.phase_junction = junction;
            o.phase_branch = branch;
        }
        Phase::BackOut {
            junction,
            cursor_seq,
            cause,
        } => {
            o.phase = crate::UPC_PHASE_BACK_OUT;
            o.phase_junction = junction;
            o.phase_cursor_seq = cursor_seq;
            o.phase_cause = to_code(&CAUSES, cause);
        }
        Phase::GaveUp => o.phase = crate::UPC_PHASE_GAVE_UP,
        Phase::AtSource => o.phase = crate::UPC_PHASE_AT_SOURCE,
    }
    (o.has_standoff, o.standoff_m) = opt(r.standoff_m);
    (o.has_section_radius, o.section_radius_m) = opt(r.section_radius_m);
    (o.has_centre_offset, o.centre_offset_m) = opt(r.centre_offset_m);
    (o.has_nearest_wall, o.nearest_wall_m) = opt(r.nearest_wall_m);
    (o.has_throat_diameter, o.throat_diameter_m) = opt(r.throat_diameter_m);
    (o.has_throat_distance, o.throat_distance_m) = opt(r.throat_distance_m);
    (o.has_ridge_gradient, o.ridge_gradient_per_m) = opt(r.ridge_gradient_per_m);
    if let Some(u) = r.upstream_map {
        o.has_upstream = true;
        o.upstream_map = u;
    }
    if let Some(b) = &r.branch {
        o.has_branch = true;
        let mut status = [UpcBranchStatus::default(); UPC_MAX_BRANCHES];
        for (slot, s) in status.iter_mut().zip(b.status.iter()) {
            *slot = branch_status_to_c(s);
        }
        o.branch = UpcBranchRecord {
            junction: b.junction,
            has_chosen: b.chosen.is_some(),
            chosen: b.chosen.unwrap_or(0),
            has_runner_up: b.runner_up.is_some(),
            runner_up: b.runner_up.unwrap_or(0),
            has_incumbent: b.incumbent.is_some(),
            incumbent: b.incumbent.unwrap_or(0),
            held_by_hysteresis: b.held_by_hysteresis,
            hysteresis_frac: b.hysteresis_frac,
            trunk_flux_kg_per_s: b.trunk_flux_kg_per_s,
            continuity_residual: b.continuity_residual,
            continuity_ok: b.continuity_ok,
            required_width_m: b.required_width_m,
            count: b.count,
            flux_kg_per_s: b.flux_kg_per_s,
            width_m: b.width_m,
            samples: b.samples,
            status,
            seen_by_flow: b.seen_by_flow,
            origin: b.origin.map(|o| to_code(&ORIGINS, o)),
        };
    }
    if let Some(st) = &r.stall {
        o.has_stall = true;
        o.stall_load = to_code(&STALLS, st.load);
        o.stall_window_s = st.window_s;
        o.stall_expected_m = st.expected_m;
        o.stall_advanced_m = st.advanced_m;
    }
    if let Some(d) = &r.dead_end {
        o.has_dead_end = true;
        o.dead_end_cause = to_code(&CAUSES, d.cause);
        o.has_dead_end_width = d.width_m.is_some();
        o.dead_end_width_m = d.width_m.unwrap_or(0.0);
        o.has_dead_end_junction = d.junction.is_some();
        o.dead_end_junction = d.junction.unwrap_or(0);
        o.has_dead_end_next_branch = d.next_branch.is_some();
        o.dead_end_next_branch = d.next_branch.unwrap_or(0);
    }
    *out = o;
}

fn some_if(has: bool, v: f64) -> Option<f64> {
    has.then_some(v)
}

/// A C command back as nav-core's `Command`: the inverse of the step's
/// output conversion, field for field. The host helpers use it to write
/// the trace line of a command a C program received, which is how the C
/// example shows that the struct carries the whole decision record.
///
/// # Errors
/// A [`Fault`] naming a code field that holds an undefined value.
pub fn command_from_c(o: &UpcCommand) -> Result<Command, Fault> {
    let phase = match o.phase {
        crate::UPC_PHASE_FOLLOW => Phase::Follow,
        crate::UPC_PHASE_SAMPLE => Phase::Sample {
            junction: o.phase_junction,
            branch: o.phase_branch,
            since_s: o.phase_since_s,
            second_round: o.phase_second_round,
        },
        crate::UPC_PHASE_ENTER => Phase::Enter {
            junction: o.phase_junction,
            branch: o.phase_branch,
        },
        crate::UPC_PHASE_BACK_OUT => Phase::BackOut {
            junction: o.phase_junction,
            cursor_seq: o.phase_cursor_seq,
            cause: from_code(&CAUSES, o.phase_cause, "phase_cause")?,
        },
        crate::UPC_PHASE_GAVE_UP => Phase::GaveUp,
        crate::UPC_PHASE_AT_SOURCE => Phase::AtSource,
        other => {
            return Err(Fault::new(
                UPC_ERR_ENUM,
                format_args!("phase"),
                format_args!("phase = {other}: not a UPC_PHASE_* code"),
            ));
        }
    };
    let branch = if o.has_branch {
        let b = &o.branch;
        let mut status = [BranchStatus::Unexplored; UPC_MAX_BRANCHES];
        for (slot, s) in status.iter_mut().zip(b.status.iter()) {
            *slot = branch_status_from_c(s)?;
        }
        let mut origin = [BranchOrigin::Felt; UPC_MAX_BRANCHES];
        for (slot, c) in origin.iter_mut().zip(b.origin.iter()) {
            *slot = from_code(&ORIGINS, *c, "branch.origin")?;
        }
        Some(BranchRecord {
            junction: b.junction,
            chosen: b.has_chosen.then_some(b.chosen),
            runner_up: b.has_runner_up.then_some(b.runner_up),
            incumbent: b.has_incumbent.then_some(b.incumbent),
            held_by_hysteresis: b.held_by_hysteresis,
            hysteresis_frac: b.hysteresis_frac,
            trunk_flux_kg_per_s: b.trunk_flux_kg_per_s,
            continuity_residual: b.continuity_residual,
            continuity_ok: b.continuity_ok,
            required_width_m: b.required_width_m,
            count: b.count,
            flux_kg_per_s: b.flux_kg_per_s,
            width_m: b.width_m,
            samples: b.samples,
            status,
            seen_by_flow: b.seen_by_flow,
            origin,
        })
    } else {
        None
    };
    Ok(Command {
        time_s: o.time_s,
        heading_map: o.heading_map,
        speed_m_per_s: o.speed_m_per_s,
        reverse: o.reverse,
        mode: from_code(&MODES, o.mode, "mode")?,
        record: DecisionRecord {
            time_s: o.record_time_s,
            reason: from_code(&REASONS, o.reason, "reason")?,
            phase,
            frame: from_code(&FRAMES, o.frame, "frame")?,
            standoff_m: some_if(o.has_standoff, o.standoff_m),
            required_standoff_m: o.required_standoff_m,
            section_radius_m: some_if(o.has_section_radius, o.section_radius_m),
            centre_offset_m: some_if(o.has_centre_offset, o.centre_offset_m),
            nearest_wall_m: some_if(o.has_nearest_wall, o.nearest_wall_m),
            throat_diameter_m: some_if(o.has_throat_diameter, o.throat_diameter_m),
            throat_distance_m: some_if(o.has_throat_distance, o.throat_distance_m),
            upstream_map: o.has_upstream.then_some(o.upstream_map),
            flow_dir_sigma_rad: o.flow_dir_sigma_rad,
            dynamic_pressure_pa: o.dynamic_pressure_pa,
            flow_weak_for_s: o.flow_weak_for_s,
            ridge_gradient_per_m: some_if(o.has_ridge_gradient, o.ridge_gradient_per_m),
            speed_limit: from_code(&SPEEDS, o.speed_limit, "speed_limit")?,
            branch,
            stall: if o.has_stall {
                Some(StallRecord {
                    load: from_code(&STALLS, o.stall_load, "stall_load")?,
                    window_s: o.stall_window_s,
                    expected_m: o.stall_expected_m,
                    advanced_m: o.stall_advanced_m,
                })
            } else {
                None
            },
            dead_end: if o.has_dead_end {
                Some(DeadEndRecord {
                    cause: from_code(&CAUSES, o.dead_end_cause, "dead_end_cause")?,
                    width_m: some_if(o.has_dead_end_width, o.dead_end_width_m),
                    junction: o.has_dead_end_junction.then_some(o.dead_end_junction),
                    next_branch: o.has_dead_end_next_branch.then_some(o.dead_end_next_branch),
                })
            } else {
                None
            },
        },
        health: HealthFlags {
            flow: from_code(&CHANNELS, o.health_flow, "health_flow")?,
            tactile: from_code(&CHANNELS, o.health_tactile, "health_tactile")?,
            failed_ports: o.failed_ports,
            failed_contacts: o.failed_contacts,
            health_mode: from_code(&MODES, o.health_mode, "health_mode")?,
        },
    })
}
