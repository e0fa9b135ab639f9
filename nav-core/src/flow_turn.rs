//! Junctions seen through the flow, for conduits too wide to feel across.
//!
//! In a conduit several times wider than the body the skin touches nothing
//! at a junction, so no opening is ever felt and a branch that ends (a
//! pinch, a slot, a blind end) has nothing to back out to. The flow still
//! shows where streams met: going upstream through a junction the fused
//! upstream direction turns from the trunk's axis to the axis of the branch
//! the flow leads into. [`find_turn`] watches the stored stations for such a
//! turn and names the station where it happened.
//!
//! Rules (checked by the tests below and by `tests/tests/flow_turn.rs`):
//! - with `max_dip_ratio` below 1, the dynamic pressure must dip between
//!   the two means, to that fraction of the smaller mean or below: where
//!   streams meet the section opens out and the speed falls, while a bend
//!   keeps its section and its flow only turns
//!   (`a_turn_without_a_dip_is_a_bend`). Off by default: the dip the
//!   stations record is too shallow to separate the two cleanly;
//! - only directions known to better than half the threshold count
//!   (`uncertain_directions_do_not_count`);
//! - the turn is the angle between the mean upstream direction over the
//!   newest `average_m` of travel and the mean over `average_m` of travel
//!   ending `window_m` back; it must exceed `turn_rad`
//!   (`a_turn_past_the_threshold_is_found`, `a_gentle_turn_is_not`);
//! - the turn must have settled: every direction of the newest stretch
//!   within half the threshold of its mean, so the branch followed is
//!   recorded along its own axis, not mid-turn (`a_turn_still_in_progress_waits`);
//! - the walk never crosses a junction anchor, so one junction is found
//!   once, and a window that is not yet full finds nothing
//!   (`a_window_never_spans_a_junction`);
//! - a conduit the skin has measured narrower than `wide_radius_m`
//!   anywhere in the window is left to the skin, which feels its openings
//!   (`narrow_sections_are_left_to_the_skin`);
//! - the anchor is the oldest station of the unbroken run, counted from
//!   the newest, whose direction lies nearer the new mean than the old: the
//!   place the turn happened;
//! - the walk is bounded by [`MAX_WALK`] stations.
//!
//! A bend turns the flow as a junction does, and a point probe cannot tell
//! them apart (at a merge each stream bends into the trunk). A junction
//! found here is therefore a candidate: the branch followed is known, the
//! others are guesses (the mirror of the followed branch about the trunk
//! axis, and straight on), tried only when the followed branch ends, and
//! given up at the first wall. Watching the turn of the flow is our own
//! design, not a published method.

use crate::map::{Section, StationRing, dot, norm, scale, sub, unit};

/// Stations walked back at most.
pub const MAX_WALK: usize = 96;

/// Settings of the flow-turn watch.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowTurnConfig {
    /// Travel between the two means, m.
    pub window_m: f64,
    /// Travel each mean is taken over, m.
    pub average_m: f64,
    /// Smallest turn read as a junction, rad.
    pub turn_rad: f64,
    /// A section measured narrower than this radius in the window leaves
    /// the junction to the skin, m.
    pub wide_radius_m: f64,
    /// The junction's anchor (where a back-out ends) lies this much travel
    /// before the turn point, on the trunk, m.
    pub anchor_back_m: f64,
    /// The smallest dynamic pressure between the two means must fall to
    /// this fraction of the smaller of the two means' (1: no dip needed,
    /// the default: on fork worlds 1-50 a ratio of 0.95 / 0.85 / 0.7 gave
    /// a recall of 82 / 62 / 36 % against 88 % without, with 3.8 / 1.9 /
    /// 0.13 false junctions per 100 m against 4.3; README).
    pub max_dip_ratio: f64,
}

impl FlowTurnConfig {
    /// Settings for a robot of radius `r` (m): a 2.5 m window (longer than
    /// the mixing zone of a junction of conduits up to about 1 m across),
    /// means over 0.5 m, a turn of 20 degrees (bends the module chain can
    /// pass in a tight bore turn less; wide bends are caught too, which is
    /// why the guesses are cheap), a wide conduit from 4 body radii.
    #[must_use]
    pub fn for_robot(r: f64) -> Self {
        Self {
            window_m: 2.5,
            average_m: 0.5,
            turn_rad: 0.35,
            wide_radius_m: 4.0 * r,
            anchor_back_m: 0.5,
            max_dip_ratio: 1.0,
        }
    }
}

