//! The bounded local map: stations along the travelled path, junction
//! records with their candidate branches, and a wall point store behind one
//! index trait ([`WallIndex`]).
//!
//! Everything here has a fixed capacity chosen by const generics: `S`
//! stations, `W` wall points, `JN` junctions, and [`MAX_BRANCHES`] branches
//! per junction.
//!
//! ## The rule for old stations
//! Stations form a ring: when it is full the *oldest* station is dropped.
//! A station that anchors a junction is not lost with it: every
//! [`Junction`] keeps its own summary of the anchor (position, time, trunk
//! direction, trunk clear radius, trunk mass-flux proxy), so back-out to a
//! junction whose anchor station was dropped retraces the stations that
//! remain and then heads straight for the stored anchor position. When the
//! junction table is full, the oldest junction record is dropped; a
//! back-out that would have needed it gives up cleanly.
//!
//! ## Wall index ties
//! Every wall point gets an id from a counter at insertion (0, 1, 2, ...).
//! Distances are squared Euclidean, computed by [`dist_sq`] in one fixed
//! order. `nearest` returns the point with the smallest `(dist_sq, id)`
//! pair; `within` is inclusive (`dist_sq <= r * r`) and returns hits sorted
//! by `(dist_sq, id)`. Both implementations evict the oldest point (lowest
//! id) when full. So any two implementations give identical answers,
//! ties included.

use crate::frame::HeadPose;

/// Branches per junction (and openings per wall observation).
pub const MAX_BRANCHES: usize = 6;

// ---------------------------------------------------------------- vectors

/// `a + b`.
#[must_use]
pub fn add(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}
/// `a - b`.
#[must_use]
pub fn sub(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
/// `s * a`.
#[must_use]
pub fn scale(a: [f64; 3], s: f64) -> [f64; 3] {
    [a[0] * s, a[1] * s, a[2] * s]
}
/// `a . b`.
#[must_use]
pub fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
/// Euclidean length.
#[must_use]
pub fn norm(a: [f64; 3]) -> f64 {
    libm::sqrt(dot(a, a))
}
/// Unit vector along `a`, or `None` when `a` is (nearly) zero or not finite.
#[must_use]
pub fn unit(a: [f64; 3]) -> Option<[f64; 3]> {
    let n = norm(a);
    if n.is_finite() && n > 1e-12 {
        Some(scale(a, 1.0 / n))
    } else {
        None
    }
}
/// Squared distance, summed in axis order x, y, z (the order both wall
/// indexes use, so their answers agree bit for bit).
#[must_use]
pub fn dist_sq(a: [f64; 3], b: [f64; 3]) -> f64 {
    let dx = a[0] - b[0];
    let dy = a[1] - b[1];
    let dz = a[2] - b[2];
    dx * dx + dy * dy + dz * dz
}
/// Component of `a` perpendicular to unit `u`.
#[must_use]
pub fn reject(a: [f64; 3], u: [f64; 3]) -> [f64; 3] {
    sub(a, scale(u, dot(a, u)))
}
/// All three components finite.
#[must_use]
pub fn finite3(a: [f64; 3]) -> bool {
    a.iter().all(|v| v.is_finite())
}

// ------------------------------------------------------------- wall index

/// One answer of a wall index query.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WallHit {
    /// Id the point got at insertion.
    pub id: u64,
    /// Squared distance to the query point, m^2.
    pub dist_sq_m2: f64,
    /// The point, map frame, m.
    pub point_m: [f64; 3],
}

impl WallHit {
    /// `(dist_sq, id)` ordering: true when `self` comes before `other`.
    #[must_use]
    pub fn before(&self, other: &Self) -> bool {
        precedes(self.dist_sq_m2, self.id, other.dist_sq_m2, other.id)
    }
}

/// The `(dist_sq, id)` order of wall hits: nearer first, then older.
fn precedes(d: f64, id: u64, other_d: f64, other_id: u64) -> bool {
    d < other_d || (d == other_d && id < other_id)
}

/// Why a wall point was not stored.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WallIndexError {
    /// A coordinate was not finite.
    NonFinite,
    /// The index has zero capacity.
    ZeroCapacity,
}

/// A store of wall points (map frame) with nearest and radius queries.
/// See the module doc for the tie-breaking and eviction rules every
/// implementation must follow.
pub trait WallIndex {
    /// Points held.
    fn len(&self) -> usize;
    /// True when empty.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Insert a point, evicting the oldest when full; returns its id.
    ///
    /// # Errors
    /// [`WallIndexError`] when the point is not finite or there is no room
    /// at all.
    fn insert(&mut self, point_m: [f64; 3]) -> Result<u64, WallIndexError>;
    /// The point with the smallest `(dist_sq, id)`, or `None` when empty.
    fn nearest(&self, query_m: [f64; 3]) -> Option<WallHit>;
    /// Points with `dist_sq <= radius^2`, sorted by `(dist_sq, id)`; the
    /// first `out.len()` of them are written to `out`. Returns how many
    /// matched in total (may exceed `out.len()`).
    fn within(&self, query_m: [f64; 3], radius_m: f64, out: &mut [WallHit]) -> usize;
}

