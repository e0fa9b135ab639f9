use nav_core::navigator::{NavConfig, StandardNavigator};
use upcurrent_tests::nav_scene::*;

#[test]
fn debug_fork() {
    let scene = if std::env::var("CHAIN").is_ok() { chain_scene(6) } else { fork_scene(0.3, 40.0, &[
        ForkBranch { yaw_rad: 0.6, width_m: 0.5, dynamic_pressure_pa: 20.0, dead_end: false },
        ForkBranch { yaw_rad: -0.6, width_m: 0.5, dynamic_pressure_pa: 50.0, dead_end: true },
        ForkBranch { yaw_rad: 0.0, width_m: 0.2, dynamic_pressure_pa: 200.0, dead_end: false },
    ])};
    let cfg = NavConfig::for_robot(0.1).validate().unwrap();
    let mut nav = Box::new(StandardNavigator::new(cfg).unwrap());
    let mut sim = Sim::new(scene, if std::env::var("CHAIN").is_ok() {[1.0,0.0,0.0]} else {[-8.0, 0.05, 0.0]}, Rigid::IDENTITY, 1, true);
    let mut last = None;
    for i in 0..200000 {
        let o = sim.observe();
        let c = nav.step(&o);
        let key = (c.record.reason, nav_core::navigator::phase_code(&c.record.phase));
        if last != Some(key) || i % 500 == 0 {
            println!("{i} t={:.2} pos={:?} seg={} reason={:?} phase={:?} v={:.3} mode={:?} h={:?} standoff={:?}", sim.t, sim.pos, sim.current(), c.record.reason, c.record.phase, c.speed_m_per_s, c.mode, c.heading_map, c.record.standoff_m);
            if let Some(b) = &c.record.branch { println!("   branch {:?} {:?} {:?} {:?} resid={}", b.chosen, b.flux_kg_per_s, b.samples, b.status, b.continuity_residual); }
            last = Some(key);
        }
        sim.apply(&c);
        if sim.reached { println!("REACHED at {i} t={}", sim.t); break; }
    }
    println!("visited {:?} minclear {}", &sim.visited[..sim.visited_count], sim.min_clearance_m);
}
