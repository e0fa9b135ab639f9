//! Back-out: what marks the entered branch a dead end (a wall across the
//! path with no flow out of it, a throat ahead narrower than the body
//! needs, flow lost for `lost_flow_s`), and the retrace along the stored
//! stations (their `prev_seq` links) to the junction anchor, where the
//! next-best branch is entered. A junction with nothing left passes the
//! failure to its parent; with no parent the navigator gives up and holds.

use core::ops::ControlFlow;

use crate::health::{ChannelState, OperatingMode};
use crate::map::{
    BranchStatus, DeadEndCause, Junction, LocalMap, MAX_BRANCHES, dist_sq, dot, scale, sub, unit,
};

use super::Step;
use super::branch::{choose_branch, resolve};
use super::config::DecideConfig;
use super::hold::{give_up, hold};
use super::observe::SOURCE_AHEAD_COS;
use super::record::{
    BackOutCause, DeadEndRecord, DecideState, Decision, DecisionRecord, HealthView, Perception,
    Phase, ReasonCode, SpeedLimit, StallLoad, Verdict,
};
use super::standoff::{Clearance, steer};

/// A back-out heading within this cosine of the reversed head axis (50
/// degrees, so at least 130 degrees from the axis) is unambiguously tail
/// first; farther round, the reversed axis is used. Our choice, with a
/// margin over the simulator's 120-degree switch (`replay::sim::body`).
const TAIL_FIRST_COS: f64 = 0.643;

/// A nose touch within this cosine (30 degrees) of the travel direction
/// is straight ahead.
const NOSE_AHEAD_COS: f64 = 0.866;

/// While following or entering: start a back-out (or stop at the source)
/// when the way ahead has ended. `Continue` when it has not.
pub(super) fn trigger<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    cx: &Step<'_, '_>,
    pos: [f64; 3],
    rec: DecisionRecord,
) -> ControlFlow<Decision> {
    let (p, state, cfg, health) = (cx.p, cx.state, cx.cfg, cx.health);
    if !matches!(state.phase, Phase::Follow | Phase::Enter { .. }) {
        return ControlFlow::Continue(());
    }
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
    // In weak air (the flow channel still integrating) a wall ahead, or
    // a nose touch straight ahead, is neither the source nor a dead end:
    // the windowed direction can point into any wall, and the flow cannot
    // say whether it comes out of it. The wall push steers along it; a
    // narrowing felt by the nose and a stall still end the way.
    let weak_air = health.flags.flow == ChannelState::Weak;
    let end_ahead = w.is_some_and(|w| w.end_ahead) && !weak_air;
    let live = cx.flow_usable && p.flow_weak_since_s.is_none();
    let out_of_it = cx
        .upstream
        .is_some_and(|u| dot(u, p.forward_map) >= SOURCE_AHEAD_COS);
    let junction_behind = cx.junction_behind;
    // The nose felt the way ahead narrower than the body needs, or the head
    // stalled going forward: the way ahead has ended whatever the flow
    // says (pressing on would press the skin through).
    let nose_narrow = w
        .and_then(|w| w.nose_width_m)
        .filter(|&width| width < cfg.required_width_m());
    // The skin squeezed in a section narrower than the required standoff,
    // with a junction behind: the branch narrows below the body here
    // (without one, `hold::must_hold` holds). Its width is the section's
    // diameter.
    // A junction seen only through the flow is a candidate (it may be a
    // bend): a squeeze or an unfelt stall is not reason enough to go back
    // to it (a bend's section fits squeeze too).
    let felt_behind = cx.felt_junction_behind;
    let squeezed_narrow = cx
        .squeezed_narrow_m
        .filter(|_| felt_behind)
        .map(|r| 2.0 * r);
    // A stall ends the way when the nose is loaded (an obstruction ahead).
    // A stall with nothing felt ahead ends it only with a junction behind
    // to back out to: without one it is recorded, and the robot keeps
    // creeping (a robot without nose-cap sensors cannot tell a wall it
    // does not feel from slip, and holding for good there lost reachable
    // worlds).
    let stall = cx.stalled.filter(|s| {
        !cx.state.stall.last_reverse && (s.load == StallLoad::NoseLoaded || felt_behind)
    });
    // A nose touch straight ahead of the travel direction: the way is
    // blocked there (the head cannot slide off it).
    let nose_ahead = w
        .filter(|w| w.nose_loaded)
        .and_then(|w| w.nose_point_m)
        .and_then(|q| unit(sub(q, pos)))
        .is_some_and(|u| dot(u, cx.last) > NOSE_AHEAD_COS);
    if end_ahead
        && live
        && out_of_it
        && !junction_behind
        && cx.stalled.is_none()
        && nose_narrow.is_none()
    {
        let mut next = *state;
        next.phase = Phase::AtSource;
        return ControlFlow::Break(hold(cx.hold_heading, rec, ReasonCode::HoldAtSource, next));
    }
    let cause = if let Some(s) = stall {
        Some(if s.load == StallLoad::NoseLoaded {
            BackOutCause::Obstruction
        } else {
            BackOutCause::Stalled
        })
    } else if nose_narrow.is_some() || squeezed_narrow.is_some() {
        Some(BackOutCause::NarrowingAhead)
    } else if nose_ahead && !weak_air && !(live && out_of_it && !junction_behind) {
        Some(BackOutCause::Obstruction)
    } else if end_ahead && (!live || out_of_it) {
        Some(BackOutCause::DeadEnd)
    } else if throat_bad {
        Some(BackOutCause::ThroatTooNarrow)
    } else if lost {
        Some(BackOutCause::LostFlow)
    } else {
        None
    };
    match cause {
        Some(cause) => {
            let mut rec = rec;
            rec.dead_end = Some(DeadEndRecord {
                cause,
                width_m: nose_narrow.or(squeezed_narrow).or(match cause {
                    BackOutCause::ThroatTooNarrow => {
                        w.and_then(|w| w.throat).map(|t| t.min_clear_diameter_m)
                    }
                    _ => None,
                }),
                junction: None,
                next_branch: None,
            });
            ControlFlow::Break(start_back_out(map, p, pos, cause, rec, state, cfg, health))
        }
        None => ControlFlow::Continue(()),
    }
}

