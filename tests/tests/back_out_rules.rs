//! Back-out rules of the decision stage (`nav_core::decide::back_out`),
//! on a hand-made map: stations along an invented bore that turns a
//! corner, a junction anchored before the corner.
//!
//! - backing out retraces the body's own trail: the heading leads to the
//!   next station while it lies well behind the head, and is the head's
//!   axis reversed when the station is round a sharp corner;
//! - a station the head has backed past (it lies ahead of the head, within
//!   the junction's reach) counts as reached;
//! - a stall on the way back within the junction's reach is arrival there
//!   (the next branch is entered); farther out it holds for good.

use nav_core::decide::{
    BackOutCause, DecideState, FrameDisposition, HealthFlags, HealthView, Perception, Phase,
    ReasonCode, StallWatch, decide,
};
use nav_core::health::{ChannelState, OperatingMode};
use nav_core::map::{
    BranchOrigin, BranchStatus, FlowEstimate, Junction, LocalMap, Section, Station,
};
use nav_core::navigator::NavConfig;

const R: f64 = 0.06;

type Map = LocalMap<128, 64, 8>;

fn station(p: [f64; 3], forward: [f64; 3]) -> Station {
    Station {
        seq: 0,
        time_s: 0.0,
        position_m: p,
        forward_map: forward,
        section: Section::Unknown,
        flow: FlowEstimate::NONE,
        junction: None,
        prev_seq: None,
    }
}

/// Stations every 0.12 m along +x to x = 1.2 (the anchor at x = 0.48),
/// then along +y from the corner for `leg_m`. The junction has the branch
/// entered (+y, the corner's leg) and one guessed (-y). Returns the map,
/// the junction id and the newest station's seq.
fn corner_map(leg_m: f64) -> (Map, u16, u32) {
    let mut m = Map::new();
    let mut anchor = None;
    for k in 0..=10 {
        let seq = m
            .push_station(station([0.12 * f64::from(k), 0.0, 0.0], [1.0, 0.0, 0.0]))
            .unwrap();
        if k == 4 {
            anchor = Some(seq);
        }
    }
    let n = (leg_m / 0.12).round() as u32;
    let mut tip = 0;
    for k in 1..=n {
        tip = m
            .push_station(station([1.2, 0.12 * f64::from(k), 0.0], [0.0, 1.0, 0.0]))
            .unwrap();
    }
    let a = anchor.unwrap();
    let ap = m.stations.by_seq(a).unwrap();
    let mut j = Junction::new_at(ap.position_m, 0.0, a, ap.prev_seq);
    j.seen_by_flow = true;
    j.trunk_upstream_map = [1.0, 0.0, 0.0];
    let taken = j
        .add_unmeasured(
            [0.0, 1.0, 0.0],
            [1.2, 0.0, 0.0],
            BranchOrigin::Followed,
            1.0,
        )
        .unwrap();
    j.add_unmeasured(
        [0.0, -1.0, 0.0],
        [1.2, 0.0, 0.0],
        BranchOrigin::Guessed,
        0.9,
    )
    .unwrap();
    j.branch_mut(taken).unwrap().status = BranchStatus::Entered;
    j.chosen = Some(taken);
    let id = m.junctions.open(j).unwrap();
    m.stations.by_seq_mut(a).unwrap().junction = Some(id);
    (m, id, tip)
}

fn health() -> HealthView {
    HealthView {
        mode: OperatingMode::Nominal,
        flags: HealthFlags {
            flow: ChannelState::Ok,
            tactile: ChannelState::Ok,
            failed_ports: 0,
            failed_contacts: 0,
            health_mode: OperatingMode::Nominal,
        },
    }
}

fn perception(t: f64, pos: [f64; 3], forward: [f64; 3]) -> Perception<'static> {
    Perception {
        time_s: t,
        position_m: Some(pos),
        pose_fresh: true,
        forward_map: forward,
        flow: FlowEstimate {
            velocity_dir_map: Some([0.0, -1.0, 0.0]),
            dynamic_pressure_pa: 1.0,
            density_kg_per_m3: 1.2,
            ..FlowEstimate::NONE
        },
        flow_weak_since_s: None,
        section: Section::Unknown,
        wall: None,
        ridge: None,
        frame: FrameDisposition::Used,
    }
}

