//! The navigator where the skin touches nothing: a quiet skin is a report,
//! not a fault; the flow's sense survives a head turned away from it; a
//! wall across the path with the flow coming out of it and no junction
//! behind is the end of the way (held as arrived), while the same wall with
//! still air is a dead end.
//!
//! Observations are built by hand (map frame, a level conduit along +x, air
//! moving toward -x): every expected value follows from the rules in
//! `nav_core::decide` and `nav_core::health`, not from a run.

use nav_core::decide::{FlowObservation, Phase, ReasonCode, SpeedLimit, WallObservation};
use nav_core::frame::HeadPose;
use nav_core::health::{ChannelState, OperatingMode};
use nav_core::map::dot;
use nav_core::navigator::{Command, NavConfig, Observation, StandardNavigator};

const R: f64 = 0.06;

fn nav() -> Box<StandardNavigator> {
    let cfg = NavConfig::for_robot(R).validate().expect("valid config");
    Box::new(StandardNavigator::new(cfg).expect("capacities"))
}

/// Head at `x` on the axis, pointing +x (identity attitude).
fn pose(x: f64) -> HeadPose {
    HeadPose {
        position_m: [x, 0.0, 0.0],
        orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
        position_sigma_m: 0.01,
        attitude_sigma_rad: 0.01,
    }
}