/// Insert `hit` into the sorted prefix `out[..*filled]`, keeping at most
/// `out.len()` entries.
fn insert_sorted(out: &mut [WallHit], filled: &mut usize, hit: WallHit) {
    let cap = out.len();
    let n = *filled;
    // Position: first entry that `hit` comes before.
    let mut pos = n;
    for (i, h) in out.iter().enumerate().take(n) {
        if hit.before(h) {
            pos = i;
            break;
        }
    }
    if pos >= cap {
        return;
    }
    let last = if n < cap { n } else { cap - 1 };
    if let Some(tail) = out.get_mut(pos..=last) {
        tail.rotate_right(1);
    }
    if let Some(slot) = out.get_mut(pos) {
        *slot = hit;
    }
    if n < cap {
        *filled = n + 1;
    }
}

/// Fixed-capacity wall index for `no_std`: a ring of `N` points searched
/// linearly. Work per query is `O(N)` (plus `O(N k)` for `within` with `k`
/// output slots), with no allocation.
///
/// `nearest` keeps the [`NEAR_CANDIDATES`] nearest slots of its last full
/// scan and the distance of the next one out. A later query a distance
/// `delta` away answers from those candidates alone when the best of them
/// is nearer than that outside distance less `delta` (no other point can
/// then be as near: triangle inequality), so the answer is exactly the full
/// scan's; otherwise, and after any insertion, it scans again.
#[derive(Debug, Clone)]
pub struct LinearWallIndex<const N: usize> {
    points: [[f64; 3]; N],
    ids: [u64; N],
    len: usize,
    /// Slot the next insertion writes (the oldest point when full).
    next: usize,
    next_id: u64,
    near: core::cell::Cell<Option<NearCache>>,
}

/// Candidates `LinearWallIndex::nearest` keeps from a full scan.
pub const NEAR_CANDIDATES: usize = 8;

/// The last full nearest scan: where it was asked, its nearest slots, and
/// the distance of the nearest point left out.
#[derive(Debug, Clone, Copy)]
struct NearCache {
    query_m: [f64; 3],
    slots: [u32; NEAR_CANDIDATES],
    count: u8,
    outside_m: f64,
}

/// Rounding allowance in the candidate test, m.
const NEAR_SLACK_M: f64 = 1e-9;

impl<const N: usize> Default for LinearWallIndex<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> LinearWallIndex<N> {
    /// Empty index.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            points: [[0.0; 3]; N],
            ids: [0; N],
            len: 0,
            next: 0,
            next_id: 0,
            near: core::cell::Cell::new(None),
        }
    }

    /// Capacity `N`.
    #[must_use]
    pub const fn capacity(&self) -> usize {
        N
    }
}

impl<const N: usize> WallIndex for LinearWallIndex<N> {
    fn len(&self) -> usize {
        self.len
    }

    fn insert(&mut self, point_m: [f64; 3]) -> Result<u64, WallIndexError> {
        if !finite3(point_m) {
            return Err(WallIndexError::NonFinite);
        }
        let id = self.next_id;
        let slot = self.next;
        self.near.set(None);
        match (self.points.get_mut(slot), self.ids.get_mut(slot)) {
            (Some(p), Some(i)) => {
                *p = point_m;
                *i = id;
            }
            _ => return Err(WallIndexError::ZeroCapacity),
        }
        self.next_id = self.next_id.wrapping_add(1);
        self.next = if slot + 1 >= N { 0 } else { slot + 1 };
        if self.len < N {
            self.len += 1;
        }
        Ok(id)
    }

    fn nearest(&self, q: [f64; 3]) -> Option<WallHit> {
        let better = |d: f64, id: u64, b: Option<(f64, u64, usize)>| {
            b.is_none_or(|(bd, bid, _)| precedes(d, id, bd, bid))
        };
        let at = |k: usize| Some((*self.points.get(k)?, *self.ids.get(k)?));
        if let Some(c) = self.near.get() {
            let delta = libm::sqrt(dist_sq(q, c.query_m));
            let mut best: Option<(f64, u64, usize)> = None;
            for &slot in c.slots.iter().take(usize::from(c.count)) {
                let k = usize::try_from(slot).unwrap_or(usize::MAX);
                if let Some((p, id)) = at(k) {
                    let d = dist_sq(p, q);
                    if better(d, id, best) {
                        best = Some((d, id, k));
                    }
                }
            }
            if let Some((d, id, k)) = best
                && libm::sqrt(d) + delta < c.outside_m - NEAR_SLACK_M
            {
                return at(k).map(|(p, _)| WallHit {
                    id,
                    dist_sq_m2: d,
                    point_m: p,
                });
            }
        }
        // Full scan, keeping the nearest NEAR_CANDIDATES + 1 in order.
        let mut keep = [(f64::INFINITY, u64::MAX, 0usize); NEAR_CANDIDATES + 1];
        let mut filled = 0usize;
        for (k, (p, &id)) in self
            .points
            .iter()
            .zip(self.ids.iter())
            .take(self.len)
            .enumerate()
        {
            let d = dist_sq(*p, q);
            let worst = keep.get(NEAR_CANDIDATES).copied();
            if filled > NEAR_CANDIDATES
                && worst.is_some_and(|(wd, wid, _)| !precedes(d, id, wd, wid))
            {
                continue;
            }
            // Insertion into the sorted prefix.
            let mut pos = filled.min(NEAR_CANDIDATES);
            while pos > 0 {
                let Some(&(pd, pid, pk)) = keep.get(pos - 1) else {
                    break;
                };
                if precedes(d, id, pd, pid) {
                    if let Some(slot) = keep.get_mut(pos) {
                        *slot = (pd, pid, pk);
                    }
                    pos -= 1;
                } else {
                    break;
                }
            }
            if let Some(slot) = keep.get_mut(pos) {
                *slot = (d, id, k);
            }
            filled = (filled + 1).min(NEAR_CANDIDATES + 1);
        }
        let &(d, id, k) = keep.first().filter(|_| filled > 0)?;
        let count = filled.min(NEAR_CANDIDATES);
        let mut slots = [0u32; NEAR_CANDIDATES];
        let mut ok = true;
        for (s, e) in slots.iter_mut().zip(keep.iter()).take(count) {
            match u32::try_from(e.2) {
                Ok(v) => *s = v,
                Err(_) => ok = false,
            }
        }
        let outside_m = if filled > NEAR_CANDIDATES {
            keep.get(NEAR_CANDIDATES)
                .map_or(f64::INFINITY, |e| libm::sqrt(e.0))
        } else {
            f64::INFINITY
        };
        self.near.set(ok.then_some(NearCache {
            query_m: q,
            slots,
            count: u8::try_from(count).unwrap_or(0),
            outside_m,
        }));
        at(k).map(|(p, _)| WallHit {
            id,
            dist_sq_m2: d,
            point_m: p,
        })
    }

