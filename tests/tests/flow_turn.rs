//! Junctions seen through the flow, in closed loop (`nav_core::flow_turn`).
//!
//! Generated fork worlds have conduits several body widths across, where
//! the skin touches nothing at the junction and no opening is ever felt.
//! Run closed loop on seeds 1 to 3, the navigator's map must hold a
//! junction seen through the flow near the true fork node in at least two
//! of them, and every such record must carry the branch followed first and
//! the guesses after it. Without the flow-turn watch no junction is
//! recorded in any of them.

use nav_core::map::BranchOrigin;
use replay::run::{AnyNavigator, build_sim};
use replay::sim::MotionCommand;

fn dist(a: [f64; 3], b: [f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

#[test]
fn fork_junctions_in_wide_conduits_are_recorded_from_the_flow() {
    let mut near_fork = 0;
    for seed in 1..=3 {
        let mut sim = build_sim("world:fork", Some(seed)).expect("world");
        let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec()).expect("navigator");
        let sc = sim.scenario().clone();
        let fork = sc
            .nodes
            .iter()
            .find(|n| n.id == "fork")
            .expect("a fork node")
            .position_m;
        let mut frame = sim.frame().clone();
        let mut flow_records = 0;
        while sim.time_s() <= sc.duration_s && !sim.outcome().reached_source {
            let cmd = nav.step(&frame).expect("step");
            if let Some(b) = cmd.record.branch.filter(|b| b.seen_by_flow) {
                flow_records += 1;
                assert_eq!(b.origin[0], BranchOrigin::Followed, "seed {seed}: {b:?}");
                for o in b.origin.iter().take(usize::from(b.count)).skip(1) {
                    assert_eq!(*o, BranchOrigin::Guessed, "seed {seed}: {b:?}");
                }
            }
            if matches!(cmd.record.reason, nav_core::decide::ReasonCode::GaveUp) {
                break;
            }
            frame = sim
                .step(&MotionCommand {
                    heading_map: cmd.heading_map,
                    speed_m_per_s: cmd.speed_m_per_s,
                })
                .clone();
        }
        let marks = nav.snapshot().junctions;
        if flow_records > 0 && marks.iter().any(|m| dist(m.position_m, fork) <= 2.0) {
            near_fork += 1;
        }
    }
    assert!(
        near_fork >= 2,
        "{near_fork} of 3 fork worlds recorded the fork"
    );
}
