//! Scratch: closed loop with truth printed (diagnosis only).
use replay::run::{AnyNavigator, build_sim};
use replay::sim::MotionCommand;
fn main() -> Result<(), Box<dyn std::error::Error>> {
    let a: Vec<String> = std::env::args().collect();
    let demo = a.get(1).cloned().unwrap_or("demo:saltpetre-drift".into());
    let seed = a.get(2).and_then(|s| s.parse().ok());
    let every: u64 = a.get(3).and_then(|s| s.parse().ok()).unwrap_or(500);
    let t0: f64 = a.get(4).and_then(|s| s.parse().ok()).unwrap_or(-1.0);
    let t1: f64 = a.get(5).and_then(|s| s.parse().ok()).unwrap_or(-1.0);
    let mut sim = build_sim(&demo, seed)?;
    let mut nav = AnyNavigator::new(sim.robot_spec(), &sim.gas_spec())?;
    let mut frame = sim.frame().clone();
    let limit = sim.scenario().duration_s;
    let mut step = 0u64;
    let mut strikes = 0;
    let mut acc = [0.0f64; 3];
    let mut nacc = 0.0;
    loop {
        let cmd = nav.step(&frame)?;
        let o = sim.outcome();
        if let Some(u) = cmd.record.upstream_map {
            let h = cmd.heading_map;
            let d = h[0] * u[0] + h[1] * u[1] + h[2] * u[2];
            for i in 0..3 {
                acc[i] += h[i] - d * u[i];
            }
            nacc += 1.0;
        }
        let t = sim.true_state();
        let st = o.wall_strikes != strikes;
        let win = sim.time_s() >= t0 && sim.time_s() <= t1;
        if step % every == 0 || st || win {
            let p = t.head_position_m;
            if win {
                let w = sim.walls().distance_m(t.head_position_m)
                    - sim.scenario().robot.modules[0].radius_m;
                print!("so_true={:.4} ", w);
            }
            println!(
                "{:7.2} pos=({:6.2},{:6.2},{:5.2}) c={:?} strikes={} minso={:.3} | {:?} {:?} v={:.3} tac={:?} flow={:?} so={:?} sec={:?} nc={} hd=({:.2},{:.2},{:.2}) rg={:?} lim={:?}",
                sim.time_s(),
                p[0],
                p[1],
                p[2],
                t.conduit,
                o.wall_strikes,
                o.min_standoff_m,
                cmd.record.reason,
                cmd.record.phase,
                cmd.speed_m_per_s,
                cmd.health.tactile,
                cmd.health.flow,
                cmd.record.standoff_m.map(|x| (x * 1000.0).round() / 1000.0),
                cmd.record
                    .section_radius_m
                    .map(|x| (x * 1000.0).round() / 1000.0),
                frame.contacts.len(),
                cmd.heading_map[0],
                cmd.heading_map[1],
                cmd.heading_map[2],
                cmd.record
                    .ridge_gradient_per_m
                    .map(|x| (x * 1000.0).round() / 1000.0),
                cmd.record.speed_limit
            );
            strikes = o.wall_strikes;
            let p = t.head_position_m;
            let q = |x: [f64; 3]| {
                let f = sim.world().sample(x);
                0.5 * f.density_kg_per_m3
                    * (f.velocity_m_per_s[0].powi(2)
                        + f.velocity_m_per_s[1].powi(2)
                        + f.velocity_m_per_s[2].powi(2))
            };
            let e = 0.01;
            let gy = (q([p[0], p[1] + e, p[2]]) - q([p[0], p[1] - e, p[2]])) / (2.0 * e) / q(p);
            let gz = (q([p[0], p[1], p[2] + e]) - q([p[0], p[1], p[2] - e])) / (2.0 * e) / q(p);
            if nacc > 0.0 {
                println!(
                    "      mean lateral heading ({:.3},{:.3},{:.3})  true rel grad y {:.3} z {:.3}",
                    acc[0] / nacc,
                    acc[1] / nacc,
                    acc[2] / nacc,
                    gy,
                    gz
                );
            }
            acc = [0.0; 3];
            nacc = 0.0;
        }
        if o.reached_source {
            println!("REACHED at {:.2}", sim.time_s());
            break;
        }
        if matches!(cmd.record.reason, nav_core::decide::ReasonCode::GaveUp) {
            println!("GAVE UP");
            break;
        }
        if sim.time_s() > limit {
            println!("TIME LIMIT");
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