    fn within(&self, q: [f64; 3], radius_m: f64, out: &mut [WallHit]) -> usize {
        let r2 = radius_m * radius_m;
        let mut total = 0usize;
        let mut filled = 0usize;
        for (p, id) in self.points.iter().zip(self.ids.iter()).take(self.len) {
            let d = dist_sq(*p, q);
            if d <= r2 {
                total += 1;
                insert_sorted(
                    out,
                    &mut filled,
                    WallHit {
                        id: *id,
                        dist_sq_m2: d,
                        point_m: *p,
                    },
                );
            }
        }
        total
    }
}

/// kiddo-backed wall index (host only): a k-d tree plus a FIFO of ids for
/// eviction. Same answers as [`LinearWallIndex`] of the same capacity.
#[cfg(feature = "std")]
#[derive(Debug)]
pub struct KdWallIndex {
    tree: kiddo::KdTree<f64, 3>,
    fifo: std::collections::VecDeque<([f64; 3], u64)>,
    capacity: usize,
    next_id: u64,
}

#[cfg(feature = "std")]
impl KdWallIndex {
    /// Empty index holding at most `capacity` points.
    #[must_use]
    pub fn with_capacity(capacity: usize) -> Self {
        Self {
            tree: kiddo::KdTree::with_capacity(capacity.max(1)),
            fifo: std::collections::VecDeque::with_capacity(capacity),
            capacity,
            next_id: 0,
        }
    }

    /// Every stored point within the (slightly widened) squared radius,
    /// re-measured with [`dist_sq`] and filtered exactly to `r2`.
    fn candidates(&self, q: [f64; 3], r2: f64) -> std::vec::Vec<WallHit> {
        // kiddo prunes with its own floating-point bounds; widen a little
        // so that no point within r2 by our measure can be missed, then
        // filter with our own distance.
        let wide = r2 * (1.0 + 1e-9) + 1e-300;
        let mut v: std::vec::Vec<WallHit> = self
            .tree
            .within_unsorted::<kiddo::SquaredEuclidean>(&q, wide)
            .into_iter()
            .filter_map(|n| {
                let p = self.point_of(n.item)?;
                let d = dist_sq(p, q);
                (d <= r2).then_some(WallHit {
                    id: n.item,
                    dist_sq_m2: d,
                    point_m: p,
                })
            })
            .collect();
        v.sort_by(|a, b| a.dist_sq_m2.total_cmp(&b.dist_sq_m2).then(a.id.cmp(&b.id)));
        v
    }

    fn point_of(&self, id: u64) -> Option<[f64; 3]> {
        let first = self.fifo.front()?.1;
        let k = usize::try_from(id.checked_sub(first)?).ok()?;
        self.fifo.get(k).map(|e| e.0)
    }
}

#[cfg(feature = "std")]
impl WallIndex for KdWallIndex {
    fn len(&self) -> usize {
        self.fifo.len()
    }

    fn insert(&mut self, point_m: [f64; 3]) -> Result<u64, WallIndexError> {
        if !finite3(point_m) {
            return Err(WallIndexError::NonFinite);
        }
        if self.capacity == 0 {
            return Err(WallIndexError::ZeroCapacity);
        }
        if self.fifo.len() >= self.capacity
            && let Some((p, id)) = self.fifo.pop_front()
        {
            self.tree.remove(&p, id);
        }
        let id = self.next_id;
        self.next_id = self.next_id.wrapping_add(1);
        self.tree.add(&point_m, id);
        self.fifo.push_back((point_m, id));
        Ok(id)
    }

    fn nearest(&self, q: [f64; 3]) -> Option<WallHit> {
        if self.fifo.is_empty() {
            return None;
        }
        let n = self.tree.nearest_one::<kiddo::SquaredEuclidean>(&q);
        let p = self.point_of(n.item)?;
        // kiddo's pick among equals is its own; re-query the ball through
        // it and apply our (dist_sq, id) order.
        self.candidates(q, dist_sq(p, q)).into_iter().next()
    }

    fn within(&self, q: [f64; 3], radius_m: f64, out: &mut [WallHit]) -> usize {
        let all = self.candidates(q, radius_m * radius_m);
        for (o, h) in out.iter_mut().zip(all.iter()) {
            *o = *h;
        }
        all.len()
    }
}

// --------------------------------------------------------------- sections

