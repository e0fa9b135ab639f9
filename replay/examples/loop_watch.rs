//! Closed loop with the simulator's truth printed beside the navigator's
//! decisions: a diagnosis aid for behaviour work (the trace of `replay run`
//! carries only what the robot knew).
//!
//! `cargo run --release -p replay --example loop_watch -- [input] [seed] [every] [t0 t1]`
//!
//! - `input`: a scenario file or `demo:<name>` (default `demo:saltpetre-drift`);
//! - `seed`: a seed, or `-` for the scenario's own;
//! - `every`: print one line every this many steps (default 500), and on
//!   every wall strike;
//! - `t0 t1`: also print every step between these times, with the true
//!   skin standoff (a nearest-wall query, slower).
//!
//! Each line: time, true head position, true conduit index, strikes so far (head stopped, or skin pressed past its compliance),
//! minimum true standoff so far, then the decision (reason, phase, speed,
//! channel states, navigator standoff and section radius, contacts this
//! frame, heading, ridge gradient, speed limit). The last line is the
//! simulator's outcome.

use replay::run::{AnyNavigator, build_sim};
use replay::sim::MotionCommand;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let a: Vec<String> = std::env::args().collect();
    let input = a
        .get(1)
        .cloned()
        .unwrap_or_else(|| "demo:saltpetre-drift".into());
    let seed = a.get(2).and_then(|s| s.parse().ok());
    let every: u64 = a.get(3).and_then(|s| s.parse().ok()).unwrap_or(500).max(1);
    let t0: f64 = a.get(4).and_then(|s| s.parse().ok()).unwrap_or(-1.0);
    let t1: f64 = a.get(5).and_then(|s| s.parse().ok()).unwrap_or(-1.0);
    let mut sim = build_sim(&input, seed)?;
    let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec())?;
    let mut frame = sim.frame().clone();
    let limit = sim.scenario().duration_s;
    let round = |x: f64| (x * 1000.0).round() / 1000.0;
    let mut step = 0u64;
    let mut strikes = 0;
    loop {
        let cmd = nav.step(&frame)?;
        let o = sim.outcome();
        let t = sim.true_state();
        let struck = o.wall_strikes + o.skin_overpress_events != strikes;
        let window = sim.time_s() >= t0 && sim.time_s() <= t1;
        if step.is_multiple_of(every) || struck || window {
            let p = t.head_position_m;
            if window {
                let skin = sim.walls().distance_m(p) - sim.scenario().robot.modules[0].radius_m;
                print!("so_true={skin:.4} ");
            }
            let r = &cmd.record;
            println!(
                "{:7.2} pos=({:6.2},{:6.2},{:5.2}) c={:?} strikes={} minso={:.3} | {:?} {:?} v={:.3} tac={:?} flow={:?} so={:?} sec={:?} nc={} hd=({:.2},{:.2},{:.2}) rg={:?} lim={:?}",
                sim.time_s(),
                p[0],
                p[1],
                p[2],
                t.conduit,
                o.wall_strikes + o.skin_overpress_events,
                o.min_standoff_m,
                r.reason,
                r.phase,
                cmd.speed_m_per_s,
                cmd.health.tactile,
                cmd.health.flow,
                r.standoff_m.map(round),
                r.section_radius_m.map(round),
                frame.contacts.len(),
                cmd.heading_map[0],
                cmd.heading_map[1],
                cmd.heading_map[2],
                r.ridge_gradient_per_m.map(round),
                r.speed_limit
            );
            strikes = o.wall_strikes + o.skin_overpress_events;
        }
        if o.reached_source {
            println!("reached the source at {:.2} s", sim.time_s());
            break;
        }
        if matches!(cmd.record.reason, nav_core::decide::ReasonCode::GaveUp) {
            println!("navigator gave up");
            break;
        }
        if sim.time_s() > limit {
            println!("time limit");
            break;
        }
        frame = sim
            .step(&MotionCommand {
                heading_map: cmd.heading_map,
                speed_m_per_s: cmd.speed_m_per_s,
            })
            .clone();
        step += 1;
    }
    println!("{:?}", sim.outcome());
    Ok(())
}
