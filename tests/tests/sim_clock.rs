//! Clock faults in the simulator's fault schedule (`clock_jump`,
//! `clock_stuck`, `clock_reset`, `clock_nan`; `replay/SCENARIOS.md`), and
//! the navigator closed-loop under them: no command keeps the robot moving
//! for more than the late allowance after the last frame it used
//! (`nav_core::trust`), and the demo still reaches its source.

use nav_core::decide::FrameDisposition;
use nav_core::trust::ClockConfig;
use replay::run::AnyNavigator;
use replay::sim::scenario::{FaultKind, Scenario};
use replay::sim::{MotionCommand, Sim};

const KETTLE: &str = include_str!("../../replay/src/sim/demos/hollow_kettle.toml");

const CLOCK_FAULTS: &str = r#"
[[fault]]
kind = "clock_jump"
at_s = 10.0
until_s = 10.05
jump_s = 1.0e6

[[fault]]
kind = "clock_stuck"
at_s = 15.0
until_s = 16.0

[[fault]]
kind = "clock_nan"
at_s = 20.0
until_s = 20.5

[[fault]]
kind = "clock_reset"
at_s = 30.0
"#;

fn kettle_with_clock_faults() -> Scenario {
    // The [[fault]] tables go before [start] so that they stay array
    // entries of the document root.
    let at = KETTLE.find("[start]").expect("demo has a [start] table");
    let text = format!("{}{}\n{}", &KETTLE[..at], CLOCK_FAULTS, &KETTLE[at..]);
    Scenario::from_toml_str(&text).expect("scenario with clock faults")
}

#[test]
fn clock_faults_parse_into_the_schedule() {
    let sc = kettle_with_clock_faults();
    let kinds: Vec<FaultKind> = sc.faults.iter().map(|f| f.kind).collect();
    assert!(kinds.contains(&FaultKind::ClockJump { jump_s: 1.0e6 }));
    assert!(kinds.contains(&FaultKind::ClockStuck));
    assert!(kinds.contains(&FaultKind::ClockNan));
    assert!(kinds.contains(&FaultKind::ClockReset));
    let bad = KETTLE.replace(
        "[start]",
        "[[fault]]\nkind = \"clock_jump\"\nat_s = 1.0\n\n[start]",
    );
    let e = Scenario::from_toml_str(&bad).expect_err("clock_jump needs jump_s");
    assert!(e.to_string().contains("jump_s"), "{e}");
}

#[test]
fn frames_carry_the_faulty_stamps() {
    let mut sim = Sim::new(kettle_with_clock_faults()).expect("sim");
    let stop = MotionCommand {
        heading_map: [1.0, 0.0, 0.0],
        speed_m_per_s: 0.0,
    };
    let mut stuck = None;
    while sim.time_s() < 31.0 {
        let t = sim.time_s();
        let stamp = sim.step(&stop).time_s;
        let t_now = sim.time_s();
        assert!(t_now > t);
        if (10.0..10.05).contains(&t_now) {
            assert!((stamp - (t_now + 1.0e6)).abs() < 1e-6, "{t_now}: {stamp}");
        } else if (15.0..16.0).contains(&t_now) {
            assert_eq!(stamp, *stuck.get_or_insert(stamp));
        } else if (20.0..20.5).contains(&t_now) {
            assert!(stamp.is_nan());
        } else if t_now >= 30.0 {
            assert!((stamp - (t_now - 30.0)).abs() < 1e-9, "{t_now}: {stamp}");
        } else {
            assert_eq!(stamp, t_now);
        }
    }
    assert!(stuck.is_some_and(|s| (15.0..15.02).contains(&s)));
}

#[test]
fn closed_loop_under_clock_faults_never_moves_on_untrusted_time_and_still_arrives() {
    let mut sim = Sim::new(kettle_with_clock_faults()).expect("sim");
    let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec()).expect("navigator");
    let limit = ClockConfig::DEFAULT.max_late_frames;
    let mut since_used = 0u32;
    let mut held_untrusted = 0u32;
    let mut frame = sim.frame().clone();
    let duration = sim.scenario().duration_s;
    loop {
        let cmd = nav.step(&frame).expect("frame fits");
        if matches!(
            cmd.record.frame,
            FrameDisposition::Used | FrameDisposition::PartlyRejected
        ) {
            since_used = 0;
        } else {
            since_used += 1;
            assert!(
                cmd.speed_m_per_s == 0.0 || since_used <= limit,
                "t = {} s: moving {since_used} frames after the last used frame: {cmd:?}",
                sim.time_s()
            );
            held_untrusted += u32::from(cmd.speed_m_per_s == 0.0);
        }
        if sim.outcome().reached_source || sim.time_s() > duration {
            break;
        }
        frame = sim
            .step(&MotionCommand {
                heading_map: cmd.heading_map,
                speed_m_per_s: cmd.speed_m_per_s,
            })
            .clone();
    }
    let o = sim.outcome();
    // The faults were felt: the jump, the stuck second (less the late
    // allowance), the NaN half second and the reset's re-anchor.
    assert!(held_untrusted > 100 + 50, "{held_untrusted} held frames");
    assert!(o.reached_source, "{o:?}");
    assert_eq!(o.wall_strikes, 0, "{o:?}");
}
