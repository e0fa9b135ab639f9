//! The frame pipeline (`nav_core::onboard::FrameNavigator`) end to end on
//! synthetic straight conduits (`upcurrent_tests::frame_scene`, our own
//! invented scenes): raw port pressures, contacts, pose and joints in,
//! commands out.

use nav_core::decide::ReasonCode;
use nav_core::frame::{Contact, SensorFrame};
use nav_core::health::{ChannelReason, ChannelState, OperatingMode};
use nav_core::map::{dot, norm, sub};
use nav_core::navigator::Command;
use nav_core::onboard::{FrameNavigator, StandardFrameNavigator};
use nav_core::probe::deg;
use nav_core::tactile::SectionShape;
use upcurrent_tests::frame_scene::{Conduit, FrameScene, Gait, Robot, angle_between};
use upcurrent_tests::nav_scene::Rigid;

type Frame = SensorFrame<7, 7, 48>;

const RADIUS_M: f64 = 0.1;

fn navigator(scene: &FrameScene) -> Box<StandardFrameNavigator> {
    Box::new(FrameNavigator::new(scene.onboard_config::<8, 48>()).expect("valid config"))
}

fn placement() -> Rigid {
    Rigid::new([0.3, -0.5, 1.0], 2.2, [3.0, 1.0, -2.0])
}

fn assert_finite(c: &Command) {
    assert!(c.heading_map.iter().all(|v| v.is_finite()), "{c:?}");
    assert!((norm(c.heading_map) - 1.0).abs() < 1e-9, "{c:?}");
    assert!(
        c.speed_m_per_s.is_finite() && c.speed_m_per_s >= 0.0,
        "{c:?}"
    );
    let r = &c.record;
    for v in [
        r.standoff_m,
        r.section_radius_m,
        r.centre_offset_m,
        r.nearest_wall_m,
        r.throat_diameter_m,
        r.throat_distance_m,
    ]
    .into_iter()
    .flatten()
    {
        assert!(v.is_finite(), "{c:?}");
    }
    assert!(r.dynamic_pressure_pa.is_finite() && r.flow_dir_sigma_rad.is_finite());
}

#[test]
fn heading_points_upstream_once_the_filter_settles() {
    // The robot rides on the axis touching nothing, its head yawed 12 deg
    // off the conduit axis and rolled, in a conduit laid along a slanted
    // map direction: the flow reaches the probe well off its axis, and
    // only the probe, the pose and the filter can say where upstream is.
    let mut gait = Gait::CENTRED;
    gait.head_yaw_rad = deg(12.0);
    gait.rock_centre_rad = deg(-50.0);
    let mut scene = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        gait,
        placement(),
        0.5,
        11,
    );
    let mut nav = navigator(&scene);
    let mut checked = 0;
    for k in 0..300 {
        let f: Frame = scene.next_frame();
        let c = nav.step(&f);
        assert_finite(&c);
        if k < 100 {
            continue;
        }
        let truth = scene.truth();
        let forward = nav_core::map::head_forward_map(&f.pose.expect("pose")).expect("forward");
        // The head really is misaligned (so heading == forward would fail).
        assert!(angle_between(forward, truth.upstream_map) > deg(10.0));
        // The heading is the fused upstream plus the ridge dither and tilt
        // (nav_core::ridge), at most their sum off it.
        let ridge = nav_core::ridge::RidgeConfig::for_robot(Robot::DEMO.module_radius_m);
        let err = angle_between(c.heading_map, truth.upstream_map);
        let allowed = ridge.dither_rad + ridge.max_tilt_rad + deg(3.0);
        assert!(err < allowed, "step {k}: heading {err} rad off upstream");
        let fused = c.record.upstream_map.expect("fused upstream");
        assert!(angle_between(fused, truth.upstream_map) < deg(3.0));
        // No contacts at all: a quiet skin is a report (no wall within
        // reach), so the tactile channel is Ok, the navigator follows the
        // flow, and with no clearance known it goes at the feel speed.
        assert_eq!(c.record.reason, ReasonCode::FollowUpstream, "{c:?}");
        assert_eq!(c.health.tactile, ChannelState::Ok);
        // At the feel speed itself, not a creep or a slower cap.
        let d = nav.navigator().config().decide;
        assert!(d.feel_speed_m_per_s > d.creep_speed_m_per_s);
        assert_eq!(
            c.record.speed_limit,
            nav_core::decide::SpeedLimit::Feel,
            "{c:?}"
        );
        assert_eq!(c.speed_m_per_s, d.feel_speed_m_per_s, "{c:?}");
        checked += 1;
    }
    assert_eq!(checked, 200);
}

