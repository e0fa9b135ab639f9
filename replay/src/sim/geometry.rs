//! Conduit geometry: centreline pieces with linearly varying radius, the
//! union-of-tubes wall model, and a spatial hash for "which conduit is this
//! point in".
//!
//! Each conduit's centreline polyline is cut at its vertices and at its
//! radius-profile breakpoints into *pieces*; along a piece the radius varies
//! linearly. The solid wall is the boundary of the union of the pieces'
//! tubes; a point's *clearance* in a piece is `r(t) - rho` (radius at its
//! foot point minus its distance from the centreline, foot point clamped to
//! the piece), and its clearance in the network is the largest over pieces.
//! Positive means inside the conduits. Piece ends are closed by spheres, so
//! a dead end is capped by a hemisphere and a junction is the union of the
//! end spheres of the conduits meeting there.

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

use super::vec3::{self, V3};

/// One straight piece of a conduit's centreline.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Piece {
    /// Conduit index.
    pub conduit: u32,
    /// Start point, map frame, m.
    pub a: V3,
    /// Unit direction, from `a` toward the piece's far end.
    pub dir: V3,
    /// Length, m.
    pub len_m: f64,
    /// Station (arc length from the conduit's `from` node) of `a`, m.
    pub s0_m: f64,
    /// Radius at `a`, m.
    pub r_a_m: f64,
    /// Radius at the far end, m.
    pub r_b_m: f64,
}

impl Piece {
    /// Radius at distance `t` from `a`.
    #[inline]
    #[must_use]
    pub fn radius_at(&self, t: f64) -> f64 {
        if self.len_m > 0.0 {
            self.r_a_m + (self.r_b_m - self.r_a_m) * (t / self.len_m)
        } else {
            self.r_a_m
        }
    }
    /// `dr/ds` along the piece.
    #[inline]
    #[must_use]
    pub fn dr_ds(&self) -> f64 {
        if self.len_m > 0.0 {
            (self.r_b_m - self.r_a_m) / self.len_m
        } else {
            0.0
        }
    }
    /// Where `p` sits relative to this piece.
    #[inline]
    #[must_use]
    pub fn locate(&self, index: u32, p: V3) -> Hit {
        let ap = vec3::sub(p, self.a);
        let t = vec3::dot(ap, self.dir).clamp(0.0, self.len_m);
        let c = vec3::axpy(self.a, t, self.dir);
        let offset = vec3::sub(p, c);
        let rho = vec3::norm(offset);
        let r = self.radius_at(t);
        Hit {
            conduit: self.conduit,
            piece: index,
            t_m: t,
            station_m: self.s0_m + t,
            foot: c,
            offset,
            rho_m: rho,
            radius_m: r,
            clearance_m: r - rho,
        }
    }
}

/// Where a point sits relative to one piece.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Hit {
    /// Conduit index.
    pub conduit: u32,
    /// Piece index (into [`Geometry::pieces`]).
    pub piece: u32,
    /// Distance of the foot point along the piece, m.
    pub t_m: f64,
    /// Station of the foot point along the conduit, m.
    pub station_m: f64,
    /// Foot point on the centreline, map frame.
    pub foot: V3,
    /// Point minus foot point.
    pub offset: V3,
    /// Distance from the centreline, m.
    pub rho_m: f64,
    /// Conduit radius at the foot point, m.
    pub radius_m: f64,
    /// `radius - rho`: positive inside, m.
    pub clearance_m: f64,
}

/// A conduit as geometry.
#[derive(Debug, Clone, PartialEq)]
pub struct ConduitGeom {
    /// Index of the `from` node.
    pub from: usize,
    /// Index of the `to` node.
    pub to: usize,
    /// Centreline length, m.
    pub length_m: f64,
    /// Its pieces, as a range into [`Geometry::pieces`].
    pub pieces: core::ops::Range<usize>,
    /// Smallest radius along it, m.
    pub min_radius_m: f64,
    /// Largest radius along it, m.
    pub max_radius_m: f64,
}

/// Input for one conduit.
#[derive(Debug, Clone, PartialEq)]
pub struct ConduitShape {
    /// Node index at station 0.
    pub from: usize,
    /// Node index at the far end.
    pub to: usize,
    /// Centreline vertices, both end nodes included, map frame, m.
    pub centerline_m: Vec<V3>,
    /// Radius profile: `(fraction of centreline length, radius m)`, the
    /// fractions increasing from 0 to 1.
    pub radius_profile: Vec<(f64, f64)>,
}