/// A cross-section estimate, as the tactile layer gives it (map frame).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Section {
    /// Nothing usable.
    Unknown,
    /// Too few contacts for a fit; the conduit is at least this wide.
    LowerBoundOnly {
        /// The conduit radius is at least this, m.
        min_radius_m: f64,
    },
    /// A circle fit.
    Circle {
        /// Centre, map frame, m.
        centre_m: [f64; 3],
        /// Radius, m.
        radius_m: f64,
        /// 1-sigma centre uncertainty (square root of the largest
        /// eigenvalue of the fit's centre covariance), m.
        centre_sigma_m: f64,
        /// 1-sigma radius uncertainty, m.
        radius_sigma_m: f64,
    },
}

impl Section {
    /// A radius usable for clear-area estimates: the fit radius, or the
    /// lower bound; `None` when unknown.
    #[must_use]
    pub fn usable_radius_m(&self) -> Option<f64> {
        match *self {
            Self::Unknown => None,
            Self::LowerBoundOnly { min_radius_m } => Some(min_radius_m),
            Self::Circle { radius_m, .. } => Some(radius_m),
        }
    }
}

/// A fused flow estimate in the map frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowEstimate {
    /// Velocity direction (where the gas moves), unit, map frame; `None`
    /// before the first valid observation.
    pub velocity_dir_map: Option<[f64; 3]>,
    /// Covariance of the direction estimate, map frame, rad^2 (small-angle).
    pub dir_cov: [[f64; 3]; 3],
    /// Dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Its variance, Pa^2.
    pub dynamic_pressure_var_pa2: f64,
    /// Gas density used for the mass-flux proxy, kg/m^3.
    pub density_kg_per_m3: f64,
}

impl FlowEstimate {
    /// No flow known.
    pub const NONE: Self = Self {
        velocity_dir_map: None,
        dir_cov: [[0.0; 3]; 3],
        dynamic_pressure_pa: 0.0,
        dynamic_pressure_var_pa2: 0.0,
        density_kg_per_m3: 0.0,
    };

    /// Trace of the direction covariance, rad^2.
    #[must_use]
    pub fn dir_var_rad2(&self) -> f64 {
        self.dir_cov[0][0] + self.dir_cov[1][1] + self.dir_cov[2][2]
    }
}

/// Mass-flux proxy `sqrt(2 rho q) * A`, kg/s: the mass flow through clear
/// area `A` of gas of density `rho` at dynamic pressure `q`, from the
/// definition of dynamic pressure `q = rho V^2 / 2` (Anderson, Fundamentals
/// of Aerodynamics, dynamic pressure) and `mdot = rho V A`. Zero for
/// non-positive inputs.
#[must_use]
pub fn mass_flux_proxy(density_kg_per_m3: f64, dynamic_pressure_pa: f64, area_m2: f64) -> f64 {
    if density_kg_per_m3 > 0.0 && dynamic_pressure_pa > 0.0 && area_m2 > 0.0 {
        libm::sqrt(2.0 * density_kg_per_m3 * dynamic_pressure_pa) * area_m2
    } else {
        0.0
    }
}

/// Clear area of a circular opening of width (diameter) `w`, m^2.
#[must_use]
pub fn disc_area_m2(width_m: f64) -> f64 {
    let r = 0.5 * width_m;
    core::f64::consts::PI * r * r
}

// --------------------------------------------------------------- stations

/// One station on the travelled path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Station {
    /// Sequence number (0 for the first station ever; never reused).
    pub seq: u32,
    /// Time, s.
    pub time_s: f64,
    /// Head position, map frame, m.
    pub position_m: [f64; 3],
    /// Head forward axis, map frame.
    pub forward_map: [f64; 3],
    /// Cross-section here.
    pub section: Section,
    /// Fused flow here.
    pub flow: FlowEstimate,
    /// Id of a junction anchored at this station.
    pub junction: Option<u16>,
    /// The station the robot came from (the path is a tree: after a
    /// back-out the next station links to the junction's anchor, not to
    /// the abandoned branch). `None` for the first station.
    pub prev_seq: Option<u32>,
}

impl Station {
    pub(crate) const EMPTY: Self = Self {
        seq: 0,
        time_s: 0.0,
        position_m: [0.0; 3],
        forward_map: [1.0, 0.0, 0.0],
        section: Section::Unknown,
        flow: FlowEstimate::NONE,
        junction: None,
        prev_seq: None,
    };
}

/// Ring of the last `S` stations.
#[derive(Debug, Clone)]
pub struct StationRing<const S: usize> {
    slots: [Station; S],
    len: usize,
    /// Slot of the oldest station.
    head: usize,
    next_seq: u32,
}

