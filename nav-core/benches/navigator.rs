//! One navigator step at full map: a navigator driven along an invented
//! chain of conduit legs until its station ring, wall index and junction
//! table are full, then stepped from that state over recorded frames.
#[path = "../../tests/src/nav_scene.rs"]
mod nav_scene;

use criterion::{BatchSize, Criterion, criterion_group, criterion_main};
use nav_core::navigator::{NavConfig, Observation, StandardNavigator};
use nav_scene::{Rigid, Sim, chain_scene};
use std::hint::black_box;

fn bench(c: &mut Criterion) {
    let cfg = NavConfig::for_robot(0.1).validate().expect("valid");
    let mut nav = Box::new(StandardNavigator::new(cfg).expect("capacities"));
    let mut sim = Sim::new(chain_scene(24), [0.0; 3], Rigid::IDENTITY, 9, true);
    sim.wall_points = 32;
    // Drive until the map is full (8 junctions passed), then record frames.
    for _ in 0..60_000 {
        let o = sim.observe();
        let cmd = nav.step(&o);
        sim.apply(&cmd);
    }
    let mut frames: Vec<Observation> = Vec::with_capacity(512);
    let mut probe = nav.clone();
    for _ in 0..512 {
        let o = sim.observe();
        let cmd = probe.step(&o);
        sim.apply(&cmd);
        frames.push(o);
    }
    let mut k = 0usize;
    c.bench_function("navigator_step_full_map", |b| {
        b.iter_batched_ref(
            || {
                k = (k + 1) % frames.len();
                (nav.clone(), k)
            },
            |(n, k)| black_box(n.step(black_box(&frames[*k]))),
            BatchSize::SmallInput,
        )
    });
}

criterion_group!(navigator, bench);
criterion_main!(navigator);
