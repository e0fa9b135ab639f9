//! What the frame pipeline does when its inputs cannot be trusted: bad
//! clocks (a future stamp, a stuck clock, NaN stamps, a reset to zero), a
//! silent skin, absurd but finite poses (`nav_core::trust`). The scenes
//! are our own invented ones (`upcurrent_tests::frame_scene`).

use nav_core::decide::{FrameDisposition, ReasonCode};
use nav_core::frame::{HeadPose, SensorFrame};
use nav_core::health::OperatingMode;
use nav_core::navigator::{Command, NavConfig, Observation, StandardNavigator};
use nav_core::onboard::{FrameNavigator, StandardFrameNavigator};
use nav_core::probe::deg;
use nav_core::trust::ClockConfig;
use proptest::prelude::*;
use upcurrent_tests::frame_scene::{Conduit, FrameScene, Gait, Robot};
use upcurrent_tests::nav_scene::Rigid;

type Frame = SensorFrame<7, 7, 48>;

const CLOCK: ClockConfig = ClockConfig::DEFAULT;

/// A robot riding the axis of a straight conduit with flow, touching
/// nothing: after the filter settles it follows the flow at a non-zero
/// speed.
fn scene(seed: u64) -> FrameScene {
    let mut gait = Gait::CENTRED;
    gait.head_yaw_rad = deg(5.0);
    FrameScene::new(
        Conduit::straight(0.1, 40.0),
        Robot::DEMO,
        gait,
        Rigid::new([0.3, -0.5, 1.0], 2.2, [3.0, 1.0, -2.0]),
        0.5,
        seed,
    )
}

fn navigator(scene: &FrameScene) -> Box<StandardFrameNavigator> {
    Box::new(FrameNavigator::new(scene.onboard_config::<8, 48>()).expect("valid config"))
}

/// A scene and a navigator after `n` ordinary frames, moving.
fn moving(seed: u64, n: usize) -> (FrameScene, Box<StandardFrameNavigator>, Command) {
    let mut s = scene(seed);
    let mut nav = navigator(&s);
    let mut last = None;
    for _ in 0..n {
        let f: Frame = s.next_frame();
        last = Some(nav.step(&f));
    }
    let c = last.expect("stepped");
    assert!(c.speed_m_per_s > 0.0, "moving before the fault: {c:?}");
    (s, nav, c)
}

fn used(c: &Command) -> bool {
    matches!(
        c.record.frame,
        FrameDisposition::Used | FrameDisposition::PartlyRejected
    )
}

/// Every number a command carries is finite.
fn all_finite(c: &Command) -> bool {
    let r = &c.record;
    let mut v = vec![
        c.time_s,
        c.speed_m_per_s,
        r.time_s,
        r.required_standoff_m,
        r.flow_dir_sigma_rad,
        r.dynamic_pressure_pa,
        r.flow_weak_for_s,
    ];
    v.extend(c.heading_map);
    v.extend(
        [
            r.standoff_m,
            r.section_radius_m,
            r.centre_offset_m,
            r.nearest_wall_m,
            r.throat_diameter_m,
            r.throat_distance_m,
            r.ridge_gradient_per_m,
        ]
        .into_iter()
        .flatten(),
    );
    v.extend(r.upstream_map.into_iter().flatten());
    if let Some(b) = &r.branch {
        v.extend([
            b.hysteresis_frac,
            b.trunk_flux_kg_per_s,
            b.continuity_residual,
            b.required_width_m,
        ]);
        v.extend(b.flux_kg_per_s);
        v.extend(b.width_m);
    }
    v.iter().all(|x| x.is_finite())
}

#[test]
fn one_future_stamp_holds_that_frame_and_the_clock_goes_on() {
    let (mut s, mut nav, _) = moving(1, 200);
    let mut f: Frame = s.next_frame();
    f.time_s += 1.0e9;
    let c = nav.step(&f);
    assert_eq!(c.speed_m_per_s, 0.0, "{c:?}");
    assert_eq!(c.record.reason, ReasonCode::HoldClockUntrusted);
    assert_eq!(c.record.frame, FrameDisposition::DroppedClockJump);
    // The next ordinary frames are used at once and the robot moves on.
    for _ in 0..50 {
        let f: Frame = s.next_frame();
        let c = nav.step(&f);
        assert!(used(&c), "{c:?}");
    }
    let f: Frame = s.next_frame();
    assert!(nav.step(&f).speed_m_per_s > 0.0);
    assert_eq!(nav.navigator().clock().reanchors(), 0);
}