impl<const S: usize> Default for StationRing<S> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const S: usize> StationRing<S> {
    /// Empty ring.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            slots: [Station::EMPTY; S],
            len: 0,
            head: 0,
            next_seq: 0,
        }
    }
    /// Stations held.
    #[must_use]
    pub const fn len(&self) -> usize {
        self.len
    }
    /// True when empty.
    #[must_use]
    pub const fn is_empty(&self) -> bool {
        self.len == 0
    }
    /// Capacity `S`.
    #[must_use]
    pub const fn capacity(&self) -> usize {
        S
    }
    /// Push a station (its `seq` is assigned here); drops the oldest when
    /// full. Returns the new station's sequence number, or `None` when
    /// `S == 0`.
    pub fn push(&mut self, mut st: Station) -> Option<u32> {
        if S == 0 {
            return None;
        }
        st.seq = self.next_seq;
        let slot = (self.head + self.len) % S;
        if let Some(s) = self.slots.get_mut(slot) {
            *s = st;
        }
        if self.len < S {
            self.len += 1;
        } else {
            self.head = (self.head + 1) % S;
        }
        self.next_seq = self.next_seq.wrapping_add(1);
        Some(st.seq)
    }
    /// The newest station.
    #[must_use]
    pub fn newest(&self) -> Option<&Station> {
        if self.len == 0 || S == 0 {
            return None;
        }
        self.slots.get((self.head + self.len - 1) % S)
    }
    /// The oldest station.
    #[must_use]
    pub fn oldest(&self) -> Option<&Station> {
        if self.len == 0 {
            return None;
        }
        self.slots.get(self.head)
    }
    /// The station with sequence number `seq`, if still held.
    #[must_use]
    pub fn by_seq(&self, seq: u32) -> Option<&Station> {
        let oldest = self.oldest()?.seq;
        let k = usize::try_from(seq.checked_sub(oldest)?).ok()?;
        if k >= self.len || S == 0 {
            return None;
        }
        self.slots.get((self.head + k) % S)
    }
    /// Mutable access by sequence number.
    pub fn by_seq_mut(&mut self, seq: u32) -> Option<&mut Station> {
        let oldest = self.oldest()?.seq;
        let k = usize::try_from(seq.checked_sub(oldest)?).ok()?;
        if k >= self.len || S == 0 {
            return None;
        }
        self.slots.get_mut((self.head + k) % S)
    }
    /// Stations oldest first.
    pub fn iter(&self) -> impl Iterator<Item = &Station> {
        let (head, len) = (self.head, self.len);
        (0..len).filter_map(move |k| self.slots.get((head + k) % S.max(1)))
    }
}

// -------------------------------------------------------------- junctions

/// Why a branch was not chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum RejectReason {
    /// Clear width below robot diameter plus margin.
    TooNarrow {
        /// Estimated clear width, m.
        width_m: f64,
        /// Required width, m.
        required_m: f64,
    },
    /// It points back the way the robot came (the trunk downstream).
    CameFrom {
        /// Cosine between the branch direction and the trunk upstream
        /// direction.
        cos_to_upstream: f64,
    },
    /// Less flow than the chosen branch.
    WeakerFlow {
        /// This branch's mass-flux proxy, kg/s.
        flux_kg_per_s: f64,
        /// The chosen branch's, kg/s.
        chosen_flux_kg_per_s: f64,
    },
    /// Flow below the detection floor.
    NoFlow {
        /// This branch's mass-flux proxy, kg/s.
        flux_kg_per_s: f64,
    },
}

/// Why a branch was declared a dead end.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum DeadEndCause {
    /// Wall across the path.
    Blocked,
    /// Flow lost inside it.
    LostFlow,
    /// A throat narrower than the robot needs.
    ThroatTooNarrow,
}

/// Status of one candidate branch.
#[derive(Debug, Clone, Copy, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum BranchStatus {
    /// Not yet decided.
    Unexplored,
    /// Chosen and entered.
    Entered,
    /// Not chosen, with the reason.
    Rejected(RejectReason),
    /// Entered and found impassable.
    DeadEnd(DeadEndCause),
}

/// Flow evidence gathered for one branch (Welford running mean/variance).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FlowEvidence {
    /// Samples taken.
    pub samples: u32,
    /// Mean mass-flux proxy, kg/s.
    pub mean_flux_kg_per_s: f64,
    /// Sum of squared deviations, (kg/s)^2.
    pub m2: f64,
}

impl FlowEvidence {
    /// Add one sample (ignored when not finite).
    pub fn add(&mut self, flux: f64) {
        if !flux.is_finite() {
            return;
        }
        self.samples = self.samples.saturating_add(1);
        let n = f64::from(self.samples);
        let d = flux - self.mean_flux_kg_per_s;
        self.mean_flux_kg_per_s += d / n;
        self.m2 += d * (flux - self.mean_flux_kg_per_s);
    }
    /// Sample variance, (kg/s)^2 (0 with fewer than two samples).
    #[must_use]
    pub fn variance(&self) -> f64 {
        if self.samples < 2 {
            0.0
        } else {
            self.m2 / f64::from(self.samples - 1)
        }
    }
}

/// Where a candidate branch came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum BranchOrigin {
    /// An opening the skin felt in the wall (its width measured or
    /// bounded).
    Felt,
    /// The branch the flow led the robot into at a junction seen through
    /// the flow ([`crate::flow_turn`]); its width is unmeasured, the robot
    /// is in it.
    Followed,
    /// A direction the flow turn suggests but nothing measured: the mirror
    /// of the followed branch about the trunk axis, or straight on. Tried
    /// only after every measured branch, and given up at the first wall.
    Guessed,
}

/// One candidate branch of a junction.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Branch {
    /// Direction into the branch, unit, map frame.
    pub direction_map: [f64; 3],
    /// Centre of the branch mouth (where its axis leaves the junction),
    /// map frame, m; the latest observation.
    pub mouth_m: [f64; 3],
    /// Clear width estimate, m (mean of full measurements, else the
    /// largest lower bound seen).
    pub clear_width_m: f64,
    /// True while only lower bounds of the width have been seen.
    pub width_is_lower_bound: bool,
    /// Full width measurements averaged so far.
    pub width_samples: u16,
    /// Flow evidence.
    pub evidence: FlowEvidence,
    /// Status.
    pub status: BranchStatus,
    /// Where the candidate came from.
    pub origin: BranchOrigin,
}

