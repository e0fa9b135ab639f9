//! Hold: stop with the head where it points, in hold mode, and say why
//! (no pose, both channels unhealthy, no safe standoff while squeezed, at
//! the source, nothing left to try).

use core::ops::ControlFlow;

use crate::health::OperatingMode;
use crate::map::unit;

use super::Step;
use super::record::{
    DecideState, Decision, DecisionRecord, Perception, Phase, ReasonCode, SpeedLimit,
};
use super::standoff::credible_circle;

/// A held robot keeps its head where it points (`heading`) and remembers
/// that as its last heading.
pub(super) fn hold(
    heading: [f64; 3],
    mut rec: DecisionRecord,
    reason: ReasonCode,
    next: DecideState,
) -> Decision {
    rec.reason = reason;
    rec.speed_limit = SpeedLimit::Stopped;
    rec.phase = next.phase;
    Decision {
        heading_map: heading,
        speed_m_per_s: 0.0,
        reverse: false,
        mode: OperatingMode::Hold,
        record: rec,
        next: DecideState {
            last_heading_map: heading,
            ..next
        },
        verdict: None,
    }
}

/// Nothing left to try anywhere: stop for good, in hold mode, heading kept.
pub(super) fn give_up(mut rec: DecisionRecord, mut next: DecideState) -> Decision {
    next.phase = Phase::GaveUp;
    rec.reason = ReasonCode::GaveUp;
    rec.phase = next.phase;
    rec.speed_limit = SpeedLimit::Stopped;
    Decision {
        heading_map: unit(next.last_heading_map).unwrap_or([1.0, 0.0, 0.0]),
        speed_m_per_s: 0.0,
        reverse: false,
        mode: OperatingMode::Hold,
        record: rec,
        next,
        verdict: None,
    }
}

/// The holds that take precedence over every behaviour, once the pose is
/// known: both channels unhealthy, already given up or at the source, or a
/// conduit narrower than the required standoff while the skin is squeezed.
pub(super) fn must_hold(cx: &Step<'_, '_>, rec: DecisionRecord) -> ControlFlow<Decision> {
    let next = *cx.state;
    let held = |reason| ControlFlow::Break(hold(cx.hold_heading, rec, reason, next));
    if cx.health.mode == OperatingMode::Hold {
        // Both channels unhealthy, or the mode still waiting out its
        // recovery dwell although the channels no longer call for a hold.
        let f = &cx.health.flags;
        return held(
            if crate::health::mode_for(f.flow, f.tactile) == OperatingMode::Hold {
                ReasonCode::HoldChannelsUnhealthy
            } else {
                ReasonCode::HoldModeSettling
            },
        );
    }
    if matches!(cx.state.phase, Phase::GaveUp) {
        return held(ReasonCode::GaveUp);
    }
    if matches!(cx.state.phase, Phase::AtSource) {
        return held(ReasonCode::HoldAtSource);
    }
    // A section narrower than the required standoff stops the robot only
    // while the skin is actually squeezed (two or more touches this frame):
    // a remembered fit through a few close points, with nothing touching
    // now, would otherwise hold it for ever. With a way back (backing out
    // already, or a junction behind) it is not a hold but a narrowing the
    // back-out leaves by (`back_out::trigger`). A junction seen only
    // through the flow is not such a way back (the back-out does not leave
    // by a squeeze toward one), so the robot holds as with none.
    let way_back = matches!(cx.state.phase, Phase::BackOut { .. }) || cx.felt_junction_behind;
    if cx.squeezed_narrow_m.is_some() && !way_back {
        return held(ReasonCode::HoldNoSafeStandoff);
    }
    ControlFlow::Continue(())
}

/// The radius of a credible section narrower than the required standoff
/// while the skin is squeezed (two or more touches this frame), m.
pub(super) fn squeezed_narrow_m(
    p: &Perception<'_>,
    pos: [f64; 3],
    along: [f64; 3],
    robot_radius_m: f64,
    required_m: f64,
) -> Option<f64> {
    let squeezed = p.wall.is_some_and(|w| w.wall_point_count >= 2);
    credible_circle(&p.section, pos, along, robot_radius_m)
        .map(|(_, radius_m)| radius_m)
        .filter(|r| *r < required_m && squeezed)
}
