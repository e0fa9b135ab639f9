//! Walls in the decisions: stall detection (odometry progress against the
//! commanded speed), the nose's touch (slide off a touch beside it, a
//! narrowing ahead measured across it), and what a dead end leads to (a
//! back-out to the junction and the next-best branch, or a safe hold,
//! never pressing on).
//!
//! The hand-built observations follow `tests/tests/nav_free_space.rs` (map
//! frame, a level conduit along +x, air moving toward -x); the closed-loop
//! scenes are the invented forks of `upcurrent_tests::nav_scene`, with a
//! pinch the nose cap meets. Every expected value follows from the rules in
//! `nav_core::decide`, not from a run.

use nav_core::decide::{
    BackOutCause, FlowObservation, ReasonCode, SpeedLimit, StallLoad, WallObservation,
};
use nav_core::frame::HeadPose;
use nav_core::health::OperatingMode;
use nav_core::map::{Section, dot, sub};
use nav_core::navigator::{Command, NavConfig, Observation, StandardNavigator};
use proptest::prelude::*;
use upcurrent_tests::nav_scene::{ForkBranch, Rigid, Sim, fork_scene, pinch};

const R: f64 = 0.06;

fn nav_r(r: f64) -> Box<StandardNavigator> {
    let cfg = NavConfig::for_robot(r).validate().expect("valid config");
    Box::new(StandardNavigator::new(cfg).expect("capacities"))
}

fn pose(x: f64) -> HeadPose {
    HeadPose {
        position_m: [x, 0.0, 0.0],
        orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
        position_sigma_m: 0.01,
        attitude_sigma_rad: 0.01,
    }
}

fn flow(q: f64) -> FlowObservation {
    let var = 1e-4;
    FlowObservation {
        velocity_dir_map: Some([-1.0, 0.0, 0.0]),
        dir_cov_map: [[var, 0.0, 0.0], [0.0, var, 0.0], [0.0, 0.0, var]],
        dynamic_pressure_pa: q,
        dynamic_pressure_sigma_pa: 0.01,
        static_pressure_pa: 101_325.0,
        mach: 0.003,
        density_kg_per_m3: 1.2,
        degraded: false,
        port_suspect_mask: 0,
        port_failed_mask: 0,
    }
}

fn obs(t: f64, x: f64, w: WallObservation) -> Observation {
    Observation {
        time_s: t,
        pose: Some(pose(x)),
        flow: Some(flow(1.0)),
        wall: Some(w),
    }
}

/// A navigator driven 2 s along +x exactly as commanded (the head moves
/// the commanded distance each 10 ms frame); returns it with the time and
/// position reached.
fn driven() -> (Box<StandardNavigator>, f64, f64) {
    let mut n = nav_r(R);
    let (mut t, mut x) = (0.0, 0.0);
    for _ in 0..200 {
        let c = n.step(&obs(t, x, WallObservation::EMPTY));
        assert!(c.record.stall.is_none(), "stall while advancing: {c:?}");
        x += c.speed_m_per_s * 0.01;
        t += 0.01;
    }
    (n, t, x)
}

/// The head stops advancing at `x` while the skin reports `w`: the
/// commands until the first with a dead end, and that command's time.
fn blocked(w: WallObservation) -> (Vec<Command>, f64, f64) {
    let (mut n, mut t, x) = driven();
    let t0 = t;
    let mut out = Vec::new();
    for _ in 0..300 {
        let c = n.step(&obs(t, x, w));
        out.push(c);
        if c.record.dead_end.is_some() {
            return (out, t0, t);
        }
        t += 0.01;
    }
    panic!("no dead end after 3 s of not advancing: {:?}", out.last());
}

#[test]
fn a_head_that_does_not_advance_is_a_stall_with_its_reason() {
    // Nothing felt and no junction behind: the stall is recorded, typed,
    // and the robot keeps creeping (no dead end without a way back).
    let (mut n, mut t, x) = driven();
    let t0 = t;
    let cfg = NavConfig::for_robot(R).decide;
    let mut first = None;
    let mut v0 = None;
    for _ in 0..300 {
        let c = n.step(&obs(t, x, WallObservation::EMPTY));
        v0.get_or_insert(c.speed_m_per_s);
        if let Some(s) = c.record.stall {
            first = Some((t, s, c));
            break;
        }
        t += 0.01;
    }
    let (t1, s, c) = first.expect("a stall record within 3 s");
    assert_eq!(s.load, StallLoad::Unfelt);
    assert!(s.advanced_m < cfg.stall_fraction * s.expected_m, "{s:?}");
    assert!(c.record.dead_end.is_none(), "{c:?}");
    assert!(c.speed_m_per_s > 0.0 && c.speed_m_per_s <= cfg.feel_speed_m_per_s);
    // Not before a whole window at the commanded speed, and within two.
    let window = cfg.stall_window_s(v0.unwrap_or(0.0));
    assert!(
        t1 - t0 >= window - 0.011,
        "after {} s, window {window}",
        t1 - t0
    );
    assert!(
        t1 - t0 <= 2.0 * window + 0.02,
        "after {} s, window {window}",
        t1 - t0
    );
}