#[test]
fn a_stuck_clock_stops_the_robot_after_the_late_allowance() {
    let (mut s, mut nav, _) = moving(2, 200);
    let stuck_at = nav.navigator().clock().last_used_s();
    let mut moving_repeats = 0;
    for k in 0..300 {
        let mut f: Frame = s.next_frame();
        f.time_s = stuck_at;
        let c = nav.step(&f);
        if c.speed_m_per_s > 0.0 {
            moving_repeats += 1;
            assert!(k < CLOCK.max_late_frames, "still moving at stuck frame {k}");
        } else {
            assert_eq!(c.record.reason, ReasonCode::HoldClockUntrusted);
            assert_eq!(c.mode, OperatingMode::Hold);
        }
    }
    assert_eq!(moving_repeats, CLOCK.max_late_frames);
    // The clock moves again: frames are used again.
    let f: Frame = s.next_frame();
    assert!(used(&nav.step(&f)));
}

#[test]
fn nan_stamps_hold_every_frame() {
    let (mut s, mut nav, _) = moving(3, 200);
    for _ in 0..100 {
        let mut f: Frame = s.next_frame();
        f.time_s = f64::NAN;
        let c = nav.step(&f);
        assert_eq!(c.speed_m_per_s, 0.0);
        assert_eq!(c.record.frame, FrameDisposition::DroppedInvalid);
        assert!(all_finite(&c), "{c:?}");
    }
    assert_eq!(nav.counters().untrusted_frames, 100);
}

#[test]
fn a_reset_to_zero_holds_then_recovers_within_the_documented_frames() {
    let (mut s, mut nav, _) = moving(4, 300);
    let mut first_used = None;
    let mut moving_again = None;
    for k in 0..200u32 {
        let mut f: Frame = s.next_frame();
        f.time_s = f64::from(k) * 0.01;
        let c = nav.step(&f);
        assert!(all_finite(&c), "{c:?}");
        if first_used.is_none() {
            if used(&c) {
                first_used = Some(k);
            } else {
                assert_eq!(c.speed_m_per_s, 0.0, "frame {k} after the reset: {c:?}");
            }
        }
        if moving_again.is_none() && c.speed_m_per_s > 0.0 {
            moving_again = Some(k);
        }
    }
    assert_eq!(first_used, Some(CLOCK.reanchor_frames - 1));
    assert_eq!(nav.navigator().clock().reanchors(), 1);
    let k = moving_again.expect("moves again after the re-anchor");
    assert!(k < CLOCK.reanchor_frames + 100, "moving again at frame {k}");
}

/// A stamp sequence: mostly ordinary steps, with faults mixed in.
fn arb_stamp() -> impl Strategy<Value = (u8, f64)> {
    (0u8..10, -1.0e3..1.0e3f64)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]

    /// For any sequence of stamps, no command with a non-zero speed comes
    /// more than `max_late_frames` frames after the last frame the
    /// navigator used.
    #[test]
    fn no_motion_long_after_the_last_trusted_frame(
        faults in prop::collection::vec(arb_stamp(), 100..300),
        seed in 0u64..4,
    ) {
        let (mut s, mut nav, _) = moving(10 + seed, 150);
        let mut since_used = 0u32;
        let mut prev = nav.navigator().clock().last_used_s();
        for (kind, x) in faults {
            let mut f: Frame = s.next_frame();
            f.time_s = match kind {
                0 => f64::NAN,
                1 => f64::INFINITY,
                2 => prev + x * 1.0e6,      // a jump either way
                3 => prev,                   // stuck
                4 => x.abs() * 1e-3,         // near zero (a reset)
                5 => prev - 0.05,            // late
                _ => prev + 0.01,            // ordinary
            };
            if f.time_s.is_finite() {
                prev = f.time_s;
            }
            let c = nav.step(&f);
            prop_assert!(all_finite(&c), "{:?}", c);
            if used(&c) {
                since_used = 0;
            } else {
                since_used += 1;
                prop_assert!(
                    c.speed_m_per_s == 0.0 || since_used <= CLOCK.max_late_frames,
                    "moving {} frames after the last used one: {:?}", since_used, c
                );
            }
        }
    }
}

