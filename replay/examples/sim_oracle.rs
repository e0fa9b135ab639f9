//! Drive every built-in demo with the truth-following oracle and print the
//! outcome of each run.
//!
//! `cargo run --release -p replay --example sim_oracle`

use replay::sim::{Oracle, Sim, demos};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    for (key, _) in demos::DEMOS {
        let t0 = std::time::Instant::now();
        let mut sim = Sim::from_demo(key)?;
        let build = t0.elapsed();
        let mut oracle = Oracle::new(&sim);
        let limit = (sim.scenario().duration_s / sim.time_step_s()).round() as u64;
        let mut contacts = 0u64;
        let mut frames = 0u64;
        let t1 = std::time::Instant::now();
        for _ in 0..limit {
            let cmd = oracle.command(&sim);
            let f = sim.step(&cmd);
            contacts += f.contacts.len() as u64;
            frames += 1;
            if sim.outcome().reached_source {
                break;
            }
        }
        let run = t1.elapsed();
        let o = sim.outcome();
        println!(
            "{key}: build {:.3} s ({} wall samples), {frames} frames in {:.3} s, contacts {contacts}",
            build.as_secs_f64(),
            sim.walls().len(),
            run.as_secs_f64()
        );
        println!("  {o:?}");
        println!("  true head {:?}", sim.true_state().head_position_m);
    }
    Ok(())
}