fn backing(jid: u16, cursor: u32) -> DecideState {
    DecideState {
        phase: Phase::BackOut {
            junction: jid,
            cursor_seq: cursor,
            cause: BackOutCause::DeadEnd,
        },
        in_junction: Some(jid),
        last_heading_map: [0.0, -1.0, 0.0],
        stall: StallWatch::NEW,
    }
}

/// A window that closes this step with no progress over a metre
/// commanded: a stall.
fn stalled(t: f64, pos: [f64; 3]) -> StallWatch {
    StallWatch {
        since_s: Some(t - 100.0),
        from_m: pos,
        commanded_m: 1.0,
        last_time_s: t - 0.01,
        last_speed_m_per_s: 0.05,
        last_reverse: true,
        stalled: None,
    }
}

#[test]
fn backing_out_retraces_the_trail_along_the_reversed_axis() {
    let cfg = NavConfig::for_robot(R).decide;
    let (m, jid, tip) = corner_map(1.2);
    let pos = [1.2, 1.2 + 0.05, 0.0];
    let heading = |tilt_deg: f64| {
        let a = tilt_deg.to_radians();
        let fwd = [-a.sin(), a.cos(), 0.0];
        let d = decide(
            &m,
            &health(),
            &perception(10.0, pos, fwd),
            &backing(jid, tip),
            &cfg,
        );
        assert_eq!(d.record.reason, ReasonCode::BackOut);
        assert!(d.reverse);
        (d.heading_map, fwd)
    };
    // The next station lies straight behind along -y. With the head's axis
    // 10 degrees off the leg, that is well behind the head: head there.
    let (h, _) = heading(10.0);
    assert!(h[1] < -0.999, "{h:?}");
    // With the axis 60 degrees off (a sharp corner), heading there would
    // be a forward turn into the wall: straight back along the axis.
    let (h, fwd) = heading(60.0);
    for (x, f) in h.iter().zip(fwd) {
        assert!((x + f).abs() < 1e-12, "{h:?}");
    }
}

#[test]
fn a_station_backed_past_counts_as_reached() {
    let cfg = NavConfig::for_robot(R).decide;
    let (m, jid, tip) = corner_map(1.2);
    let fwd = [0.0, 1.0, 0.0];
    let target = m.stations.by_seq(tip).unwrap().position_m;
    // 0.2 m past the station (beyond arrive_m), off the line by 0.03 m:
    // the station lies ahead of the head.
    assert!(0.2 > cfg.arrive_m);
    let pos = [target[0] + 0.03, target[1] - 0.2, 0.0];
    let d = decide(
        &m,
        &health(),
        &perception(10.0, pos, fwd),
        &backing(jid, tip),
        &cfg,
    );
    let Phase::BackOut { cursor_seq, .. } = d.next.phase else {
        panic!("{:?}", d.next.phase);
    };
    assert!(cursor_seq < tip, "cursor stayed at {cursor_seq}");
    // Short of it (the station still behind the head, beyond arrive_m):
    // not reached.
    let pos = [target[0], target[1] + 0.2, 0.0];
    let d = decide(
        &m,
        &health(),
        &perception(10.0, pos, fwd),
        &backing(jid, tip),
        &cfg,
    );
    let Phase::BackOut { cursor_seq, .. } = d.next.phase else {
        panic!("{:?}", d.next.phase);
    };
    assert_eq!(cursor_seq, tip);
}

#[test]
fn a_stall_on_the_way_back_arrives_within_reach_and_holds_beyond() {
    let cfg = NavConfig::for_robot(R).decide;
    let (m, jid, tip) = corner_map(3.0);
    let fwd = [0.0, 1.0, 0.0];
    let anchor = m.junctions.get(jid).unwrap().anchor_position_m;
    // Near the corner, within the junction's reach of the anchor.
    let near = [1.1, 0.08, 0.0];
    let dx = near[0] - anchor[0];
    assert!(dx.hypot(near[1]) < cfg.junction_radius_m);
    let mut s = backing(jid, tip);
    s.stall = stalled(10.0, near);
    let d = decide(&m, &health(), &perception(10.0, near, fwd), &s, &cfg);
    assert_eq!(
        d.record.reason,
        ReasonCode::ResumeNextBranch,
        "{:?}",
        d.record
    );
    assert!(
        matches!(d.next.phase, Phase::Enter { branch: 1, .. }),
        "{:?}",
        d.next.phase
    );
    // Far up the leg: the way back is blocked; hold for good.
    let far = [1.2, 2.5, 0.0];
    let mut s = backing(jid, tip);
    s.stall = stalled(10.0, far);
    let d = decide(&m, &health(), &perception(10.0, far, fwd), &s, &cfg);
    assert_eq!(d.record.reason, ReasonCode::HoldStalled);
    assert_eq!(d.next.phase, Phase::GaveUp);
}