#[test]
fn a_silent_skin_without_flow_holds_where_a_quiet_one_creeps() {
    let run = |reported: bool| {
        let (mut s, mut nav, _) = moving(5, 200);
        let mut last = None;
        for _ in 0..300 {
            let mut f: Frame = s.next_frame();
            f.port_pressures_pa = None;
            f.contact_count = 0;
            f.contacts_reported = reported;
            last = Some(nav.step(&f));
        }
        (last.expect("stepped"), nav.counters().silent_skin_frames)
    };
    // Quiet skin: it reported, nothing touches; no flow: following by feel.
    let (quiet, silent_frames) = run(true);
    assert_eq!(silent_frames, 0);
    assert!(quiet.speed_m_per_s > 0.0, "{quiet:?}");
    // Silent skin and no probe: nothing is sensed; the robot holds.
    let (dead, silent_frames) = run(false);
    assert_eq!(silent_frames, 300);
    assert_eq!(dead.speed_m_per_s, 0.0, "{dead:?}");
    assert_eq!(dead.record.reason, ReasonCode::HoldChannelsUnhealthy);
    assert_eq!(dead.mode, OperatingMode::Hold);
}

#[test]
fn absurd_poses_are_refused_and_the_record_stays_finite() {
    let (mut s, mut nav, _) = moving(6, 200);
    let absurd = |p: &mut HeadPose, k: u32| match k % 4 {
        0 => p.position_m = [1.0e125, -3.0e125, 2.0e125],
        1 => p.position_m[0] += 5.0e3, // kilometres in one step
        2 => p.position_sigma_m = -1.0,
        _ => p.attitude_sigma_rad = -0.5,
    };
    for k in 0..200u32 {
        let mut f: Frame = s.next_frame();
        if let Some(p) = f.pose.as_mut() {
            absurd(p, k);
        }
        let c = nav.step(&f);
        assert!(all_finite(&c), "frame {k}: {c:?}");
        assert_eq!(c.record.frame, FrameDisposition::PartlyRejected);
    }
    assert_eq!(nav.counters().implausible_poses, 200);
    // With no pose accepted for that long, the robot stops.
    let f: Frame = {
        let mut f: Frame = s.next_frame();
        f.pose = None;
        f
    };
    let c = nav.step(&f);
    assert_eq!(c.speed_m_per_s, 0.0, "{c:?}");
    assert_eq!(c.record.reason, ReasonCode::HoldNoPose);
}

fn pose_at(x: f64) -> HeadPose {
    HeadPose {
        position_m: [x, 0.0, 0.0],
        orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
        position_sigma_m: 0.01,
        attitude_sigma_rad: 0.01,
    }
}

fn absurd_f64() -> impl Strategy<Value = f64> {
    prop_oneof![
        -1.0e3..1.0e3f64,
        -1.0e300..1.0e300f64,
        Just(f64::MAX),
        Just(-f64::MAX),
        Just(1.0e-300),
        Just(0.0),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// Absurd but finite poses, flows and sections at the decision stage
    /// never put a non-finite number into a command.
    #[test]
    fn absurd_finite_inputs_give_finite_records(
        seq in prop::collection::vec(
            (absurd_f64(), absurd_f64(), absurd_f64(), absurd_f64(), 0u8..4),
            1..80,
        ),
    ) {
        let cfg = NavConfig::for_robot(0.1).validate().expect("valid");
        let mut nav = Box::new(StandardNavigator::new(cfg).expect("capacities"));
        for (k, (a, b, c, d, pick)) in seq.into_iter().enumerate() {
            let t = 0.01 * f64::from(u32::try_from(k).unwrap_or(0));
            let mut pose = pose_at(a);
            pose.position_m[1] = b;
            pose.position_sigma_m = c;
            let flow = nav_core::decide::FlowObservation {
                velocity_dir_map: Some([1.0, b, c]),
                dir_cov_map: [[d.abs(), 0.0, 0.0], [0.0, d.abs(), 0.0], [0.0, 0.0, d.abs()]],
                dynamic_pressure_pa: a.abs(),
                dynamic_pressure_sigma_pa: c.abs(),
                static_pressure_pa: 1.0e5,
                mach: 0.01,
                density_kg_per_m3: 1.2,
                degraded: false,
                port_suspect_mask: 0,
                port_failed_mask: 0,
            };
            let mut wall = nav_core::decide::WallObservation::EMPTY;
            wall.section = nav_core::map::Section::Circle {
                centre_m: [a, b, 0.0],
                radius_m: d.abs().max(1e-3),
                centre_sigma_m: c.abs(),
                radius_sigma_m: 0.01,
            };
            let obs = Observation {
                time_s: t,
                pose: (pick != 0).then_some(pose),
                flow: (pick != 1).then_some(flow),
                wall: (pick != 2).then_some(wall),
            };
            let cmd = nav.step(&obs);
            prop_assert!(all_finite(&cmd), "step {}: {:?}", k, cmd);
        }
    }
}