impl Branch {
    const EMPTY: Self = Self {
        direction_map: [1.0, 0.0, 0.0],
        mouth_m: [0.0; 3],
        clear_width_m: 0.0,
        width_is_lower_bound: true,
        width_samples: 0,
        evidence: FlowEvidence {
            samples: 0,
            mean_flux_kg_per_s: 0.0,
            m2: 0.0,
        },
        status: BranchStatus::Unexplored,
        origin: BranchOrigin::Felt,
    };

    /// No width has been measured or bounded (a branch seen through the
    /// flow only).
    #[must_use]
    pub fn width_unmeasured(&self) -> bool {
        self.origin != BranchOrigin::Felt && self.width_is_lower_bound && self.clear_width_m <= 0.0
    }

    fn observe_width(&mut self, width_m: f64, lower_bound: bool) {
        if lower_bound {
            if self.width_is_lower_bound && width_m > self.clear_width_m {
                self.clear_width_m = width_m;
            }
        } else {
            if self.width_is_lower_bound {
                self.width_is_lower_bound = false;
                self.width_samples = 0;
                self.clear_width_m = 0.0;
            }
            self.width_samples = self.width_samples.saturating_add(1);
            let n = f64::from(self.width_samples);
            self.clear_width_m += (width_m - self.clear_width_m) / n;
        }
    }
}

/// A place where the conduit branches.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Junction {
    /// Id (from a counter; never reused).
    pub id: u16,
    /// Sequence number of the anchoring station.
    pub anchor_seq: u32,
    /// The anchoring station's predecessor (kept for back-out past this
    /// junction when the station itself was dropped).
    pub anchor_prev_seq: Option<u32>,
    /// Anchor position (summary kept when the station is dropped), m.
    pub anchor_position_m: [f64; 3],
    /// When the junction was first seen, s.
    pub anchor_time_s: f64,
    /// Trunk upstream direction on arrival, unit, map frame.
    pub trunk_upstream_map: [f64; 3],
    /// Trunk clear radius on arrival, m.
    pub trunk_radius_m: f64,
    /// Trunk mass-flux proxy on arrival, kg/s.
    pub trunk_flux_kg_per_s: f64,
    /// The junction the robot was in (inside a branch of) when this one
    /// was found.
    pub parent: Option<u16>,
    /// Candidate branches; the first `branch_count` are meaningful.
    pub branches: [Branch; MAX_BRANCHES],
    /// Number of candidates.
    pub branch_count: u8,
    /// The branch chosen, if any.
    pub chosen: Option<u8>,
    /// Seen through the flow (a turn of the upstream direction in a
    /// conduit too wide to feel across), not felt.
    pub seen_by_flow: bool,
}

impl Junction {
    const EMPTY: Self = Self {
        id: 0,
        anchor_seq: 0,
        anchor_prev_seq: None,
        anchor_position_m: [0.0; 3],
        anchor_time_s: 0.0,
        trunk_upstream_map: [1.0, 0.0, 0.0],
        trunk_radius_m: 0.0,
        trunk_flux_kg_per_s: 0.0,
        parent: None,
        branches: [Branch::EMPTY; MAX_BRANCHES],
        branch_count: 0,
        chosen: None,
        seen_by_flow: false,
    };

    /// A junction with no branches yet, anchored at `position_m` (station
    /// `anchor_seq`, whose predecessor is `anchor_prev_seq`) at `time_s`.
    #[must_use]
    pub fn new_at(
        position_m: [f64; 3],
        time_s: f64,
        anchor_seq: u32,
        anchor_prev_seq: Option<u32>,
    ) -> Self {
        Self {
            anchor_seq,
            anchor_prev_seq,
            anchor_position_m: position_m,
            anchor_time_s: time_s,
            ..Self::EMPTY
        }
    }

    /// The candidate branches.
    #[must_use]
    pub fn branches(&self) -> &[Branch] {
        let n = usize::from(self.branch_count).min(MAX_BRANCHES);
        self.branches.get(..n).unwrap_or(&[])
    }

    /// Branch `b`, mutable.
    pub fn branch_mut(&mut self, b: u8) -> Option<&mut Branch> {
        if b >= self.branch_count {
            return None;
        }
        self.branches.get_mut(usize::from(b))
    }

    /// Merge one observed opening: update the branch within
    /// `merge_cos` (cosine) of its direction, else add a branch if there is
    /// room. Returns the branch index.
    pub fn merge_opening(
        &mut self,
        direction_map: [f64; 3],
        mouth_m: [f64; 3],
        width_m: f64,
        lower_bound: bool,
        merge_cos: f64,
    ) -> Option<u8> {
        let dir = unit(direction_map)?;
        if !width_m.is_finite() || width_m < 0.0 || !finite3(mouth_m) {
            return None;
        }
        let mut best: Option<(usize, f64)> = None;
        for (k, b) in self.branches().iter().enumerate() {
            let c = dot(b.direction_map, dir);
            if c >= merge_cos && best.is_none_or(|(_, bc)| c > bc) {
                best = Some((k, c));
            }
        }
        let k = match best {
            Some((k, _)) => k,
            None => {
                let k = usize::from(self.branch_count);
                let slot = self.branches.get_mut(k)?;
                *slot = Branch::EMPTY;
                slot.direction_map = dir;
                self.branch_count = self.branch_count.saturating_add(1);
                k
            }
        };
        let b = self.branches.get_mut(k)?;
        b.mouth_m = mouth_m;
        b.observe_width(width_m, lower_bound);
        u8::try_from(k).ok()
    }
}