#[test]
fn brushing_contacts_give_the_conduit_radius_and_a_recentring_heading() {
    // Pressed onto the floor and rocking +-60 deg: the head's belly pad
    // sweeps the lower wall.
    let mut gait = Gait::ROCKING;
    gait.head_lift_every_s = 0.0;
    let mut scene = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        gait,
        placement(),
        0.5,
        12,
    );
    let mut nav = navigator(&scene);
    let mut fits = 0u64;
    let mut circles = 0;
    let mut worst: f64 = 0.0;
    let mut recentring = 0;
    for k in 0..500 {
        let f: Frame = scene.next_frame();
        let c = nav.step(&f);
        assert_finite(&c);
        let truth = *scene.truth();
        let fitted = nav.counters().section_fits > fits;
        fits = nav.counters().section_fits;
        if k < 100 {
            continue;
        }
        if fitted
            && let Some(est) = nav.last_section()
            && let SectionShape::Circle(circle) = est.plane.shape
        {
            circles += 1;
            let rel = (circle.radius_m - RADIUS_M).abs() / RADIUS_M;
            worst = worst.max(rel);
            // The centre lies on the conduit axis.
            let centre = est.centre_map_m().expect("centre");
            let d = sub([centre.x, centre.y, centre.z], truth.axis_point_map_m);
            let off_axis = norm(sub(
                d,
                nav_core::map::scale(truth.axis_map, dot(d, truth.axis_map)),
            ));
            assert!(
                off_axis < 0.005,
                "step {k}: centre {off_axis} m off the axis"
            );
        }
        // The head touches the wall, so its standoff is below the required
        // one: the navigator steers back toward the centre while still
        // going upstream.
        if c.record.reason == ReasonCode::Recentre {
            recentring += 1;
            let to_centre = sub(truth.axis_point_map_m, truth.head_position_map_m);
            assert!(dot(c.heading_map, to_centre) > 0.0, "step {k}: {c:?}");
            assert!(
                dot(c.heading_map, truth.upstream_map) > 0.5,
                "step {k}: {c:?}"
            );
        }
    }
    // A fit every 4 steps over 400 steps; most of them circles.
    assert!(circles >= 50, "only {circles} circle fits");
    assert!(worst < 0.03, "radius off by {:.2} %", 100.0 * worst);
    assert!(recentring >= 300, "only {recentring} recentring steps");
}

