//! One whole frame-level step (`FrameNavigator::step`: probe solve,
//! tactile ingest, the staggered section fit and openings, decision) on a
//! warm navigator with a full map.
//!
//! Scenario (our own, `tests/src/frame_scene.rs`): the step-cost traverse,
//! an 8-module, 32-pad robot with a 7-port probe pressed onto the wall of
//! a winding, narrowing conduit and rocking as it crawls up it at 0.1 m/s
//! and 100 Hz. The navigator (`CostFrameNavigator`, 65 256 bytes) is
//! driven for 12 000 frames first, which fills its station ring, wall
//! index and tactile ring; criterion then times consecutive steps of the
//! same live stream (each frame is made outside the timed region), so
//! every timed step is a real next frame, a quarter of them with a
//! section fit.
//!
//! Run: `cargo bench -p nav-core --bench frame_step`.
#[path = "../../tests/src/nav_scene.rs"]
mod nav_scene;

#[path = "../../tests/src/frame_scene.rs"]
mod frame_scene;

use criterion::{Criterion, criterion_group, criterion_main};
use frame_scene::{CostFrameNavigator, FrameScene};
use nav_core::frame::SensorFrame;
use nav_core::map::WallIndex;
use nav_core::onboard::FrameNavigator;
use std::hint::black_box;
use std::time::{Duration, Instant};

type Frame = SensorFrame<7, 7, 32>;

fn bench(c: &mut Criterion) {
    let mut scene = FrameScene::winding(7);
    let cfg = scene.onboard_config::<8, 32>();
    let mut nav: Box<CostFrameNavigator> =
        Box::new(FrameNavigator::new(cfg).expect("valid onboard config"));
    for _ in 0..12_000 {
        let f: Frame = scene.next_frame();
        black_box(nav.step(&f));
    }
    let map = nav.navigator().map();
    assert_eq!(map.stations.len(), map.stations.capacity(), "stations full");
    assert_eq!(map.walls.len(), map.walls.capacity(), "wall index full");
    assert_eq!(nav.tactile().len(), 128, "tactile ring full");
    c.bench_function("frame_step_full_map", |b| {
        b.iter_custom(|iters| {
            let mut spent = Duration::ZERO;
            for _ in 0..iters {
                let f: Frame = scene.next_frame();
                let t0 = Instant::now();
                black_box(nav.step(black_box(&f)));
                spent += t0.elapsed();
            }
            spent
        })
    });
}

criterion_group!(frame_step, bench);
criterion_main!(frame_step);