impl FlowTurnConfig {
    /// Positive finite window and mean (the mean shorter than the window),
    /// a turn between 0 and pi, a non-negative wide radius.
    #[must_use]
    pub fn is_valid(&self) -> bool {
        let pos = |v: f64| v.is_finite() && v > 0.0;
        pos(self.window_m)
            && pos(self.average_m)
            && self.average_m < self.window_m
            && pos(self.turn_rad)
            && self.turn_rad < core::f64::consts::PI
            && self.wide_radius_m.is_finite()
            && self.wide_radius_m >= 0.0
            && self.anchor_back_m.is_finite()
            && self.anchor_back_m >= 0.0
            && self.anchor_back_m < self.window_m
            && self.max_dip_ratio > 0.0
            && self.max_dip_ratio <= 1.0
    }
}

/// A turn of the upstream direction found on the stored path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowTurn {
    /// The station where the turn happened (the junction's anchor).
    pub anchor_seq: u32,
    /// Mean upstream direction before the turn (the trunk), unit, map
    /// frame.
    pub trunk_upstream_map: [f64; 3],
    /// Mean upstream direction after it (the branch followed), unit.
    pub branch_upstream_map: [f64; 3],
    /// The angle between them, rad.
    pub turn_rad: f64,
}

/// Look back from station `tip_seq` for a turn of the upstream direction
/// (see the module rules). `None` when there is none, the window is not
/// full, crosses a junction anchor or a narrow section, or a station is
/// missing.
#[must_use]
pub fn find_turn<const S: usize>(
    ring: &StationRing<S>,
    tip_seq: u32,
    cfg: &FlowTurnConfig,
) -> Option<FlowTurn> {
    // First walk: the two means.
    let (mut new_sum, mut new_n, mut new_q) = ([0.0; 3], 0u32, 0.0);
    let (mut old_sum, mut old_n, mut old_q) = ([0.0; 3], 0u32, 0.0);
    let mut middle_q = f64::INFINITY;
    let full = walk(ring, tip_seq, cfg, |zone, _, u, q| match zone {
        Zone::Newest => {
            new_sum = add3(new_sum, u);
            new_n = new_n.saturating_add(1);
            new_q += q;
        }
        Zone::Oldest => {
            old_sum = add3(old_sum, u);
            old_n = old_n.saturating_add(1);
            old_q += q;
        }
        Zone::Middle => middle_q = middle_q.min(q),
    })?;
    if !full || new_n < 2 || old_n < 2 {
        return None;
    }
    // Where streams meet, the section opens out and the speed dips; a bend
    // keeps its section, and its flow only turns.
    let ends_q = (new_q / f64::from(new_n)).min(old_q / f64::from(old_n));
    let dipped = middle_q.is_finite() && ends_q > 0.0 && middle_q <= cfg.max_dip_ratio * ends_q;
    if cfg.max_dip_ratio < 1.0 && !dipped {
        return None;
    }
    let new = unit(new_sum)?;
    let old = unit(old_sum)?;
    let turn = libm::acos(dot(new, old).clamp(-1.0, 1.0));
    if turn.is_nan() || turn <= cfg.turn_rad {
        return None;
    }
    // Second walk: still turning (the head is in the junction's mixing
    // zone) unless the newest stretch agrees within half the threshold, so
    // that the branch followed is recorded along its own axis; and the
    // anchor, the oldest middle station of the unbroken run nearer the new
    // direction than the old.
    let settle_cos = libm::cos(0.5 * cfg.turn_rad);
    let mut settled = true;
    let mut anchor: Option<u32> = None;
    let mut first_middle: Option<u32> = None;
    let mut in_run = true;
    walk(ring, tip_seq, cfg, |zone, seq, u, _| match zone {
        Zone::Newest => settled &= dot(u, new) >= settle_cos,
        Zone::Middle => {
            first_middle = first_middle.or(Some(seq));
            if in_run && dot(u, new) >= dot(u, old) {
                anchor = Some(seq);
            } else {
                in_run = false;
            }
        }
        Zone::Oldest => {}
    })?;
    if !settled {
        return None;
    }
    // No middle station nearer the new direction: the turn happened at the
    // oldest station of the new mean's stretch; take the first middle one.
    let anchor_seq = anchor.or(first_middle)?;
    Some(FlowTurn {
        anchor_seq,
        trunk_upstream_map: old,
        branch_upstream_map: new,
        turn_rad: turn,
    })
}