/// Multiplicative hash for packed cell keys (deterministic, no seed).
#[derive(Debug, Default, Clone, Copy)]
pub struct CellHasher(u64);

impl Hasher for CellHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0.rotate_left(8) ^ u64::from(b)).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        }
    }
    fn write_u64(&mut self, x: u64) {
        self.0 = (x ^ (x >> 29)).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    }
}

type CellMap = HashMap<u64, (u32, u32), BuildHasherDefault<CellHasher>>;

/// How far outside a tube a query may be and still find that tube, m.
pub const QUERY_MARGIN_M: f64 = 0.6;

/// Most distinct conduits reported at one point by [`Geometry::hits_by_conduit`].
pub const MAX_HITS: usize = 8;

/// The network's geometry with its spatial hash.
#[derive(Debug, Clone)]
pub struct Geometry {
    /// All pieces, conduit by conduit.
    pub pieces: Vec<Piece>,
    /// Per-conduit summary.
    pub conduits: Vec<ConduitGeom>,
    cell_m: f64,
    cells: CellMap,
    cell_items: Vec<u32>,
}

#[inline]
fn cell_coord(x: f64, cell: f64) -> i64 {
    // Coordinates are bounded by the scenario check (|x| < 1e6 m), so the
    // float-to-int conversion is exact for the floor.
    #[allow(clippy::cast_possible_truncation)]
    let i = libm::floor(x / cell) as i64;
    i
}

#[inline]
fn cell_key(ix: i64, iy: i64, iz: i64) -> u64 {
    #[allow(clippy::cast_sign_loss)]
    let f = |v: i64| ((v + (1 << 20)) as u64) & 0x1F_FFFF;
    f(ix) | (f(iy) << 21) | (f(iz) << 42)
}

impl Geometry {
    /// Build from conduit shapes. Shapes must already be validated (at
    /// least two distinct vertices, positive radii, increasing fractions).
    #[must_use]
    pub fn new(shapes: &[ConduitShape]) -> Self {
        let mut pieces = Vec::new();
        let mut conduits = Vec::with_capacity(shapes.len());
        let mut max_r: f64 = 0.0;
        for (ci, sh) in shapes.iter().enumerate() {
            let start = pieces.len();
            // Cumulative stations of the vertices.
            let mut stations = Vec::with_capacity(sh.centerline_m.len());
            let mut s = 0.0;
            stations.push(0.0);
            for w in sh.centerline_m.windows(2) {
                s += vec3::dist(w[0], w[1]);
                stations.push(s);
            }
            let total = s;
            // Cut stations: vertices plus profile breakpoints.
            let mut cuts: Vec<f64> = stations.clone();
            for &(f, _) in &sh.radius_profile {
                cuts.push(f * total);
            }
            cuts.sort_by(f64::total_cmp);
            cuts.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
            let radius = |st: f64| profile_radius(&sh.radius_profile, st / total);
            let point = |st: f64| point_on_polyline(&sh.centerline_m, &stations, st);
            let conduit = u32::try_from(ci).unwrap_or(u32::MAX);
            let (mut rmin, mut rmax) = (f64::INFINITY, 0.0_f64);
            for w in cuts.windows(2) {
                let (s_a, s_b) = (w[0], w[1]);
                if s_b - s_a < 1e-9 {
                    continue;
                }
                let a = point(s_a);
                let b = point(s_b);
                let d = vec3::sub(b, a);
                let len = vec3::norm(d);
                let dir = vec3::unit(d).unwrap_or([1.0, 0.0, 0.0]);
                let (r_a, r_b) = (radius(s_a), radius(s_b));
                rmin = rmin.min(r_a).min(r_b);
                rmax = rmax.max(r_a).max(r_b);
                pieces.push(Piece {
                    conduit,
                    a,
                    dir,
                    len_m: len,
                    s0_m: s_a,
                    r_a_m: r_a,
                    r_b_m: r_b,
                });
            }
            max_r = max_r.max(rmax);
            conduits.push(ConduitGeom {
                from: sh.from,
                to: sh.to,
                length_m: total,
                pieces: start..pieces.len(),
                min_radius_m: rmin,
                max_radius_m: rmax,
            });
        }
        let cell_m = (2.0 * max_r + QUERY_MARGIN_M).max(0.5);
        let mut lists: Vec<(u64, u32)> = Vec::new();
        for (pi, p) in pieces.iter().enumerate() {
            let pi = u32::try_from(pi).unwrap_or(u32::MAX);
            let b = vec3::axpy(p.a, p.len_m, p.dir);
            let infl = p.r_a_m.max(p.r_b_m) + QUERY_MARGIN_M;
            let lo: Vec<i64> = (0..3)
                .map(|k| cell_coord(p.a[k].min(b[k]) - infl, cell_m))
                .collect();
            let hi: Vec<i64> = (0..3)
                .map(|k| cell_coord(p.a[k].max(b[k]) + infl, cell_m))
                .collect();
            for ix in lo[0]..=hi[0] {
                for iy in lo[1]..=hi[1] {
                    for iz in lo[2]..=hi[2] {
                        // Only cells the inflated capsule can reach.
                        let centre = [
                            (ix as f64 + 0.5) * cell_m,
                            (iy as f64 + 0.5) * cell_m,
                            (iz as f64 + 0.5) * cell_m,
                        ];
                        let h = p.locate(pi, centre);
                        let half_diag = 0.5 * cell_m * libm::sqrt(3.0);
                        if h.rho_m <= infl + half_diag {
                            lists.push((cell_key(ix, iy, iz), pi));
                        }
                    }
                }
            }
        }
        lists.sort_unstable();
        let mut cells = CellMap::default();
        let mut cell_items = Vec::with_capacity(lists.len());
        let mut i = 0;
        while i < lists.len() {
            let key = lists[i].0;
            let start = cell_items.len();
            while i < lists.len() && lists[i].0 == key {
                cell_items.push(lists[i].1);
                i += 1;
            }
            let s = u32::try_from(start).unwrap_or(u32::MAX);
            let n = u32::try_from(cell_items.len() - start).unwrap_or(u32::MAX);
            cells.insert(key, (s, n));
        }
        Self {
            pieces,
            conduits,
            cell_m,
            cells,
            cell_items,
        }
    }