#[test]
fn without_the_probe_the_flow_channel_fails_and_the_record_says_so() {
    // Rocking on the floor; the head lifts to the axis for 0.3 s every
    // 1.5 s (there its standoff is fine, so the navigator can say why it
    // steers as it does rather than just recentre).
    let mut scene = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        Gait::ROCKING,
        placement(),
        0.5,
        13,
    );
    let mut nav = navigator(&scene);
    let mut upstream_while_probed = 0;
    for k in 0..300 {
        let f: Frame = scene.next_frame();
        let c = nav.step(&f);
        assert_finite(&c);
        if k >= 150 {
            assert_ne!(c.health.flow, ChannelState::Failed, "step {k}: {c:?}");
            assert_ne!(c.health.tactile, ChannelState::Failed, "step {k}: {c:?}");
            assert!(
                matches!(c.mode, OperatingMode::Nominal | OperatingMode::FlowDegraded),
                "step {k}: {c:?}"
            );
            upstream_while_probed += usize::from(c.record.reason == ReasonCode::FollowUpstream);
        }
    }
    assert!(upstream_while_probed > 0);
    // The probe goes silent at t = 3 s; the flow timeout is 0.5 s.
    let mut by_feel = 0;
    for k in 300..700 {
        let mut f: Frame = scene.next_frame();
        f.port_pressures_pa = None;
        let c = nav.step(&f);
        assert_finite(&c);
        if k < 360 {
            continue;
        }
        assert_eq!(c.health.flow, ChannelState::Failed, "step {k}: {c:?}");
        assert_eq!(nav.navigator().health().flow.reason, ChannelReason::Stale);
        assert_eq!(c.mode, OperatingMode::TactileOnly, "step {k}: {c:?}");
        assert!(
            matches!(
                c.record.reason,
                ReasonCode::FollowByFeel | ReasonCode::Recentre
            ),
            "step {k}: {c:?}"
        );
        by_feel += usize::from(c.record.reason == ReasonCode::FollowByFeel);
    }
    assert!(by_feel > 0, "the record never said it follows by feel");
}

#[test]
fn malformed_frames_do_not_panic_and_leave_finite_commands() {
    let mut scene = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        Gait::ROCKING,
        placement(),
        0.5,
        14,
    );
    let mut nav = navigator(&scene);
    for _ in 0..200 {
        let f: Frame = scene.next_frame();
        assert_finite(&nav.step(&f));
    }
    let before = nav.counters();

    // One port reads NaN.
    let mut f: Frame = scene.next_frame();
    if let Some(p) = f.port_pressures_pa.as_mut() {
        p[3] = f64::NAN;
    }
    assert_finite(&nav.step(&f));
    assert_eq!(nav.counters().probe_errors, before.probe_errors + 1);

    // A contact on module 8 of an 8-module body.
    let mut f: Frame = scene.next_frame();
    assert!(f.push_contact(Contact {
        module: 8,
        sensor: 0,
        force_n: 1.0,
        normal_module: None,
    }));
    assert_finite(&nav.step(&f));
    assert_eq!(nav.counters().tactile_errors, before.tactile_errors + 1);

    // A sensor the module does not have, an infinite force, every port
    // NaN and no pose, all in one frame.
    let mut f: Frame = scene.next_frame();
    f.contacts[0].sensor = 9;
    f.contacts[1].force_n = f64::INFINITY;
    f.port_pressures_pa = Some([f64::NAN; 7]);
    f.pose = None;
    assert_finite(&nav.step(&f));
    assert_eq!(nav.counters().tactile_errors, before.tactile_errors + 2);
    assert_eq!(nav.counters().probe_errors, before.probe_errors + 2);

    // Good frames again: no further errors, and both channels recover.
    let mut last = None;
    for _ in 0..300 {
        let f: Frame = scene.next_frame();
        let c = nav.step(&f);
        assert_finite(&c);
        last = Some(c);
    }
    let c = last.expect("stepped");
    assert_eq!(nav.counters().tactile_errors, before.tactile_errors + 2);
    assert_eq!(nav.counters().probe_errors, before.probe_errors + 2);
    assert_ne!(c.health.flow, ChannelState::Failed);
    assert_ne!(c.health.tactile, ChannelState::Failed);
}