/// A clean probe solution: air moving along `dir` at dynamic pressure `q`.
fn flow(dir: [f64; 3], q: f64) -> FlowObservation {
    let var = 1e-4;
    FlowObservation {
        velocity_dir_map: Some(dir),
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

/// A navigator after 2 s of steady flow along `dir` at 1 Pa with a quiet
/// skin (the filter and the health dwell have settled).
fn settled(dir: [f64; 3]) -> Box<StandardNavigator> {
    let mut n = nav();
    for k in 0..200 {
        step(&mut n, k, Some(flow(dir, 1.0)), WallObservation::EMPTY);
    }
    n
}

fn step(
    n: &mut StandardNavigator,
    k: u32,
    f: Option<FlowObservation>,
    w: WallObservation,
) -> Command {
    let t = 0.01 * f64::from(k);
    n.step(&Observation {
        time_s: t,
        pose: Some(pose(0.001 * f64::from(k))),
        flow: f,
        wall: Some(w),
    })
}

#[test]
fn a_quiet_skin_is_healthy_and_caps_speed_at_the_feel_speed() {
    let mut n = nav();
    let feel = NavConfig::for_robot(R).decide.feel_speed_m_per_s;
    let mut last = None;
    for k in 0..400 {
        last = Some(step(
            &mut n,
            k,
            Some(flow([-1.0, 0.0, 0.0], 1.0)),
            WallObservation::EMPTY,
        ));
    }
    let c = last.expect("commands");
    assert_eq!(c.health.tactile, ChannelState::Ok, "{c:?}");
    assert_eq!(c.mode, OperatingMode::Nominal, "{c:?}");
    assert_eq!(c.record.reason, ReasonCode::FollowUpstream);
    assert_eq!(c.record.speed_limit, SpeedLimit::Feel);
    // The feel speed itself: a creep (or any slower cap) would fail this.
    let creep = NavConfig::for_robot(R).decide.creep_speed_m_per_s;
    assert!(feel > creep);
    assert_eq!(c.speed_m_per_s, feel, "{c:?}");
    assert!(c.record.standoff_m.is_none());
}

#[test]
fn no_skin_report_at_all_still_fails_the_tactile_channel() {
    let mut n = nav();
    let mut last: Option<Command> = None;
    // The head advances as commanded (standing still while commanded
    // forward would be a stall, and a stall ends in a hold).
    let mut x = 0.0;
    for k in 0..300 {
        let t = 0.01 * f64::from(k);
        let c = n.step(&Observation {
            time_s: t,
            pose: Some(pose(x)),
            flow: Some(flow([-1.0, 0.0, 0.0], 1.0)),
            wall: None,
        });
        x += 0.01 * c.speed_m_per_s;
        last = Some(c);
    }
    let c = last.expect("commands");
    assert_eq!(c.health.tactile, ChannelState::Failed);
    assert_eq!(c.mode, OperatingMode::FlowOnly);
}

#[test]
fn a_reversed_reading_is_taken_as_the_mirror_of_the_fused_flow() {
    let mut n = settled([-1.0, 0.0, 0.0]);
    // The head turns away: the sphere model reads the same pressures for
    // the reverse flow. Far more readings than the outlier reset count.
    let resets = u32::from(NavConfig::for_robot(R).flow_outlier_reset);
    let mut last = None;
    for k in 200..(200 + 20 * resets) {
        last = Some(step(
            &mut n,
            k,
            Some(flow([1.0, 0.0, 0.0], 1.0)),
            WallObservation::EMPTY,
        ));
    }
    let up = last
        .and_then(|c| c.record.upstream_map)
        .expect("fused upstream");
    assert!(dot(up, [1.0, 0.0, 0.0]) > 0.999, "upstream flipped: {up:?}");
}

fn end_ahead() -> WallObservation {
    let mut w = WallObservation::EMPTY;
    w.end_ahead = true;
    w.wall_points_m[0] = [0.5, 0.0, 0.0];
    w.wall_point_count = 1;
    w
}

#[test]
fn a_wall_ahead_with_the_flow_coming_out_of_it_is_held_as_arrived() {
    let mut n = settled([-1.0, 0.0, 0.0]);
    let c = step(&mut n, 200, Some(flow([-1.0, 0.0, 0.0], 1.0)), end_ahead());
    assert_eq!(c.record.reason, ReasonCode::HoldAtSource, "{c:?}");
    assert_eq!(c.record.phase, Phase::AtSource);
    assert_eq!(c.speed_m_per_s, 0.0);
    // It stays held once the wall is no longer felt.
    for k in 201..260 {
        let c = step(
            &mut n,
            k,
            Some(flow([-1.0, 0.0, 0.0], 1.0)),
            WallObservation::EMPTY,
        );
        assert_eq!(c.record.reason, ReasonCode::HoldAtSource);
        assert_eq!(c.speed_m_per_s, 0.0);
    }
}

#[test]
fn a_wall_ahead_in_still_air_is_a_dead_end() {
    let mut n = settled([-1.0, 0.0, 0.0]);
    let weak = NavConfig::for_robot(R).decide.min_dynamic_pressure_pa * 0.1;
    // The air goes still (the filter follows within a few frames).
    let mut c = None;
    for k in 200..400 {
        c = Some(step(
            &mut n,
            k,
            Some(flow([-1.0, 0.0, 0.0], weak)),
            WallObservation::EMPTY,
        ));
    }
    assert!(c.expect("commands").record.flow_weak_for_s > 0.0);
    let c = step(&mut n, 400, Some(flow([-1.0, 0.0, 0.0], weak)), end_ahead());
    // No junction behind to back out to: a dead end with nothing left.
    assert_eq!(c.record.reason, ReasonCode::GaveUp, "{c:?}");
    assert_ne!(c.record.phase, Phase::AtSource);
}

#[test]
fn a_wall_ahead_beside_the_flow_is_steered_round_not_a_stop() {
    // Flow coming from 45 degrees to the left of the head's axis: the
    // wall felt straight ahead is a bend, not where the air comes from.
    let s = std::f64::consts::FRAC_1_SQRT_2;
    let mut n = settled([-s, -s, 0.0]);
    let c = step(&mut n, 200, Some(flow([-s, -s, 0.0], 1.0)), end_ahead());
    assert_ne!(c.record.reason, ReasonCode::HoldAtSource, "{c:?}");
    assert_ne!(c.record.reason, ReasonCode::GaveUp, "{c:?}");
    assert!(c.speed_m_per_s > 0.0, "{c:?}");
}

#[test]
fn with_the_flow_failed_and_nothing_felt_it_creeps() {
    let mut n = settled([-1.0, 0.0, 0.0]);
    let creep = NavConfig::for_robot(R).decide.creep_speed_m_per_s;
    // The probe stops reporting; the skin stays quiet.
    let mut last = None;
    for k in 200..500 {
        last = Some(step(&mut n, k, None, WallObservation::EMPTY));
    }
    let c = last.expect("commands");
    assert_eq!(c.mode, OperatingMode::TactileOnly, "{c:?}");
    assert_eq!(c.record.reason, ReasonCode::FollowByFeel, "{c:?}");
    assert!(c.speed_m_per_s > 0.0 && c.speed_m_per_s <= creep, "{c:?}");
}