impl Junction {
    /// Add a branch seen through the flow (`origin` `Followed` or
    /// `Guessed`) in direction `direction_map` from `mouth_m`, unless one
    /// already lies within `merge_cos` of it or the table is full.
    /// Returns its index.
    pub fn add_unmeasured(
        &mut self,
        direction_map: [f64; 3],
        mouth_m: [f64; 3],
        origin: BranchOrigin,
        merge_cos: f64,
    ) -> Option<u8> {
        let dir = unit(direction_map)?;
        if !finite3(mouth_m)
            || self
                .branches()
                .iter()
                .any(|b| dot(b.direction_map, dir) >= merge_cos)
        {
            return None;
        }
        let k = usize::from(self.branch_count);
        let slot = self.branches.get_mut(k)?;
        *slot = Branch::EMPTY;
        slot.direction_map = dir;
        slot.mouth_m = mouth_m;
        slot.origin = origin;
        self.branch_count = self.branch_count.saturating_add(1);
        u8::try_from(k).ok()
    }
}

/// Table of the last `JN` junctions.
#[derive(Debug, Clone)]
pub struct JunctionTable<const JN: usize> {
    slots: [Junction; JN],
    used: [bool; JN],
    next_id: u16,
}

impl<const JN: usize> Default for JunctionTable<JN> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const JN: usize> JunctionTable<JN> {
    /// Empty table.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            slots: [Junction::EMPTY; JN],
            used: [false; JN],
            next_id: 0,
        }
    }
    /// Junctions held, in slot order.
    pub fn iter(&self) -> impl Iterator<Item = &Junction> {
        self.slots
            .iter()
            .zip(self.used.iter())
            .filter_map(|(j, u)| u.then_some(j))
    }
    /// Junction by id.
    #[must_use]
    pub fn get(&self, id: u16) -> Option<&Junction> {
        self.iter().find(|j| j.id == id)
    }
    /// Junction by id, mutable.
    pub fn get_mut(&mut self, id: u16) -> Option<&mut Junction> {
        self.slots
            .iter_mut()
            .zip(self.used.iter())
            .find_map(|(j, u)| (*u && j.id == id).then_some(j))
    }
    /// The junction whose anchor is nearest `p` within `radius_m`
    /// (ties: lower id).
    #[must_use]
    pub fn near(&self, p: [f64; 3], radius_m: f64) -> Option<&Junction> {
        let r2 = radius_m * radius_m;
        let mut best: Option<(&Junction, f64)> = None;
        for j in self.iter() {
            let d = dist_sq(j.anchor_position_m, p);
            if d <= r2 && best.is_none_or(|(bj, bd)| d < bd || (d == bd && j.id < bj.id)) {
                best = Some((j, d));
            }
        }
        best.map(|(j, _)| j)
    }
    /// Add a junction (its `id` is assigned here), dropping the oldest
    /// when full. Returns the id, or `None` when `JN == 0`.
    pub fn open(&mut self, mut j: Junction) -> Option<u16> {
        let id = self.next_id;
        j.id = id;
        // Free slot, else the slot with the lowest id (oldest).
        let mut slot = None;
        for (k, u) in self.used.iter().enumerate() {
            if !*u {
                slot = Some(k);
                break;
            }
        }
        if slot.is_none() {
            let mut oldest: Option<(usize, u16)> = None;
            for (k, s) in self.slots.iter().enumerate() {
                if oldest.is_none_or(|(_, oid)| s.id < oid) {
                    oldest = Some((k, s.id));
                }
            }
            slot = oldest.map(|(k, _)| k);
        }
        let k = slot?;
        *self.slots.get_mut(k)? = j;
        *self.used.get_mut(k)? = true;
        self.next_id = self.next_id.wrapping_add(1);
        Some(id)
    }
}

/// The local map.
#[derive(Debug, Clone)]
pub struct LocalMap<const S: usize, const W: usize, const JN: usize> {
    /// Stations along the travelled path.
    pub stations: StationRing<S>,
    /// Junction records.
    pub junctions: JunctionTable<JN>,
    /// Wall points, map frame.
    pub walls: LinearWallIndex<W>,
    /// The station the robot is at in the path tree (the newest one on its
    /// current path).
    pub tip: Option<u32>,
}

impl<const S: usize, const W: usize, const JN: usize> Default for LocalMap<S, W, JN> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const S: usize, const W: usize, const JN: usize> LocalMap<S, W, JN> {
    /// Empty map.
    #[must_use]
    pub const fn new() -> Self {
        Self {
            stations: StationRing::new(),
            junctions: JunctionTable::new(),
            walls: LinearWallIndex::new(),
            tip: None,
        }
    }

    /// The tip station, if still held.
    #[must_use]
    pub fn tip_station(&self) -> Option<&Station> {
        self.stations.by_seq(self.tip?)
    }

    /// Push a station linked to the current tip; it becomes the new tip.
    pub fn push_station(&mut self, mut st: Station) -> Option<u32> {
        st.prev_seq = self.tip;
        let seq = self.stations.push(st)?;
        self.tip = Some(seq);
        Some(seq)
    }