    /// Pieces that may contain `p` or lie within [`QUERY_MARGIN_M`] of it.
    #[inline]
    #[must_use]
    pub fn candidates(&self, p: V3) -> &[u32] {
        let key = cell_key(
            cell_coord(p[0], self.cell_m),
            cell_coord(p[1], self.cell_m),
            cell_coord(p[2], self.cell_m),
        );
        match self.cells.get(&key) {
            Some(&(s, n)) => {
                let s = s as usize;
                &self.cell_items[s..s + n as usize]
            }
            None => &[],
        }
    }

    /// The piece in which `p` has the largest clearance (the "most inside"
    /// piece), or `None` when no conduit is near.
    #[inline]
    #[must_use]
    pub fn best_hit(&self, p: V3) -> Option<Hit> {
        let mut best: Option<Hit> = None;
        for &pi in self.candidates(p) {
            let h = self.pieces[pi as usize].locate(pi, p);
            if best.is_none_or(|b| h.clearance_m > b.clearance_m) {
                best = Some(h);
            }
        }
        best
    }

    /// Clearance of `p` in the network, m (positive inside); `-inf` when no
    /// conduit is near.
    #[inline]
    #[must_use]
    pub fn clearance_m(&self, p: V3) -> f64 {
        self.best_hit(p)
            .map_or(f64::NEG_INFINITY, |h| h.clearance_m)
    }

    /// The best hit in each distinct conduit near `p`, written into `out`
    /// (at most [`MAX_HITS`]); returns how many.
    #[inline]
    pub fn hits_by_conduit(&self, p: V3, out: &mut [Hit; MAX_HITS]) -> usize {
        let mut n = 0;
        for &pi in self.candidates(p) {
            let h = self.pieces[pi as usize].locate(pi, p);
            if let Some(slot) = out[..n].iter_mut().find(|o| o.conduit == h.conduit) {
                if h.clearance_m > slot.clearance_m {
                    *slot = h;
                }
            } else if n < MAX_HITS {
                out[n] = h;
                n += 1;
            }
        }
        n
    }

    /// Radius of conduit `c` at station `s` (clamped to the conduit), m.
    #[must_use]
    pub fn radius_at(&self, c: usize, s: f64) -> f64 {
        let p = self.piece_at(c, s);
        p.radius_at((s - p.s0_m).clamp(0.0, p.len_m))
    }

    /// Centreline point of conduit `c` at station `s` (clamped).
    #[must_use]
    pub fn point_at(&self, c: usize, s: f64) -> V3 {
        let p = self.piece_at(c, s);
        vec3::axpy(p.a, (s - p.s0_m).clamp(0.0, p.len_m), p.dir)
    }

