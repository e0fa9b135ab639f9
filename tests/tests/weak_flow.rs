//! Weak air (issue 13): in a drift at 0.3 m/s (dynamic pressure about
//! 0.055 Pa) with 0.03 Pa port noise, where the probe's single-frame
//! solution is withheld by its low-flow guard, the flow channel is weak,
//! not failed; the robot dwells while the windowed estimate integrates and
//! then follows it upstream. The world is invented
//! (`fixtures/scenarios/slow-drift-0.3.toml`).

use nav_core::decide::ReasonCode;
use nav_core::health::ChannelState;
use replay::run::{AnyNavigator, build_sim};
use replay::sim::MotionCommand;

#[test]
fn slow_air_is_weak_not_failed_and_is_followed_upstream() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../fixtures/scenarios/slow-drift-0.3.toml"
    );
    let mut sim = build_sim(path, None).expect("scenario builds");
    let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec()).expect("navigator");
    let mut frame = sim.frame().clone();
    let start = sim.true_state().head_position_m;
    let (mut failed, mut weak, mut dwell, mut follow) = (0u32, 0u32, 0u32, 0u32);
    let mut first_follow = None;
    let steps = 6000; // 60 s
    for k in 0..steps {
        let cmd = nav.step(&frame).expect("step");
        if k > 100 {
            match cmd.health.flow {
                ChannelState::Failed => failed += 1,
                ChannelState::Weak => weak += 1,
                _ => {}
            }
        }
        match cmd.record.reason {
            ReasonCode::DwellWeakFlow => {
                dwell += 1;
                assert_eq!(cmd.speed_m_per_s, 0.0, "a dwell stops the robot");
            }
            ReasonCode::FollowWeakFlow => {
                follow += 1;
                first_follow.get_or_insert(sim.time_s());
            }
            ReasonCode::FollowByFeel => panic!("wandering by feel at {} s", sim.time_s()),
            _ => {}
        }
        frame = sim
            .step(&MotionCommand {
                heading_map: cmd.heading_map,
                speed_m_per_s: cmd.speed_m_per_s,
            })
            .clone();
    }
    let end = sim.true_state().head_position_m;
    eprintln!(
        "failed {failed} weak {weak} dwell {dwell} follow {follow} first follow {first_follow:?} moved {:?}",
        [end[0] - start[0], end[1] - start[1]]
    );
    assert_eq!(failed, 0, "the flow channel failed in weak air");
    assert!(weak > steps / 2, "weak on {weak} of {steps} steps");
    let t = first_follow.expect("never followed the weak flow");
    assert!(t < 20.0, "first followed at {t} s");
    // Upstream is +x here (the fan is at x = 60 m): at least 3 m in 60 s.
    assert!(
        end[0] - start[0] > 3.0,
        "moved {} m upstream",
        end[0] - start[0]
    );
    assert_eq!(sim.outcome().wall_strikes, 0);
}
