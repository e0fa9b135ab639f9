use replay::sim::{Oracle, Sim};
fn main() {
    let key = std::env::args().nth(1).unwrap_or("hollow-kettle".into());
    let mut sim = Sim::from_demo(&key).unwrap();
    let mut o = Oracle::patrol(&sim);
    for i in 0..30000 { let c = o.command(&sim); sim.step(&c); if i % 500 == 0 { let h = sim.true_state(); println!("{:.1} {:?} back={} conduit={:?} tail={:?}", sim.time_s(), h.head_position_m.map(|x| (x*100.0).round()/100.0), o.is_backing(), h.conduit, sim.body().origins.last().unwrap().map(|x| (x*100.0).round()/100.0)); } }
}