#[test]
fn a_failed_port_stays_out_of_the_fit_until_a_recheck_clears_it() {
    // Port 3 reads 30 Pa high (a leak or a shifted transducer; 60 sigma)
    // from step 100 to step 600, then reads true again. The probe isolates
    // it, the health stage fails it, and the onboard stage then keeps it
    // out of the fit: it must stay failed for as long as the fault lasts
    // (no flapping back in), the heading must stay upstream, and once the
    // fault is gone a recheck with every port must bring it back.
    let mut gait = Gait::CENTRED;
    gait.head_yaw_rad = deg(8.0);
    let mut scene = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        gait,
        placement(),
        0.5,
        21,
    );
    let mut nav = navigator(&scene);
    let bit = 1u32 << 3;
    let mut first_failed = None;
    let mut back_at = None;
    let mut fits_out_at_600 = 0;
    for k in 0..1200u32 {
        if k == 600 {
            fits_out_at_600 = nav.counters().fits_without_failed_ports;
        }
        let mut f: Frame = scene.next_frame();
        if (100..600).contains(&k)
            && let Some(p) = f.port_pressures_pa.as_mut()
        {
            p[3] += 30.0;
        }
        let c = nav.step(&f);
        assert_finite(&c);
        let failed = c.health.failed_ports & bit != 0;
        if failed && first_failed.is_none() {
            first_failed = Some(k);
        }
        if let Some(k0) = first_failed
            && k < 600
            && k > k0
        {
            assert!(failed, "step {k}: port 3 came back while still leaking");
        }
        if k >= 600 && !failed && back_at.is_none() {
            back_at = Some(k);
        }
        if k > 150 {
            // Fused upstream, plus at most the ridge dither and tilt.
            let fused = c.record.upstream_map.expect("fused upstream");
            let err = angle_between(fused, scene.truth().upstream_map);
            assert!(err < deg(3.0), "step {k}: fused upstream {err} rad off");
            let ridge = nav_core::ridge::RidgeConfig::for_robot(Robot::DEMO.module_radius_m);
            let err = angle_between(c.heading_map, scene.truth().upstream_map);
            let allowed = ridge.dither_rad + ridge.max_tilt_rad + deg(3.0);
            assert!(err < allowed, "step {k}: heading {err} rad off upstream");
        }
    }
    let k0 = first_failed.expect("the leaking port was never failed");
    assert!(k0 < 150, "port 3 failed only at step {k0}");
    let back = back_at.expect("port 3 never came back after the fault cleared");
    // One recheck period plus the health stage's recovery streak.
    assert!(
        back <= 600 + nav_core::onboard::PORT_RECHECK_STEPS as u32 + 40,
        "port 3 came back only at step {back}"
    );
    assert_eq!(nav.counters().probe_errors, 0);
    // While the port was failed the fits left it out (all but the
    // rechecks), and once it was back they stopped doing so.
    let during = 600 - u64::from(k0);
    assert!(
        fits_out_at_600 + during / nav_core::onboard::PORT_RECHECK_STEPS + 15 >= during,
        "only {fits_out_at_600} of {during} fits left the failed port out"
    );
    let after = nav.counters().fits_without_failed_ports - fits_out_at_600;
    assert!(
        after <= u64::from(back - 600),
        "{after} fits left a port out after it came back"
    );
}

/// The windowed flow estimate is fed only frames near weak flow
/// (`nav_core::onboard::WINDOW_FEED_FACTOR` times the lost-flow threshold):
/// in strong flow it gathers nothing, at twice the threshold it gathers
/// every frame.
#[test]
fn the_flow_window_is_fed_only_near_weak_flow() {
    let threshold_pa = FrameScene::new(
        Conduit::straight(RADIUS_M, 40.0),
        Robot::DEMO,
        Gait::CENTRED,
        placement(),
        0.05,
        3,
    )
    .onboard_config::<8, 48>()
    .nav
    .decide
    .min_dynamic_pressure_pa;
    let feed_limit_pa = nav_core::onboard::WINDOW_FEED_FACTOR * threshold_pa;
    for (q_pa, fed) in [(40.0, false), (0.5 * feed_limit_pa, true)] {
        assert!(q_pa > threshold_pa, "{q_pa} Pa is not above the threshold");
        let mut scene = FrameScene::new(
            Conduit::straight(RADIUS_M, q_pa),
            Robot::DEMO,
            Gait::CENTRED,
            placement(),
            0.05,
            3,
        );
        let mut nav = navigator(&scene);
        for _ in 0..200 {
            let f: Frame = scene.next_frame();
            assert_finite(&nav.step(&f));
        }
        let frames = nav.flow_window().estimate().effective_frames;
        assert_eq!(frames > 0.0, fed, "{q_pa} Pa: {frames} effective frames");
    }
}