/// A nose contact beside the head axis (60 degrees off it, on the left):
/// the nose is loaded, but the touch is neither straight ahead nor a
/// narrowing.
fn nose_beside(x: f64) -> WallObservation {
    let mut w = WallObservation::EMPTY;
    let p = [x + 0.5 * R, 0.866 * R, 0.0];
    w.push_wall_point(p);
    w.nose_loaded = true;
    w.nose_point_m = Some(p);
    w
}

#[test]
fn a_stall_with_the_nose_loaded_is_an_obstruction_ahead() {
    let (_, _, x) = driven();
    let (cmds, _, _) = blocked(nose_beside(x));
    let c = cmds.last().expect("commands");
    assert_eq!(c.record.stall.expect("stall").load, StallLoad::NoseLoaded);
    assert_eq!(
        c.record.dead_end.expect("dead end").cause,
        BackOutCause::Obstruction
    );
    assert_eq!(c.speed_m_per_s, 0.0);
}

#[test]
fn a_touch_beside_the_nose_slides_off_at_creep() {
    let (mut n, t, x) = driven();
    let w = nose_beside(x);
    let c = n.step(&obs(t, x, w));
    let cfg = NavConfig::for_robot(R).decide;
    assert_eq!(c.record.speed_limit, SpeedLimit::Touch, "{c:?}");
    assert!(c.speed_m_per_s > 0.0 && c.speed_m_per_s <= cfg.creep_speed_m_per_s);
    let to_touch = sub(w.nose_point_m.expect("nose point"), [x, 0.0, 0.0]);
    assert!(
        dot(c.heading_map, to_touch) < 0.0,
        "heading {:?} presses toward the touch",
        c.heading_map
    );
    assert!(c.record.dead_end.is_none());
}

#[test]
fn a_narrowing_felt_by_the_nose_is_a_dead_end_with_its_width() {
    let (mut n, t, x) = driven();
    let mut w = WallObservation::EMPTY;
    let width = 0.08; // below 2 * 0.06 + 0.03 = 0.15
    w.push_wall_point([x + 0.04, 0.04, 0.0]);
    w.push_wall_point([x + 0.04, -0.04, 0.0]);
    w.nose_loaded = true;
    w.nose_point_m = Some([x + 0.04, 0.0, 0.0]);
    w.nose_width_m = Some(width);
    let c = n.step(&obs(t, x, w));
    let d = c.record.dead_end.expect("dead end");
    assert_eq!(d.cause, BackOutCause::NarrowingAhead);
    assert_eq!(d.width_m, Some(width));
    assert_eq!(c.speed_m_per_s, 0.0);
    assert_eq!(c.record.reason, ReasonCode::GaveUp);
}

#[test]
fn a_nose_wide_enough_ahead_is_not_a_narrowing() {
    let (mut n, t, x) = driven();
    let mut w = WallObservation::EMPTY;
    w.push_wall_point([x + 0.01, 0.2, 0.0]);
    w.push_wall_point([x + 0.01, -0.2, 0.0]);
    w.nose_width_m = Some(0.4);
    let c = n.step(&obs(t, x, w));
    assert!(c.record.dead_end.is_none(), "{c:?}");
    assert!(c.speed_m_per_s > 0.0);
}

// ------------------------------------------------------------ closed loop

const RB: f64 = 0.1;

/// A credible section narrower than the required standoff with the skin
/// squeezed (two touches) and no junction behind: nothing to back out to,
/// so the robot holds and says why (with a junction behind the same
/// squeeze is a narrowing the back-out leaves by: `back_out::trigger`).
#[test]
fn squeezed_in_a_section_too_narrow_with_no_way_back_holds() {
    let (mut n, t, x) = driven();
    let cfg = NavConfig::for_robot(R).decide;
    let radius_m = R + 0.5 * cfg.standoff_margin_m;
    assert!(radius_m < cfg.required_standoff_m());
    let mut w = WallObservation::EMPTY;
    w.section = Section::Circle {
        centre_m: [x, 0.0, 0.0],
        radius_m,
        centre_sigma_m: 0.002,
        radius_sigma_m: 0.002,
    };
    w.push_wall_point([x, radius_m, 0.0]);
    w.push_wall_point([x, -radius_m, 0.0]);
    let c = n.step(&obs(t, x, w));
    assert_eq!(c.record.reason, ReasonCode::HoldNoSafeStandoff, "{c:?}");
    assert_eq!(c.speed_m_per_s, 0.0);
    assert!(c.record.dead_end.is_none());
    // One touch only is not a squeeze: no hold.
    let mut one = w;
    one.wall_point_count = 1;
    let c = n.step(&obs(t + 0.01, x, one));
    assert_ne!(c.record.reason, ReasonCode::HoldNoSafeStandoff, "{c:?}");
}

fn three_way(narrow_q: f64) -> [ForkBranch; 3] {
    [
        ForkBranch {
            yaw_rad: 0.6,
            width_m: 0.5,
            dynamic_pressure_pa: 20.0,
            dead_end: false,
        },
        ForkBranch {
            yaw_rad: -0.6,
            width_m: 0.5,
            dynamic_pressure_pa: 50.0,
            dead_end: false,
        },
        ForkBranch {
            yaw_rad: 0.0,
            width_m: 0.2,
            dynamic_pressure_pa: narrow_q,
            dead_end: false,
        },
    ]
}