/// The junction the robot would back out to: the one whose branch it is
/// entering, else the one it is in.
pub(super) fn behind_id(state: &DecideState) -> Option<u16> {
    match state.phase {
        Phase::Enter { junction, .. } => Some(junction),
        _ => state.in_junction,
    }
}

/// Whether a junction is behind the robot to back out to (entering a
/// branch, or in the region of a junction the map still holds), and if so
/// whether it was felt: `None` with none behind, `Some(true)` for a felt
/// one, `Some(false)` for one seen only through the flow (a candidate: it
/// may be a bend).
pub(super) fn junction_behind<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    state: &DecideState,
) -> Option<bool> {
    let held = behind_id(state).and_then(|id| map.junctions.get(id));
    if matches!(state.phase, Phase::Enter { .. }) || held.is_some() {
        Some(!held.is_some_and(|j| j.seen_by_flow))
    } else {
        None
    }
}

pub(super) fn flow_usable_or_weak(h: &HealthView) -> bool {
    h.mode != OperatingMode::TactileOnly && h.flags.flow != ChannelState::Failed
}

/// Junction `j` has no eligible branch left: pass the failure to its
/// parent (back out there) or give up.
pub(super) fn exhausted(
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

#[allow(clippy::too_many_arguments)]
pub(super) fn start_back_out<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    p: &Perception<'_>,
    pos: [f64; 3],
    cause: BackOutCause,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let mut next = *state;
    let jid = behind_id(state);
    let mut rec = rec;
    let note = rec.dead_end.get_or_insert(DeadEndRecord {
        cause,
        width_m: None,
        junction: None,
        next_branch: None,
    });
    let Some(j) = jid.and_then(|id| map.junctions.get(id)) else {
        // No junction behind to back out to: hold, saying why.
        return give_up(rec, next);
    };
    note.junction = Some(j.id);
    // The branch that will be entered at the junction once back there.
    let mut after = *j;
    if let Some(c) = j.chosen
        && let Some(b) = after.branches.get_mut(usize::from(c))
    {
        b.status = BranchStatus::DeadEnd(cause.dead_end_cause());
    }
    note.next_branch = choose_branch(&after, None, cfg).chosen;
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
pub(super) fn back_out_step<const S: usize, const W: usize, const JN: usize>(
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
        return give_up(rec, next);
    };
    let arrive2 = cfg.arrive_m * cfg.arrive_m;
    // Backing along the trail, a station is reached when the head is
    // within `arrive_m` of it or has backed past it (it lies ahead of the
    // head, within the junction's reach): the trail and the stations need
    // not coincide to the centimetre.
    let forward = unit(p.forward_map);
    let reach2 = cfg.junction_radius_m * cfg.junction_radius_m;
    let reached = |t: [f64; 3]| {
        let d2 = dist_sq(t, pos);
        d2 <= arrive2 || (d2 <= reach2 && forward.is_some_and(|f| dot(sub(t, pos), f) > 0.0))
    };
    let mut cursor = cursor_seq;
    // Advance over every station already reached (bounded by the ring).
    let mut target = map.retrace_target(jid, cursor);
    for _ in 0..S.saturating_add(1) {
        match target {
            Some((t, false)) if reached(t) => {
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
        Some((t, true)) if reached(t) => arrive(map, j, p, pos, cause, rec, &next, cfg, health),
        Some((t, _)) => {
            next.phase = Phase::BackOut {
                junction: jid,
                cursor_seq: cursor,
                cause,
            };
            let dir = unit(sub(t, pos)).unwrap_or(state.last_heading_map);
            let cl = Clearance::of_record(&rec);
            let mut d = steer(
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
            );
            // The stations lie on the body's own trail, so backing out
            // retraces it. Toward a station well behind the head (more than
            // `TAIL_FIRST_COS` from its axis) the heading leads there; a
            // station round a sharp corner would put the heading within a
            // forward turn of the axis and drive the head into the wall
            // (a follow-the-leader body backs along its trail only for
            // headings well behind its axis), so then the heading is the
            // head's axis reversed: straight back along the trail.
            if let Some(back) = unit(scale(p.forward_map, -1.0))
                && dot(d.heading_map, back) < TAIL_FIRST_COS
            {
                d.heading_map = back;
                d.next.last_heading_map = back;
            }
            d
        }
        None => give_up(rec, next),
    }
}

/// Back at junction `j` (or as near as the way back allows): mark the
/// entered branch dead and take the next-best one, or pass the failure on.
#[allow(clippy::too_many_arguments)]
pub(super) fn arrive<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    j: &Junction,
    p: &Perception<'_>,
    pos: [f64; 3],
    cause: BackOutCause,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
) -> Decision {
    let mut jj = *j;
    for b in jj.branches.iter_mut() {
        if matches!(b.status, BranchStatus::Entered) {
            b.status = BranchStatus::DeadEnd(DeadEndCause::Blocked);
        }
    }
    let mut next = *state;
    next.phase = Phase::Follow;
    next.in_junction = j.parent;
    let cl = Clearance::of_record(&rec);
    let mut d = resolve(
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
    );
    d.record.dead_end = Some(DeadEndRecord {
        cause,
        width_m: None,
        junction: Some(j.id),
        next_branch: d.record.branch.and_then(|b| b.chosen),
    });
    d
}

/// Stalled while backing out toward junction `jid`: within
/// `junction_radius_m` of its anchor the robot is as near as the way back
/// allows (a sharp corner the tail cannot retrace exactly), so it arrives
/// there; farther out the way back is blocked and it holds for good.
#[allow(clippy::too_many_arguments)]
pub(super) fn stalled_on_the_way_back<const S: usize, const W: usize, const JN: usize>(
    map: &LocalMap<S, W, JN>,
    p: &Perception<'_>,
    pos: [f64; 3],
    jid: u16,
    cause: BackOutCause,
    rec: DecisionRecord,
    state: &DecideState,
    cfg: &DecideConfig,
    health: &HealthView,
    hold_heading: [f64; 3],
) -> Decision {
    if let Some(j) = map.junctions.get(jid)
        && dist_sq(j.anchor_position_m, pos) <= cfg.junction_radius_m * cfg.junction_radius_m
    {
        return arrive(map, j, p, pos, cause, rec, state, cfg, health);
    }
    let next = DecideState {
        phase: Phase::GaveUp,
        ..*state
    };
    hold(hold_heading, rec, ReasonCode::HoldStalled, next)
}