    /// Where back-out heads next when retracing toward junction `jid` with
    /// cursor `cursor_seq` (the station to reach next): the station if it
    /// is still held and newer than the anchor, else the junction's stored
    /// anchor position. `None` when the junction is gone.
    #[must_use]
    pub fn retrace_target(&self, jid: u16, cursor_seq: u32) -> Option<([f64; 3], bool)> {
        let j = self.junctions.get(jid)?;
        if cursor_seq > j.anchor_seq
            && let Some(st) = self.stations.by_seq(cursor_seq)
        {
            return Some((st.position_m, false));
        }
        Some((j.anchor_position_m, true))
    }
}

/// Rotate a probe-frame (head-frame) vector into the map frame with the
/// head pose's orientation quaternion `[w, x, y, z]` (normalised here).
/// `None` when the quaternion is zero or anything is not finite.
#[must_use]
pub fn probe_to_map(v_probe: [f64; 3], pose: &HeadPose) -> Option<[f64; 3]> {
    let [w, x, y, z] = pose.orientation_wxyz;
    let n = libm::sqrt(w * w + x * x + y * y + z * z);
    if !n.is_finite() || n <= 1e-12 || !finite3(v_probe) {
        return None;
    }
    let q = nalgebra::UnitQuaternion::new_unchecked(nalgebra::Quaternion::new(
        w / n,
        x / n,
        y / n,
        z / n,
    ));
    let r = q * nalgebra::Vector3::new(v_probe[0], v_probe[1], v_probe[2]);
    Some([r.x, r.y, r.z])
}

/// The head's forward axis (+x of the head frame) in the map frame.
#[must_use]
pub fn head_forward_map(pose: &HeadPose) -> Option<[f64; 3]> {
    probe_to_map([1.0, 0.0, 0.0], pose)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ring_drops_oldest_and_finds_by_seq() {
        let mut r: StationRing<3> = StationRing::new();
        for i in 0..5 {
            let mut s = Station::EMPTY;
            s.time_s = f64::from(i);
            assert_eq!(r.push(s), Some(u32::try_from(i).unwrap()));
        }
        assert_eq!(r.len(), 3);
        assert_eq!(r.oldest().unwrap().seq, 2);
        assert_eq!(r.newest().unwrap().seq, 4);
        assert!(r.by_seq(1).is_none());
        assert_eq!(r.by_seq(3).unwrap().time_s, 3.0);
        let seqs: std::vec::Vec<u32> = r.iter().map(|s| s.seq).collect();
        assert_eq!(seqs, [2, 3, 4]);
    }

    #[test]
    fn linear_index_ties_go_to_lower_id_and_eviction_is_fifo() {
        let mut w: LinearWallIndex<3> = LinearWallIndex::new();
        w.insert([1.0, 0.0, 0.0]).unwrap();
        w.insert([-1.0, 0.0, 0.0]).unwrap();
        w.insert([0.0, 2.0, 0.0]).unwrap();
        let n = w.nearest([0.0; 3]).unwrap();
        assert_eq!((n.id, n.dist_sq_m2), (0, 1.0));
        w.insert([0.0, 0.0, 3.0]).unwrap(); // evicts id 0
        assert_eq!(w.nearest([0.0; 3]).unwrap().id, 1);
        let mut out = [WallHit {
            id: 0,
            dist_sq_m2: 0.0,
            point_m: [0.0; 3],
        }; 2];
        let k = w.within([0.0; 3], 2.0, &mut out);
        assert_eq!(k, 2);
        assert_eq!((out[0].id, out[1].id), (1, 2));
        assert_eq!(
            w.insert([f64::NAN, 0.0, 0.0]),
            Err(WallIndexError::NonFinite)
        );
    }

    #[test]
    fn mass_flux_proxy_is_rho_v_a() {
        // q = rho V^2 / 2 with rho = 1.2, V = 10 gives q = 60 Pa;
        // rho V A = 1.2 * 10 * 0.5 = 6 kg/s.
        let m = mass_flux_proxy(1.2, 60.0, 0.5);
        assert!((m - 6.0).abs() < 1e-12);
        assert_eq!(mass_flux_proxy(1.2, -1.0, 0.5), 0.0);
    }

    #[test]
    fn junction_merges_close_openings() {
        let mut j = Junction::EMPTY;
        let c = libm::cos(0.3);
        assert_eq!(
            j.merge_opening([1.0, 0.0, 0.0], [0.0; 3], 0.3, true, c),
            Some(0)
        );
        assert_eq!(
            j.merge_opening([1.0, 0.05, 0.0], [0.0; 3], 0.4, false, c),
            Some(0)
        );
        assert_eq!(
            j.merge_opening([0.0, 1.0, 0.0], [0.0; 3], 0.2, false, c),
            Some(1)
        );
        assert_eq!(j.branch_count, 2);
        assert!(!j.branches[0].width_is_lower_bound);
        assert_eq!(j.branches[0].clear_width_m, 0.4);
    }

    #[test]
    fn rotation_helper_turns_x_into_y_for_a_quarter_yaw() {
        let h = core::f64::consts::FRAC_PI_4;
        let pose = HeadPose {
            position_m: [0.0; 3],
            orientation_wxyz: [libm::cos(h), 0.0, 0.0, libm::sin(h)],
            position_sigma_m: 0.0,
            attitude_sigma_rad: 0.0,
        };
        let v = probe_to_map([1.0, 0.0, 0.0], &pose).unwrap();
        assert!(v[0].abs() < 1e-15 && (v[1] - 1.0).abs() < 1e-15);
    }
}