struct Run {
    reached: bool,
    visited: Vec<usize>,
    cmds: Vec<Command>,
    strikes: u32,
    max_press_m: f64,
}

fn run(sim: &mut Sim, steps: usize) -> Run {
    let mut n = nav_r(RB);
    let mut cmds = Vec::new();
    for _ in 0..steps {
        let o = sim.observe();
        let c = n.step(&o);
        sim.apply(&c);
        cmds.push(c);
        if sim.reached {
            break;
        }
    }
    Run {
        reached: sim.reached,
        visited: sim.visited[..sim.visited_count].to_vec(),
        cmds,
        strikes: sim.strikes,
        max_press_m: sim.max_press_m,
    }
}

fn pinched_sim(b: &[ForkBranch], seg: usize, at_m: f64, width_m: f64, seed: u64) -> Sim {
    let mut scene = fork_scene(0.3, 40.0, b);
    pinch(&mut scene, seg, at_m, width_m);
    let mut sim = Sim::new(scene, [-6.0, 0.05, 0.0], Rigid::IDENTITY, seed, true);
    sim.body_radius_m = RB;
    sim
}

#[test]
fn a_pinched_strongest_branch_is_backed_out_of_and_the_next_best_taken() {
    // Segment 2 (the 50 Pa branch) pinches to 0.1 m, 2 m in; the body
    // needs 2 * 0.1 + 0.05 = 0.25 m.
    let mut sim = pinched_sim(&three_way(500.0), 2, 2.0, 0.1, 11);
    let r = run(&mut sim, 60_000);
    assert!(r.reached, "last {:?}", r.cmds.last());
    assert_eq!(r.visited, [0, 2, 0, 1]);
    assert_eq!(r.strikes, 0, "pressed through the skin");
    let first = r
        .cmds
        .iter()
        .find_map(|c| c.record.dead_end)
        .expect("a dead-end record");
    assert_eq!(first.cause, BackOutCause::NarrowingAhead);
    assert_eq!(first.width_m, Some(0.1));
    assert!(first.junction.is_some());
    let next = first.next_branch.expect("a next branch named");
    // At the junction the named branch is the one entered.
    let resume = r
        .cmds
        .iter()
        .find(|c| c.record.reason == ReasonCode::ResumeNextBranch)
        .expect("resumed at the junction");
    assert_eq!(resume.record.branch.and_then(|b| b.chosen), Some(next));
    assert_eq!(
        resume.record.dead_end.map(|d| (d.cause, d.next_branch)),
        Some((BackOutCause::NarrowingAhead, Some(next)))
    );
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 8, .. ProptestConfig::default() })]

    /// Whatever the narrow branch's share of the flow, it is never entered
    /// (segment 3 is 0.2 m wide; the body needs 0.25 m).
    #[test]
    fn a_branch_narrower_than_the_body_is_never_entered(
        ratio in 0.01f64..1000.0,
        seed in 0u64..1000,
    ) {
        let scene = fork_scene(0.3, 40.0, &three_way(50.0 * ratio));
        let mut sim = Sim::new(scene, [-6.0, 0.05, 0.0], Rigid::IDENTITY, seed, true);
        sim.body_radius_m = RB;
        let r = run(&mut sim, 20_000);
        prop_assert!(!r.visited.contains(&3), "entered the narrow branch: {:?}", r.visited);
        prop_assert!(r.reached);
    }

    /// A pinch anywhere in the strongest branch, narrower than the head
    /// (so the body cannot pass it), with the next branch open or a dead end too: every
    /// command after the dead end backs out or holds, the skin is never
    /// pressed through, and the run ends at the source or held.
    #[test]
    fn a_dead_end_leads_to_a_back_out_or_a_safe_hold(
        at_m in 1.0f64..4.5,
        width_m in 0.02f64..0.195,
        other_dead in any::<bool>(),
        seed in 0u64..1000,
    ) {
        let mut b = three_way(500.0);
        b[0].dead_end = other_dead;
        let mut sim = pinched_sim(&b, 2, at_m, width_m, seed);
        let r = run(&mut sim, 60_000);
        prop_assert_eq!(r.strikes, 0);
        prop_assert!(r.max_press_m <= sim.compliance_m, "pressed {} m", r.max_press_m);
        let k = r.cmds.iter().position(|c| c.record.dead_end.is_some());
        prop_assert!(k.is_some(), "the pinch was never taken for a dead end");
        let c = r.cmds[k.unwrap_or(0)];
        prop_assert!(
            c.speed_m_per_s == 0.0 || c.reverse,
            "pressed on at the dead end: {:?}", c
        );
        let last = r.cmds.last().copied();
        prop_assert!(
            r.reached || last.is_some_and(|c| c.speed_m_per_s == 0.0 && c.mode == OperatingMode::Hold),
            "neither reached nor held: {:?}", last
        );
    }
}
