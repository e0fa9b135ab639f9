use replay::sim::{demos, world::World};
fn main() {
    for (k, _) in demos::DEMOS {
        let sc = demos::demo(k).unwrap().unwrap();
        let t = std::time::Instant::now();
        let w = World::new(&sc).unwrap();
        println!("{k}: iters {} imbalance {:.2e} in {:?}", w.solution.iterations, w.solution.max_relative_imbalance, t.elapsed());
        for (i, c) in sc.conduits.iter().enumerate() {
            let l = &w.solution.links[i];
            println!("  {:14} m={:10.5} Re={:9.0} {:?} shock={:?}", c.id, l.mass_flow_kg_per_s, l.max_reynolds, l.regime, l.nozzle.as_ref().map(|n| (n.choked, n.shock)));
        }
        for (i, n) in sc.nodes.iter().enumerate() { println!("  node {:14} p={:.3}", n.id, w.solution.node_pressure_pa[i]); }
        let s = w.sample(sc.start.position_m);
        println!("  start sample {:?}", s);
    }
}