/// Which stretch of the window a station lies in.
#[derive(Clone, Copy)]
enum Zone {
    /// The newest `average_m` of travel.
    Newest,
    /// Between the two means.
    Middle,
    /// The `average_m` of travel ending `window_m` back.
    Oldest,
}

/// Walk back from `tip_seq` over at most [`MAX_WALK`] stations, calling
/// `visit(zone, seq, upstream)` for every station whose direction is known
/// to better than half the threshold (weak air's wandering estimate is not
/// a turn). `Some(true)` when the window was covered, `Some(false)` when
/// the path ran out first; `None` when the window reaches a junction
/// anchor, a section narrower than `wide_radius_m`, or a station no longer
/// held.
fn walk<const S: usize>(
    ring: &StationRing<S>,
    tip_seq: u32,
    cfg: &FlowTurnConfig,
    mut visit: impl FnMut(Zone, u32, [f64; 3], f64),
) -> Option<bool> {
    let mut seq = tip_seq;
    let mut prev_pos: Option<[f64; 3]> = None;
    let mut travelled = 0.0;
    for _ in 0..MAX_WALK {
        let st = ring.by_seq(seq)?;
        if let Some(p) = prev_pos {
            travelled += norm(sub(st.position_m, p));
        }
        prev_pos = Some(st.position_m);
        if travelled > cfg.window_m + cfg.average_m {
            return Some(true);
        }
        if st.junction.is_some() {
            return None;
        }
        if let Section::Circle { radius_m, .. } = st.section
            && radius_m < cfg.wide_radius_m
        {
            return None;
        }
        let sure = libm::sqrt(st.flow.dir_var_rad2().max(0.0)) <= 0.5 * cfg.turn_rad;
        let up = st
            .flow
            .velocity_dir_map
            .filter(|_| sure)
            .and_then(|v| unit(scale(v, -1.0)));
        if let Some(u) = up {
            let zone = if travelled <= cfg.average_m {
                Zone::Newest
            } else if travelled >= cfg.window_m {
                Zone::Oldest
            } else {
                Zone::Middle
            };
            visit(zone, st.seq, u, st.flow.dynamic_pressure_pa);
        }
        let Some(prev) = st.prev_seq else {
            return Some(false);
        };
        seq = prev;
    }
    Some(false)
}

/// The station `back_m` of travel before station `seq` on the path to it
/// (or the oldest one held within [`MAX_WALK`] steps, never crossing a
/// junction anchor). `None` when `seq` is not held.
#[must_use]
pub fn station_before<const S: usize>(ring: &StationRing<S>, seq: u32, back_m: f64) -> Option<u32> {
    let mut st = ring.by_seq(seq)?;
    let mut travelled = 0.0;
    for _ in 0..MAX_WALK {
        if travelled >= back_m || st.junction.is_some() {
            break;
        }
        let Some(prev) = st.prev_seq.and_then(|p| ring.by_seq(p)) else {
            break;
        };
        travelled += norm(sub(st.position_m, prev.position_m));
        st = prev;
    }
    Some(st.seq)
}

/// The directions worth trying at a junction seen through the flow besides
/// the one followed: the mirror of `branch` about `trunk` (the other arm of
/// a fork), then `trunk` itself (straight on). Unit vectors; either may be
/// `None` when degenerate.
#[must_use]
pub fn guessed_directions(trunk: [f64; 3], branch: [f64; 3]) -> [Option<[f64; 3]>; 2] {
    let c = dot(trunk, branch);
    let mirror = unit(sub(scale(trunk, 2.0 * c), branch));
    [mirror, unit(trunk)]
}

