//! Geometry helpers for drawing worlds: bent 3-D centrelines, the bend a
//! rigid module chain can pass, and the check that conduits meet only at
//! their shared nodes.

use super::draft::Draft;
use crate::sim::vec3::{self, V3};

/// Round to the millimetre (drafts are written in mm so files stay short;
/// `libm::round` keeps it the same on every CPU).
#[must_use]
pub fn mm(x: f64) -> f64 {
    libm::round(x * 1000.0) / 1000.0
}

/// `p` rounded to the millimetre.
#[must_use]
pub fn mm3(p: V3) -> V3 {
    [mm(p[0]), mm(p[1]), mm(p[2])]
}

/// Unit vector of azimuth `yaw` (from +x toward +y) and elevation `pitch`
/// (toward +z), rad.
#[must_use]
pub fn direction(yaw_rad: f64, pitch_rad: f64) -> V3 {
    let c = libm::cos(pitch_rad);
    [
        c * libm::cos(yaw_rad),
        c * libm::sin(yaw_rad),
        libm::sin(pitch_rad),
    ]
}

/// Azimuth and elevation of a (non-zero) direction, rad.
#[must_use]
pub fn angles(d: V3) -> (f64, f64) {
    let h = libm::sqrt(d[0] * d[0] + d[1] * d[1]);
    (libm::atan2(d[1], d[0]), libm::atan2(d[2], h))
}

/// The largest bend, rad, that a chain of rigid modules (length
/// `module_length_m`, radius `body_radius_m`) passes in a tube of radius
/// `tube_radius_m` without pressing its skin past `compliance_m`: a module
/// spanning the bend's vertex cuts the inside of the bend by up to
/// `L/2 sin(theta)` (chord geometry), which must fit in the clearance
/// `r_tube - r_body - compliance` less a 2 mm allowance for noise.
#[must_use]
pub fn passable_bend_rad(
    tube_radius_m: f64,
    body_radius_m: f64,
    module_length_m: f64,
    compliance_m: f64,
) -> f64 {
    let room = tube_radius_m - body_radius_m - compliance_m - 0.002;
    if room <= 0.0 {
        return 0.0;
    }
    let s = room / (0.5 * module_length_m);
    if s >= 1.0 {
        core::f64::consts::FRAC_PI_2
    } else {
        libm::asin(s)
    }
}

/// A centreline from `start` heading `(yaw, pitch)`: `segments` straight
/// pieces of `segment_m` each, turning by the given `(d_yaw, d_pitch)` at
/// each interior vertex; the elevation stays within `±max_pitch_rad`.
/// Returns every vertex, `start` first, in mm.
#[must_use]
pub fn bent_line(
    start: V3,
    yaw_rad: f64,
    pitch_rad: f64,
    segment_m: &[f64],
    turns_rad: &[(f64, f64)],
    max_pitch_rad: f64,
) -> Vec<V3> {
    let mut pts = vec![mm3(start)];
    let (mut yaw, mut pitch) = (yaw_rad, pitch_rad.clamp(-max_pitch_rad, max_pitch_rad));
    let mut at = start;
    for (k, len) in segment_m.iter().enumerate() {
        if k > 0
            && let Some(&(dy, dp)) = turns_rad.get(k - 1)
        {
            yaw += dy;
            pitch = (pitch + dp).clamp(-max_pitch_rad, max_pitch_rad);
        }
        at = vec3::axpy(at, *len, direction(yaw, pitch));
        pts.push(mm3(at));
    }
    pts
}

/// The turn angle at each interior vertex of a polyline, rad.
#[must_use]
pub fn vertex_turns_rad(pts: &[V3]) -> Vec<f64> {
    pts.windows(3)
        .filter_map(|w| {
            let a = vec3::unit(vec3::sub(w[1], w[0]))?;
            let b = vec3::unit(vec3::sub(w[2], w[1]))?;
            Some(libm::acos(vec3::dot(a, b).clamp(-1.0, 1.0)))
        })
        .collect()
}

/// Points every `step_m` along a polyline, with their arc position.
fn samples(pts: &[V3], step_m: f64) -> Vec<V3> {
    let mut out = Vec::new();
    for w in pts.windows(2) {
        let len = vec3::dist(w[0], w[1]);
        let n = libm::ceil(len / step_m).max(1.0);
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
        let k = n as usize;
        for i in 0..k {
            #[allow(clippy::cast_precision_loss)]
            let t = i as f64 / n;
            out.push(vec3::add(w[0], vec3::scale(vec3::sub(w[1], w[0]), t)));
        }
    }
    if let Some(&last) = pts.last() {
        out.push(last);
    }
    out
}

/// Extra gap kept between the walls of two conduits that do not share a
/// node, m.
const WALL_GAP_M: f64 = 0.3;

/// The first pair of conduits (by index) whose walls come closer than
/// [`WALL_GAP_M`] away from the nodes they share, or `None` when every
/// conduit meets the others only at its own ends. Near a shared node the
/// walls necessarily meet; points within twice the pair's combined radius
/// plus the gap of a shared node are left out (branches drawn at least
/// 35 degrees apart have separated by then).
#[must_use]
pub fn first_overlap(d: &Draft) -> Option<(usize, usize)> {
    let lines: Vec<Vec<V3>> = d
        .conduits
        .iter()
        .map(|c| {
            let mut pts = Vec::with_capacity(c.via_m.len() + 2);
            pts.push(d.nodes.get(c.from).map_or([0.0; 3], |n| n.position_m));
            pts.extend(c.via_m.iter().copied());
            pts.push(d.nodes.get(c.to).map_or([0.0; 3], |n| n.position_m));
            samples(&pts, 0.2)
        })
        .collect();
    for i in 0..d.conduits.len() {
        for j in i + 1..d.conduits.len() {
            let (ci, cj) = (&d.conduits[i], &d.conduits[j]);
            let reach = ci.radius.max_m() + cj.radius.max_m() + WALL_GAP_M;
            let shared: Vec<V3> = [ci.from, ci.to]
                .into_iter()
                .filter(|n| *n == cj.from || *n == cj.to)
                .filter_map(|n| d.nodes.get(n).map(|n| n.position_m))
                .collect();
            let near_shared = |p: V3| shared.iter().any(|s| vec3::dist(*s, p) < 2.0 * reach);
            for &p in &lines[i] {
                if near_shared(p) {
                    continue;
                }
                if lines[j]
                    .iter()
                    .any(|&q| !near_shared(q) && vec3::dist(p, q) < reach)
                {
                    return Some((i, j));
                }
            }
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bend_limit_follows_chord_geometry() {
        // Half a 0.2 m module times sin(theta) must fit in the clearance.
        let t = passable_bend_rad(0.1, 0.06, 0.2, 0.005);
        let room: f64 = 0.1 - 0.06 - 0.005 - 0.002;
        assert!((0.1 * libm::sin(t) - room).abs() < 1e-12);
        assert_eq!(passable_bend_rad(0.06, 0.06, 0.2, 0.005), 0.0);
        assert_eq!(
            passable_bend_rad(1.0, 0.06, 0.2, 0.005),
            core::f64::consts::FRAC_PI_2
        );
    }

    #[test]
    fn bent_line_turns_by_the_angles_given() {
        let pts = bent_line([0.0; 3], 0.0, 0.0, &[3.0, 3.0], &[(0.5, 0.0)], 0.3);
        let turns = vertex_turns_rad(&pts);
        assert_eq!(turns.len(), 1);
        // Within the millimetre rounding of the vertices.
        assert!((turns[0] - 0.5).abs() < 1e-3, "{turns:?}");
    }
}
