//! Speed limits and standoff: how far the head axis is from the walls it
//! knows (the section fit, stored wall points, this frame's touches), and
//! `steer`, which every moving behaviour ends in: the behaviour's heading
//! plus centring and a push away from a wall closer than the required
//! standoff; speed capped by standoff excess, throats, junctions, mode and
//! the behaviour's own limit.

use crate::health::OperatingMode;
use crate::map::{LocalMap, Section, add, dot, norm, reject, scale, sub, unit};

use super::config::DecideConfig;
use super::observe::{WALL_BESIDE_M, WallObservation};
use super::record::{
    DecideState, Decision, DecisionRecord, HealthView, Perception, ReasonCode, SpeedLimit, Verdict,
};

/// After a nose touch the heading leans this far (as a fraction of its
/// length) away from the touch, beyond parallel to the wall.
const NOSE_RELEASE: f64 = 0.2;

/// What the decision knows of the clearance around the head axis.
pub(super) struct Clearance {
    pub(super) standoff_m: Option<f64>,
    pub(super) section_radius_m: Option<f64>,
    pub(super) centre_offset_m: Option<f64>,
    pub(super) centre_vec: Option<[f64; 3]>,
    pub(super) nearest_wall_m: Option<f64>,
    pub(super) nearest_wall_point: Option<[f64; 3]>,
}

impl Clearance {
    /// The clearances a decision record already holds (no centring
    /// direction, no wall point): what steering needs away from follow.
    pub(super) fn of_record(rec: &DecisionRecord) -> Self {
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
pub(super) fn credible_circle(
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

pub(super) fn clearance<const S: usize, const W: usize, const JN: usize>(
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

pub(super) fn clamp01(x: f64) -> f64 {
    if x > 1.0 {
        1.0
    } else if x > 0.0 {
        x
    } else {
        0.0
    }
}

/// The decision for one step. Pure: same inputs, same output, bit for bit.
/// Heading `dir` plus centring and wall push; speed from clearances.
#[allow(clippy::too_many_arguments)]
pub(super) fn steer(
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
    // A nose touch: take out the part of the heading that would press the
    // nose further into what it touches, and a little more, so the head
    // slides off it (a touch straight ahead is a back-out trigger, not
    // this). Not while retracing: the head then moves away from it.
    let nose = p
        .wall
        .filter(|w| w.nose_loaded && base_limit != SpeedLimit::BackOut)
        .and_then(|w| w.nose_point_m)
        .and_then(|q| unit(sub(q, pos)));
    if let Some(u) = nose {
        let into = dot(h, u);
        if into > 0.0 {
            h = sub(h, scale(u, into + NOSE_RELEASE * norm(h)));
        }
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
    if nose.is_some() && v >= creep {
        v = creep;
        limit = SpeedLimit::Touch;
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