/// After a dead branch, following resumes in the branch entered; near the
/// junction (within twice its reach) flow pointing back into the dead
/// branch is not followed, farther on it is.
#[test]
fn flow_back_into_a_dead_branch_is_not_followed_near_the_junction() {
    let cfg = NavConfig::for_robot(R).decide;
    let (mut m, jid, _) = corner_map(1.2);
    {
        let j = m.junctions.get_mut(jid).unwrap();
        j.branch_mut(0).unwrap().status =
            BranchStatus::DeadEnd(nav_core::map::DeadEndCause::Blocked);
        j.branch_mut(1).unwrap().status = BranchStatus::Entered;
        j.chosen = Some(1);
    }
    let follow = DecideState {
        phase: Phase::Follow,
        in_junction: Some(jid),
        last_heading_map: [0.0, -1.0, 0.0],
        stall: StallWatch::NEW,
    };
    // The gas moves -y: upstream is +y, into the dead branch.
    let near = [1.2, -0.3, 0.0];
    let d = decide(
        &m,
        &health(),
        &perception(10.0, near, [0.0, -1.0, 0.0]),
        &follow,
        &cfg,
    );
    assert!(
        d.heading_map[1] < -0.99,
        "followed into the dead branch: {:?}",
        d.heading_map
    );
    let far = [1.2, -2.0, 0.0];
    let d = decide(
        &m,
        &health(),
        &perception(10.0, far, [0.0, -1.0, 0.0]),
        &follow,
        &cfg,
    );
    assert!(d.heading_map[1] > 0.99, "{:?}", d.heading_map);
}

/// The skin squeezed in a section narrower than the required standoff:
/// with a felt junction behind it is a narrowing to back out of; with only
/// a junction seen through the flow behind (a candidate that may be a
/// bend) the robot holds as with none, and does not press on.
#[test]
fn a_squeeze_backs_out_to_a_felt_junction_and_holds_short_of_a_flow_seen_one() {
    use nav_core::decide::{BackOutCause, WallObservation};
    let cfg = NavConfig::for_robot(R).decide;
    let pos = [1.2, -0.3, 0.0];
    let radius = 0.5 * (cfg.robot_radius_m + cfg.required_standoff_m());
    let mut w = WallObservation::EMPTY;
    w.push_wall_point([1.2 + radius, -0.3, 0.0]);
    w.push_wall_point([1.2 - radius, -0.3, 0.0]);
    let section = Section::Circle {
        centre_m: pos,
        radius_m: radius,
        centre_sigma_m: 0.001,
        radius_sigma_m: 0.001,
    };
    let decide_with = |seen_by_flow: bool| {
        let (mut m, jid, _) = corner_map(1.2);
        m.junctions.get_mut(jid).unwrap().seen_by_flow = seen_by_flow;
        let follow = DecideState {
            phase: Phase::Follow,
            in_junction: Some(jid),
            last_heading_map: [0.0, -1.0, 0.0],
            stall: StallWatch::NEW,
        };
        let mut p = perception(10.0, pos, [0.0, -1.0, 0.0]);
        p.section = section;
        p.wall = Some(&w);
        decide(&m, &health(), &p, &follow, &cfg)
    };
    let felt = decide_with(false);
    assert_eq!(
        felt.record.dead_end.map(|d| d.cause),
        Some(BackOutCause::NarrowingAhead),
        "{:?}",
        felt.record
    );
    let seen = decide_with(true);
    assert_eq!(
        seen.record.reason,
        ReasonCode::HoldNoSafeStandoff,
        "{:?}",
        seen.record
    );
    assert_eq!(seen.speed_m_per_s, 0.0);
}
