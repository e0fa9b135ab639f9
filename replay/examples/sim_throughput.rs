//! Simulator throughput: at least one hour of robot time at 100 Hz in the
//! Hollow Kettle steam scenario, sensors and flow field only (no
//! navigator): the truth-following oracle in patrol mode drives the robot
//! to the source, backs it out to the start and goes in again, so the robot
//! keeps moving; every frame is produced and dropped (nothing is kept, so
//! memory does not grow with the traverse).
//!
//! `cargo run --release -p replay --example sim_throughput [-- <hours>]`
//!
//! Last line: `sim_throughput frames=<n> frames_per_s=<x> realtime_factor=<y> peak_rss_mb=<z>`
//! (peak RSS is `VmHWM` from `/proc/self/status`).

use replay::run::peak_rss_mb;
use replay::sim::{Oracle, Sim};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let hours: f64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(1.0);
    let mut sim = Sim::from_demo("hollow-kettle")?;
    let dt = sim.time_step_s();
    let frames = (hours * 3600.0 / dt).round() as u64;
    let mut oracle = Oracle::patrol(&sim);
    let mut checksum = 0.0;
    let mut contacts = 0u64;
    let rss_start = peak_rss_mb();
    let t0 = std::time::Instant::now();
    let mut backing = 0u64;
    for i in 0..frames {
        let cmd = oracle.command(&sim);
        let f = sim.step(&cmd);
        if let Some(p) = &f.port_pressures_pa {
            checksum += p[0];
        }
        contacts += f.contacts.len() as u64;
        if oracle.is_backing() {
            backing += 1;
        }
        if i + 1 == frames / 10 {
            println!("after {} frames: peak_rss_mb={:.1}", i + 1, peak_rss_mb());
        }
    }
    let wall = t0.elapsed().as_secs_f64();
    let o = sim.outcome();
    println!(
        "scenario: {} ({} s simulated at {} Hz)",
        sim.scenario().name,
        frames as f64 * dt,
        1.0 / dt
    );
    println!(
        "outcome: reached={} at {:?} s, distance {:.2} m, held {:.1} s, strikes {}, min standoff {:.4} m",
        o.reached_source,
        o.reached_at_s,
        o.distance_travelled_m,
        o.time_held_s,
        o.wall_strikes,
        o.min_standoff_m
    );
    println!(
        "frames backing out {backing} ({:.0} %)",
        100.0 * backing as f64 / frames as f64
    );
    println!(
        "contacts {contacts}, mean tip pressure {:.1} Pa, peak_rss_mb at start {rss_start:.1}",
        checksum / frames as f64
    );
    let fps = frames as f64 / wall;
    println!(
        "sim_throughput frames={frames} frames_per_s={fps:.0} realtime_factor={:.0} peak_rss_mb={:.1}",
        fps * dt,
        peak_rss_mb()
    );
    Ok(())
}