    /// Unit tangent (toward increasing station) of conduit `c` at `s`.
    #[must_use]
    pub fn tangent_at(&self, c: usize, s: f64) -> V3 {
        self.piece_at(c, s).dir
    }

    /// The piece of conduit `c` holding station `s` (clamped).
    #[must_use]
    pub fn piece_at(&self, c: usize, s: f64) -> &Piece {
        let g = &self.conduits[c];
        let ps = &self.pieces[g.pieces.clone()];
        let idx = ps.partition_point(|p| p.s0_m <= s).saturating_sub(1);
        &ps[idx.min(ps.len() - 1)]
    }
}

/// Radius from a profile at fraction `f` (linear between breakpoints,
/// clamped at the ends).
#[must_use]
pub fn profile_radius(profile: &[(f64, f64)], f: f64) -> f64 {
    match profile {
        [] => 0.0,
        [(_, r)] => *r,
        _ => {
            let i = profile.partition_point(|&(x, _)| x <= f);
            if i == 0 {
                return profile[0].1;
            }
            if i >= profile.len() {
                return profile[profile.len() - 1].1;
            }
            let (f0, r0) = profile[i - 1];
            let (f1, r1) = profile[i];
            if f1 - f0 <= 0.0 {
                r1
            } else {
                r0 + (r1 - r0) * (f - f0) / (f1 - f0)
            }
        }
    }
}

fn point_on_polyline(pts: &[V3], stations: &[f64], s: f64) -> V3 {
    let i = stations.partition_point(|&x| x <= s);
    if i == 0 {
        return pts[0];
    }
    if i >= pts.len() {
        return pts[pts.len() - 1];
    }
    let (s0, s1) = (stations[i - 1], stations[i]);
    let f = if s1 > s0 { (s - s0) / (s1 - s0) } else { 0.0 };
    vec3::add(pts[i - 1], vec3::scale(vec3::sub(pts[i], pts[i - 1]), f))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bend() -> Geometry {
        Geometry::new(&[
            ConduitShape {
                from: 0,
                to: 1,
                centerline_m: vec![[0.0, 0.0, 0.0], [4.0, 0.0, 0.0], [4.0, 3.0, 0.0]],
                radius_profile: vec![(0.0, 0.5), (1.0, 0.3)],
            },
            ConduitShape {
                from: 1,
                to: 2,
                centerline_m: vec![[4.0, 3.0, 0.0], [4.0, 3.0, 5.0]],
                radius_profile: vec![(0.0, 0.3)],
            },
        ])
    }

    #[test]
    fn clearance_inside_outside_and_radius() {
        let g = bend();
        assert_eq!(g.conduits[0].length_m, 7.0);
        // Radius varies linearly 0.5 -> 0.3 over 7 m; at s = 3.5 it is 0.4.
        assert!((g.radius_at(0, 3.5) - 0.4).abs() < 1e-12);
        let c = g.clearance_m([2.0, 0.1, 0.0]);
        let r = 0.5 - 0.2 * 2.0 / 7.0;
        assert!((c - (r - 0.1)).abs() < 1e-12);
        assert!(g.clearance_m([2.0, 0.9, 0.0]) < 0.0);
        assert_eq!(g.clearance_m([50.0, 50.0, 50.0]), f64::NEG_INFINITY);
        // Inside the second (vertical) conduit.
        let h = g.best_hit([4.0, 3.1, 2.0]).unwrap();
        assert_eq!(h.conduit, 1);
        assert!((h.station_m - 2.0).abs() < 1e-12);
        assert!((h.clearance_m - 0.2).abs() < 1e-12);
    }

    #[test]
    fn hash_agrees_with_brute_force() {
        let g = bend();
        for i in 0..400 {
            let x = f64::from(i % 20) * 0.3 - 0.5;
            let y = f64::from((i / 20) % 20) * 0.2 - 0.5;
            let p = [x, y, f64::from(i % 7) * 0.3];
            let brute = g
                .pieces
                .iter()
                .enumerate()
                .map(|(k, pc)| pc.locate(k as u32, p).clearance_m)
                .fold(f64::NEG_INFINITY, f64::max);
            let hashed = g.clearance_m(p);
            if brute > -QUERY_MARGIN_M {
                assert_eq!(hashed, brute, "at {p:?}");
            }
        }
    }
}
