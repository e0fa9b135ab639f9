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
