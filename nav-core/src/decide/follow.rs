//! Follow: head upstream (opposite the fused flow direction); without
//! usable flow, along the conduit axis by feel (signed along the last
//! heading). Centring, the wall push and the speed come from
//! `standoff::steer`.

use crate::health::OperatingMode;

use super::Step;
use super::record::{DecideState, Decision, DecisionRecord, ReasonCode, SpeedLimit};
use super::standoff::{Clearance, steer};

/// One step of following; `detour` replaces the upstream heading near a
/// junction whose dead branch the flow points back into
/// (`branch::dead_branch_detour`).
pub(super) fn follow_step(
    cx: &Step<'_, '_>,
    pos: [f64; 3],
    cl: &Clearance,
    rec: DecisionRecord,
    next: DecideState,
    detour: Option<[f64; 3]>,
) -> Decision {
    let (dir, reason, limit) = if let (true, Some(d)) = (cx.flow_usable, detour) {
        (d, ReasonCode::FollowUpstream, SpeedLimit::Junction)
    } else if cx.flow_usable {
        let r = match cx.health.mode {
            OperatingMode::FlowOnly => ReasonCode::FollowFlowOnly,
            _ => ReasonCode::FollowUpstream,
        };
        (cx.upstream.unwrap_or(cx.last), r, SpeedLimit::Cruise)
    } else {
        (
            cx.axis.unwrap_or(cx.last),
            ReasonCode::FollowByFeel,
            SpeedLimit::Mode,
        )
    };
    steer(
        dir, pos, cl, cx.p, rec, next, cx.cfg, cx.health, reason, limit, None,
    )
}
