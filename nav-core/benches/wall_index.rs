//! Wall index query time: fixed-capacity linear scan versus kiddo, at 256,
//! 4,096 and 65,536 points (wall points on a wavy tube, queries near its
//! axis).
use criterion::{BenchmarkId, Criterion, criterion_group, criterion_main};
use nav_core::map::{KdWallIndex, LinearWallIndex, WallIndex};
use std::hint::black_box;

fn tube_point(i: usize) -> [f64; 3] {
    let k = i as f64;
    let s = k * 0.01; // along the axis
    let a = k * 2.399_963; // golden-angle spiral around it
    [
        s,
        0.3 * libm::cos(a) + 0.2 * libm::sin(0.1 * s),
        0.3 * libm::sin(a),
    ]
}

fn fill<I: WallIndex>(idx: &mut I, n: usize) {
    for i in 0..n {
        let _ = idx.insert(tube_point(i));
    }
}

fn query(i: usize, n: usize) -> [f64; 3] {
    let s = ((i * 7919) % n) as f64 * 0.01;
    [s, 0.2 * libm::sin(0.1 * s), 0.05]
}

fn bench_n<const N: usize>(c: &mut Criterion) {
    let mut g = c.benchmark_group("wall_index_nearest");
    let mut lin: Box<LinearWallIndex<N>> = Box::new(LinearWallIndex::new());
    fill(lin.as_mut(), N);
    let mut kd = KdWallIndex::with_capacity(N);
    fill(&mut kd, N);
    let mut i = 0usize;
    g.bench_with_input(BenchmarkId::new("linear", N), &N, |b, _| {
        b.iter(|| {
            i = i.wrapping_add(1);
            black_box(lin.nearest(black_box(query(i, N))))
        })
    });
    g.bench_with_input(BenchmarkId::new("kiddo", N), &N, |b, _| {
        b.iter(|| {
            i = i.wrapping_add(1);
            black_box(kd.nearest(black_box(query(i, N))))
        })
    });
    g.finish();
}

fn benches(c: &mut Criterion) {
    bench_n::<256>(c);
    bench_n::<4096>(c);
    bench_n::<65536>(c);
}

criterion_group!(wall, benches);
criterion_main!(wall);