fn add3(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::map::{FlowEstimate, Station};

    const R: f64 = 0.06;
    /// The dip of the test paths' dynamic pressure at the corner.
    const DIP: f64 = 0.5;

    /// A path of stations 0.12 m apart: straight along +x for `before_m`,
    /// then along direction `turn` (in the x-y plane) for `after_m`; the
    /// upstream direction is the direction of travel.
    fn path(before_m: f64, after_m: f64, turn_rad: f64) -> (StationRing<128>, u32) {
        let mut ring = StationRing::<128>::new();
        let step = 0.12;
        let mut pos = [0.0, 0.0, 0.0];
        let mut prev = None;
        let mut last = 0;
        let n_before = (before_m / step) as usize;
        let n_after = (after_m / step) as usize;
        for k in 0..n_before + n_after {
            let a = if k < n_before { 0.0 } else { turn_rad };
            let dir = [libm::cos(a), libm::sin(a), 0.0];
            let mut st = Station::EMPTY;
            st.position_m = pos;
            st.prev_seq = prev;
            // The dynamic pressure dips to half over 0.25 m either side of
            // the corner, as where streams meet.
            let near_corner = (k as f64 - n_before as f64).abs() * step <= 0.25;
            st.flow = FlowEstimate {
                velocity_dir_map: Some(scale(dir, -1.0)),
                dynamic_pressure_pa: if near_corner { DIP * 1.0 } else { 1.0 },
                ..FlowEstimate::NONE
            };
            last = ring.push(st).unwrap();
            prev = Some(last);
            pos = [pos[0] + step * dir[0], pos[1] + step * dir[1], 0.0];
        }
        (ring, last)
    }

    #[test]
    fn a_turn_past_the_threshold_is_found() {
        let cfg = FlowTurnConfig::for_robot(R);
        let (ring, tip) = path(4.0, 1.5, 0.7);
        let t = find_turn(&ring, tip, &cfg).expect("a 40 degree turn");
        assert!((t.turn_rad - 0.7).abs() < 1e-9, "{}", t.turn_rad);
        // The anchor is the last station before the turn (the first whose
        // direction is the new one is the next).
        let a = ring.by_seq(t.anchor_seq).unwrap();
        let first_after = ring
            .iter()
            .find(|s| s.flow.velocity_dir_map.unwrap()[1] != 0.0)
            .unwrap();
        assert_eq!(t.anchor_seq, first_after.seq, "{:?}", a.position_m);
        assert!((t.trunk_upstream_map[0] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn a_gentle_turn_is_not() {
        let cfg = FlowTurnConfig::for_robot(R);
        let (ring, tip) = path(4.0, 1.5, 0.3);
        assert_eq!(find_turn(&ring, tip, &cfg), None);
        // The same turn with a lower threshold is found: the threshold,
        // not the geometry, said no.
        let low = FlowTurnConfig {
            turn_rad: 0.25,
            ..cfg
        };
        assert!(find_turn(&ring, tip, &low).is_some());
    }

    /// A path that keeps turning (a 40 degree turn spread over the newest
    /// stretch) is not recorded until the direction settles.
    #[test]
    fn a_turn_still_in_progress_waits() {
        let cfg = FlowTurnConfig::for_robot(R);
        let mut ring = StationRing::<128>::new();
        let mut prev = None;
        let mut tip = 0;
        let mut pos = [0.0; 3];
        for k in 0..30 {
            // Straight for 24 stations, then 8 degrees more per station.
            let a = if k < 24 {
                0.0
            } else {
                0.14 * f64::from(k - 23)
            };
            let dir = [libm::cos(a), libm::sin(a), 0.0];
            let mut st = Station::EMPTY;
            st.position_m = pos;
            st.prev_seq = prev;
            st.flow = FlowEstimate {
                velocity_dir_map: Some(scale(dir, -1.0)),
                dynamic_pressure_pa: if (24..27).contains(&k) { DIP } else { 1.0 },
                ..FlowEstimate::NONE
            };
            tip = ring.push(st).unwrap();
            prev = Some(tip);
            pos = [pos[0] + 0.12 * dir[0], pos[1] + 0.12 * dir[1], 0.0];
        }
        assert_eq!(find_turn(&ring, tip, &cfg), None, "recorded mid-turn");
        // Settled on the last direction for a while: found.
        let last = 0.14 * 6.0;
        for _ in 0..6 {
            let dir = [libm::cos(last), libm::sin(last), 0.0];
            let mut st = Station::EMPTY;
            st.position_m = pos;
            st.prev_seq = prev;
            st.flow = FlowEstimate {
                velocity_dir_map: Some(scale(dir, -1.0)),
                dynamic_pressure_pa: 1.0,
                ..FlowEstimate::NONE
            };
            tip = ring.push(st).unwrap();
            prev = Some(tip);
            pos = [pos[0] + 0.12 * dir[0], pos[1] + 0.12 * dir[1], 0.0];
        }
        let t = find_turn(&ring, tip, &cfg).expect("settled");
        assert!(t.turn_rad > 0.8, "{}", t.turn_rad);
    }

    /// The same turn with no dip of the dynamic pressure (a bend) is not a
    /// junction; a dip just past the ratio is not enough either.
    #[test]
    fn a_turn_without_a_dip_is_a_bend() {
        let cfg = FlowTurnConfig {
            max_dip_ratio: 0.7,
            ..FlowTurnConfig::for_robot(R)
        };
        let (mut ring, tip) = path(4.0, 1.5, 0.7);
        assert!(find_turn(&ring, tip, &cfg).is_some());
        let seqs: std::vec::Vec<u32> = ring.iter().map(|s| s.seq).collect();
        for s in &seqs {
            let st = ring.by_seq_mut(*s).unwrap();
            if st.flow.dynamic_pressure_pa < 1.0 {
                st.flow.dynamic_pressure_pa = cfg.max_dip_ratio * 1.01;
            }
        }
        assert_eq!(find_turn(&ring, tip, &cfg), None);
        for s in &seqs {
            let st = ring.by_seq_mut(*s).unwrap();
            if st.flow.dynamic_pressure_pa < 1.0 {
                st.flow.dynamic_pressure_pa = cfg.max_dip_ratio * 0.99;
            }
        }
        assert!(find_turn(&ring, tip, &cfg).is_some());
    }

    #[test]
    fn uncertain_directions_do_not_count() {
        let cfg = FlowTurnConfig::for_robot(R);
        let (mut ring, tip) = path(4.0, 1.5, 0.7);
        assert!(find_turn(&ring, tip, &cfg).is_some());
        // Every station's direction sigma just past half the threshold.
        let var = (0.5 * cfg.turn_rad * 1.01).powi(2) / 3.0;
        let seqs: std::vec::Vec<u32> = ring.iter().map(|s| s.seq).collect();
        for s in seqs {
            let st = ring.by_seq_mut(s).unwrap();
            st.flow.dir_cov = [[var, 0.0, 0.0], [0.0, var, 0.0], [0.0, 0.0, var]];
        }
        assert_eq!(find_turn(&ring, tip, &cfg), None);
    }

    #[test]
    fn a_window_never_spans_a_junction() {
        let cfg = FlowTurnConfig::for_robot(R);
        let (mut ring, tip) = path(4.0, 1.5, 0.7);
        let t = find_turn(&ring, tip, &cfg).unwrap();
        ring.by_seq_mut(t.anchor_seq).unwrap().junction = Some(0);
        assert_eq!(find_turn(&ring, tip, &cfg), None);
        // A path shorter than the window finds nothing.
        let (short, tip) = path(1.0, 1.0, 0.7);
        assert_eq!(find_turn(&short, tip, &cfg), None);
    }

    #[test]
    fn narrow_sections_are_left_to_the_skin() {
        let cfg = FlowTurnConfig::for_robot(R);
        let (mut ring, tip) = path(4.0, 1.5, 0.7);
        let seq = ring.by_seq(tip).unwrap().prev_seq.unwrap();
        ring.by_seq_mut(seq).unwrap().section = Section::Circle {
            centre_m: [0.0; 3],
            radius_m: 3.0 * R,
            centre_sigma_m: 0.01,
            radius_sigma_m: 0.01,
        };
        assert_eq!(find_turn(&ring, tip, &cfg), None);
    }

    #[test]
    fn the_anchor_lies_on_the_trunk_before_the_turn() {
        let (ring, tip) = path(4.0, 1.5, 0.7);
        let t = find_turn(&ring, tip, &FlowTurnConfig::for_robot(R)).unwrap();
        let a = station_before(&ring, t.anchor_seq, 0.5).unwrap();
        let (pa, pt) = (ring.by_seq(a).unwrap(), ring.by_seq(t.anchor_seq).unwrap());
        let back = pt.position_m[0] - pa.position_m[0];
        assert!((0.5..0.5 + 0.12 + 1e-9).contains(&back), "{back}");
        assert_eq!(pa.position_m[1], 0.0, "on the trunk");
        assert_eq!(station_before(&ring, t.anchor_seq, 0.0), Some(t.anchor_seq));
    }

    #[test]
    fn guesses_mirror_the_followed_branch_and_go_straight_on() {
        let trunk = [1.0, 0.0, 0.0];
        let a = 0.8;
        let [m, s] = guessed_directions(trunk, [libm::cos(a), libm::sin(a), 0.0]);
        let m = m.unwrap();
        assert!((m[0] - libm::cos(a)).abs() < 1e-12 && (m[1] + libm::sin(a)).abs() < 1e-12);
        assert_eq!(s, Some(trunk));
    }
}
