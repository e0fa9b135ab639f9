//! The fixed-capacity and the kiddo-backed wall indexes give identical
//! answers, ties and eviction included.
#![cfg(feature = "std")]

use nav_core::map::{KdWallIndex, LinearWallIndex, WallHit, WallIndex};
use proptest::prelude::*;

const CAP: usize = 48;

/// Coordinates on a coarse grid so that equal distances (ties) and
/// duplicate points are common.
fn grid_point() -> impl Strategy<Value = [f64; 3]> {
    [-6i32..6, -6i32..6, -3i32..3].prop_map(|v| v.map(|c| f64::from(c) * 0.25))
}

#[derive(Debug, Clone)]
enum Op {
    Insert([f64; 3]),
    Nearest([f64; 3]),
    Within([f64; 3], f64),
}

fn op() -> impl Strategy<Value = Op> {
    prop_oneof![
        4 => grid_point().prop_map(Op::Insert),
        1 => grid_point().prop_map(Op::Nearest),
        1 => (grid_point(), 0u8..12).prop_map(|(p, r)| Op::Within(p, f64::from(r) * 0.25)),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn linear_and_kd_agree(ops in prop::collection::vec(op(), 1..160)) {
        let mut a: LinearWallIndex<CAP> = LinearWallIndex::new();
        let mut b = KdWallIndex::with_capacity(CAP);
        let blank = WallHit { id: 0, dist_sq_m2: 0.0, point_m: [0.0; 3] };
        for op in ops {
            match op {
                Op::Insert(p) => prop_assert_eq!(a.insert(p), b.insert(p)),
                Op::Nearest(q) => prop_assert_eq!(a.nearest(q), b.nearest(q)),
                Op::Within(q, r) => {
                    let mut oa = [blank; 8];
                    let mut ob = [blank; 8];
                    let na = a.within(q, r, &mut oa);
                    let nb = b.within(q, r, &mut ob);
                    prop_assert_eq!(na, nb);
                    prop_assert_eq!(oa, ob);
                }
            }
            prop_assert_eq!(a.len(), b.len());
        }
    }
}

#[test]
fn ties_resolve_to_the_oldest_point_in_both() {
    let mut a: LinearWallIndex<8> = LinearWallIndex::new();
    let mut b = KdWallIndex::with_capacity(8);
    // Four points at distance 1 from the origin, inserted in this order.
    for p in [
        [0.0, 1.0, 0.0],
        [1.0, 0.0, 0.0],
        [0.0, -1.0, 0.0],
        [-1.0, 0.0, 0.0],
    ] {
        a.insert(p).unwrap();
        b.insert(p).unwrap();
    }
    assert_eq!(a.nearest([0.0; 3]).unwrap().id, 0);
    assert_eq!(b.nearest([0.0; 3]).unwrap().id, 0);
}

/// The nearest-query shortcut (candidates of the last full scan) answers
/// exactly as a full scan, hit for hit, bit for bit: a walk of small steps
/// through points on a grid (ties common), with insertions between; steps
/// up to 0.2 m so the nearest point often leaves the candidates (the test
/// fails if the shortcut ignores the distance moved).
fn brute_nearest(points: &[([f64; 3], u64)], q: [f64; 3]) -> Option<WallHit> {
    let mut best: Option<WallHit> = None;
    for &(p, id) in points {
        let h = WallHit {
            id,
            dist_sq_m2: nav_core::map::dist_sq(p, q),
            point_m: p,
        };
        if best.is_none_or(|b| h.before(&b)) {
            best = Some(h);
        }
    }
    best
}

#[derive(Debug, Clone)]
enum Walk {
    Insert([f64; 3]),
    Step([f64; 3]),
}

fn walk() -> impl Strategy<Value = Walk> {
    prop_oneof![
        1 => grid_point().prop_map(Walk::Insert),
        12 => [-20i32..20, -20i32..20, -20i32..20]
            .prop_map(|v| Walk::Step(v.map(|c| f64::from(c) * 0.01))),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn nearest_shortcut_equals_a_full_scan(
        seed in prop::collection::vec(grid_point(), 1..60),
        start in grid_point(),
        moves in prop::collection::vec(walk(), 1..300),
    ) {
        let mut a: LinearWallIndex<CAP> = LinearWallIndex::new();
        let mut kept: Vec<([f64; 3], u64)> = Vec::new();
        let add = |a: &mut LinearWallIndex<CAP>, kept: &mut Vec<([f64; 3], u64)>, p: [f64; 3]| {
            let id = a.insert(p).expect("finite");
            kept.push((p, id));
            if kept.len() > CAP {
                kept.remove(0);
            }
        };
        for p in seed {
            add(&mut a, &mut kept, p);
        }
        let mut q = start;
        for m in moves {
            match m {
                Walk::Insert(p) => add(&mut a, &mut kept, p),
                Walk::Step(d) => q = [q[0] + d[0], q[1] + d[1], q[2] + d[2]],
            }
            let got = a.nearest(q);
            let want = brute_nearest(&kept, q);
            prop_assert_eq!(got.map(|h| h.id), want.map(|h| h.id));
            prop_assert_eq!(
                got.map(|h| h.dist_sq_m2.to_bits()),
                want.map(|h| h.dist_sq_m2.to_bits())
            );
        }
    }
}
