//! The Rust embedding: in-place construction into caller-owned storage,
//! compile-time capacities, and the error messages.

use nav_core::frame::SensorFrame;
use nav_core::onboard::{FrameNavigator, OnboardError, StandardFrameNavigator};
use std::mem::MaybeUninit;
use upcurrent_tests::frame_scene::{Conduit, FrameScene, Gait, Robot};
use upcurrent_tests::nav_scene::Rigid;

fn scene() -> FrameScene {
    let placement = Rigid::new([0.0, 0.0, 0.0], 0.0, [0.0, 0.0, 0.0]);
    FrameScene::new(
        Conduit::straight(0.1, 20.0),
        Robot::DEMO,
        Gait::ROCKING,
        placement,
        0.5,
        11,
    )
}

/// `init` into uninitialised heap storage (the host stand-in for a static
/// slot) gives a navigator that steps exactly like one from `new`.
#[test]
fn init_in_place_steps_like_new() {
    let mut a = scene();
    let mut b = scene();
    let mut by_value = Box::new(StandardFrameNavigator::new(a.onboard_config::<8, 48>()).unwrap());
    let mut slot: Box<MaybeUninit<StandardFrameNavigator>> = Box::new_uninit();
    let in_place = StandardFrameNavigator::init(&mut slot, b.onboard_config::<8, 48>()).unwrap();
    let mut moving = 0;
    for _ in 0..400 {
        let fa: SensorFrame<7, 7, 48> = a.next_frame();
        let fb: SensorFrame<7, 7, 48> = b.next_frame();
        let ca = by_value.step(&fa);
        let cb = in_place.step(&fb);
        assert_eq!(ca, cb);
        if ca.speed_m_per_s > 0.0 {
            moving += 1;
        }
    }
    // The comparison means something only if the navigator drove.
    assert!(moving > 100, "only {moving} moving steps");
    assert_eq!(in_place.counters(), by_value.counters());
}

/// A refused configuration leaves the slot untouched and says which field.
#[test]
fn init_refuses_and_names_the_field() {
    let s = scene();
    let mut cfg = s.onboard_config::<8, 48>();
    cfg.throat_stations = 9;
    let mut slot: Box<MaybeUninit<StandardFrameNavigator>> = Box::new_uninit();
    let err = StandardFrameNavigator::init(&mut slot, cfg).unwrap_err();
    assert!(matches!(
        err,
        OnboardError::Setting {
            field: "throat_stations",
            ..
        }
    ));
    assert_eq!(err.to_string(), "throat_stations = 9: out of range");
    let mut cfg = s.onboard_config::<8, 48>();
    cfg.body.modules[1].radius_m = -0.02;
    let err = StandardFrameNavigator::new(cfg).unwrap_err();
    assert_eq!(
        err.to_string(),
        "body: modules[1].radius_m = -0.02: must be finite and positive"
    );
}

/// Two navigators in storage side by side do not share state: stepping one
/// leaves the other where it was.
#[test]
fn instances_are_independent() {
    let mut a = scene();
    let mut slots: Vec<MaybeUninit<StandardFrameNavigator>> =
        std::iter::repeat_with(MaybeUninit::uninit)
            .take(2)
            .collect();
    let (x, y) = slots.split_at_mut(1);
    let cfg = a.onboard_config::<8, 48>();
    let n1: &mut FrameNavigator<7, 7, 48, 8, 48, 256, 128, 512, 8> =
        StandardFrameNavigator::init(&mut x[0], cfg).unwrap();
    let n2 = StandardFrameNavigator::init(&mut y[0], cfg).unwrap();
    for _ in 0..50 {
        let f: SensorFrame<7, 7, 48> = a.next_frame();
        let _ = n1.step(&f);
    }
    assert_eq!(n1.counters().steps, 50);
    assert_eq!(n2.counters().steps, 0);
}
