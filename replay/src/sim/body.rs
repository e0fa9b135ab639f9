//! The robot's body: a chain of rigid modules moved by follow-the-leader
//! kinematics, with the project's frame conventions (see the brief and
//! `nav_core::frame`):
//!
//! - module `k` frame: +x forward along the module axis, origin at the
//!   centre of its front face; the module occupies `x` in `[-L_k, 0]`;
//! - `origin_{k+1} = origin_k + R_k (-L_k, 0, 0)`,
//!   `R_{k+1} = R_k Rz(yaw_k) Ry(pitch_k)`.
//!
//! The head's front face leaves a *trail* of points; every joint lies on the
//! trail, each module being the chord of length `L_k` behind the joint (or
//! head) in front of it. The head frame is carried along by parallel
//! transport (the smallest rotation taking the old head axis to the new
//! one), so it neither rolls about its own axis nor flips when the head
//! points straight up or down; every later frame follows from its joint's
//! pitch and yaw, exactly as the convention composes them.
//!
//! Moving backward, the head retraces its trail; beyond the trail's end the
//! tail continues straight.

use std::collections::VecDeque;

use nalgebra::{Matrix3, Rotation3, UnitQuaternion, Vector3};

use super::vec3::{self, V3};
use crate::record::JointRecord;

/// Spacing of stored trail points, m.
pub const TRAIL_STEP_M: f64 = 0.005;

/// The chain's state.
#[derive(Debug, Clone)]
pub struct Body {
    lengths: Vec<f64>,
    /// Trail points, newest (nearest the head) first; `trail[0]` is not the
    /// head itself but the last stored point behind it.
    trail: VecDeque<V3>,
    head: V3,
    /// Module origins, map frame.
    pub origins: Vec<V3>,
    /// Module rotations (module frame to map frame).
    pub rotations: Vec<Matrix3<f64>>,
    /// Joint angles, head first.
    pub joints: Vec<JointRecord>,
    keep_m: f64,
}

fn to_v(a: V3) -> Vector3<f64> {
    Vector3::new(a[0], a[1], a[2])
}

fn from_v(v: &Vector3<f64>) -> V3 {
    [v.x, v.y, v.z]
}

/// A head rotation with the given axis and no roll against the map's up
/// (+y horizontal), falling back to map +y when the axis is vertical.
#[must_use]
pub fn level_frame(x: V3) -> Matrix3<f64> {
    let y = vec3::unit(vec3::cross([0.0, 0.0, 1.0], x)).unwrap_or_else(|| {
        vec3::unit(vec3::reject([0.0, 1.0, 0.0], x)).unwrap_or_else(|| vec3::perpendicular(x))
    });
    let z = vec3::cross(x, y);
    Matrix3::from_columns(&[to_v(x), to_v(y), to_v(z)])
}

impl Body {
    /// A straight body with its head at `head`, pointing along the unit
    /// vector `axis`.
    #[must_use]
    pub fn straight(lengths: &[f64], head: V3, axis: V3) -> Self {
        let total: f64 = lengths.iter().sum();
        let keep_m = total + 0.5;
        let n = (keep_m / TRAIL_STEP_M).ceil() as usize + 2;
        // Room for the trim slack and a back-out's extension: the trail
        // never outgrows this, so stepping does not allocate.
        let mut trail = VecDeque::with_capacity(2 * n + 256);
        trail.extend((1..=n).map(|i| vec3::axpy(head, -(i as f64) * TRAIL_STEP_M, axis)));
        let mut b = Self {
            lengths: lengths.to_vec(),
            trail,
            head,
            origins: vec![[0.0; 3]; lengths.len()],
            rotations: vec![Matrix3::identity(); lengths.len()],
            joints: vec![JointRecord::default(); lengths.len().saturating_sub(1)],
            keep_m,
        };
        b.rotations[0] = level_frame(axis);
        b.update_chain();
        b
    }

    /// Head front-face centre, map frame.
    #[must_use]
    pub fn head(&self) -> V3 {
        self.head
    }

    /// Head axis (unit), map frame.
    #[must_use]
    pub fn head_axis(&self) -> V3 {
        let c = self.rotations[0].column(0);
        [c[0], c[1], c[2]]
    }

    /// Head orientation as a unit quaternion `[w, x, y, z]`.
    #[must_use]
    pub fn head_quaternion_wxyz(&self) -> [f64; 4] {
        let q = UnitQuaternion::from_rotation_matrix(&Rotation3::from_matrix_unchecked(
            self.rotations[0],
        ));
        [q.w, q.i, q.j, q.k]
    }

    /// Map-frame point of module `k`'s frame point `p`.
    #[must_use]
    pub fn module_point(&self, k: usize, p: V3) -> V3 {
        vec3::add(self.origins[k], from_v(&(self.rotations[k] * to_v(p))))
    }

    /// Map-frame direction of module `k`'s frame direction `d`.
    #[must_use]
    pub fn module_dir(&self, k: usize, d: V3) -> V3 {
        from_v(&(self.rotations[k] * to_v(d)))
    }

    /// Module-frame direction of the map-frame direction `d`.
    #[must_use]
    pub fn to_module_dir(&self, k: usize, d: V3) -> V3 {
        from_v(&(self.rotations[k].transpose() * to_v(d)))
    }

    /// Move the head forward to `new_head` (the trail grows behind it).
    pub fn advance_to(&mut self, new_head: V3) {
        let old_axis = self.head_axis();
        self.head = new_head;
        let last = self.trail.front().copied().unwrap_or(new_head);
        let d = vec3::dist(new_head, last);
        if d >= TRAIL_STEP_M {
            // Fill evenly so the trail spacing stays near TRAIL_STEP_M.
            let n = (d / TRAIL_STEP_M).floor() as usize;
            for i in 1..=n {
                let f = (i as f64 * TRAIL_STEP_M) / d;
                self.trail
                    .push_front(vec3::add(last, vec3::scale(vec3::sub(new_head, last), f)));
            }
        }
        self.transport_head(old_axis);
    }

    /// Move the head back along its trail by `dist_m`. Beyond the stored
    /// trail the tail goes on straight, each new trail point passed through
    /// `clamp` (which keeps it inside the walls, `None` where nothing
    /// fits), so a backing robot slides along the wall its tail meets.
    pub fn retreat(&mut self, dist_m: f64, clamp: &dyn Fn(V3) -> Option<V3>) {
        let old_axis = self.head_axis();
        // Make sure the trail reaches keep_m + dist_m behind the head.
        let mut arc = 0.0;
        let mut prev = self.head;
        for q in &self.trail {
            arc += vec3::dist(prev, *q);
            prev = *q;
        }
        let mut guard = 0;
        while arc < self.keep_m + dist_m + 0.05 && guard < 100_000 {
            guard += 1;
            let n = self.trail.len();
            let (a, b) = match n {
                0 => (self.head, self.head),
                1 => (self.head, self.trail[0]),
                _ => (self.trail[n - 2], self.trail[n - 1]),
            };
            let dir = vec3::unit(vec3::sub(b, a)).unwrap_or(vec3::scale(self.head_axis(), -1.0));
            let Some(p) = clamp(vec3::axpy(b, TRAIL_STEP_M, dir)) else {
                break; // nowhere for the tail to go
            };
            let step = vec3::dist(p, b);
            if step < 0.1 * TRAIL_STEP_M {
                break; // jammed: the tail cannot go further
            }
            self.trail.push_back(p);
            arc += step;
        }
        let mut left = dist_m;
        let mut pos = self.head;
        while self.trail.len() > 1 {
            let Some(&next) = self.trail.front() else {
                break;
            };
            let d = vec3::dist(pos, next);
            if d > left {
                pos = vec3::add(pos, vec3::scale(vec3::sub(next, pos), left / d));
                break;
            }
            left -= d;
            pos = next;
            self.trail.pop_front();
        }
        self.head = pos;
        self.transport_head(old_axis);
    }

    fn extend_tail(&mut self) {
        let n = self.trail.len();
        let (a, b) = match n {
            0 => (
                vec3::axpy(self.head, TRAIL_STEP_M, self.head_axis()),
                self.head,
            ),
            1 => (self.head, self.trail[0]),
            _ => (self.trail[n - 2], self.trail[n - 1]),
        };
        let dir = vec3::unit(vec3::sub(b, a)).unwrap_or(vec3::scale(self.head_axis(), -1.0));
        let mut last = b;
        for _ in 0..64 {
            last = vec3::axpy(last, TRAIL_STEP_M, dir);
            self.trail.push_back(last);
        }
    }

    fn transport_head(&mut self, old_axis: V3) {
        // Head axis: the chord from the first joint to the head.
        let j0 = self.point_behind(self.head, 0, self.lengths[0]).0;
        let new_axis = vec3::unit(vec3::sub(self.head, j0)).unwrap_or(old_axis);
        let c = vec3::dot(old_axis, new_axis).clamp(-1.0, 1.0);
        let ax = vec3::cross(old_axis, new_axis);
        let s = vec3::norm(ax);
        if s > 1e-15 {
            let angle = libm::atan2(s, c);
            let rot = Rotation3::from_axis_angle(
                &nalgebra::Unit::new_unchecked(to_v(vec3::scale(ax, 1.0 / s))),
                angle,
            );
            self.rotations[0] = rot.matrix() * self.rotations[0];
        }
        // Re-orthonormalise against drift.
        let x = new_axis;
        let yc = self.rotations[0].column(1);
        let y = vec3::unit(vec3::reject([yc[0], yc[1], yc[2]], x))
            .unwrap_or_else(|| vec3::perpendicular(x));
        let z = vec3::cross(x, y);
        self.rotations[0] = Matrix3::from_columns(&[to_v(x), to_v(y), to_v(z)]);
        self.update_chain();
        self.trim();
    }

    /// The first point on the trail (searching from trail index `from`) at
    /// distance `len` from `p`; returns it and the trail index reached.
    fn point_behind(&mut self, p: V3, from: usize, len: f64) -> (V3, usize) {
        let mut i = from;
        let mut prev = if from == 0 {
            self.head
        } else {
            self.trail[from - 1]
        };
        loop {
            if i >= self.trail.len() {
                self.extend_tail();
            }
            let q = self.trail[i];
            let dq = vec3::sub(p, q);
            if vec3::dot(dq, dq) >= len * len {
                // Intersect segment prev->q with the sphere |x - p| = len.
                let d = vec3::sub(q, prev);
                let f = vec3::sub(prev, p);
                let a = vec3::dot(d, d);
                let b = 2.0 * vec3::dot(f, d);
                let c = vec3::dot(f, f) - len * len;
                let disc = (b * b - 4.0 * a * c).max(0.0);
                let t = if a > 0.0 {
                    ((-b + libm::sqrt(disc)) / (2.0 * a)).clamp(0.0, 1.0)
                } else {
                    1.0
                };
                return (vec3::axpy(prev, t, d), i);
            }
            prev = q;
            i += 1;
        }
    }

    fn update_chain(&mut self) {
        let n = self.lengths.len();
        // Joint points on the trail: J_0 = head, J_{k+1} at chord L_k behind J_k.
        let mut idx = 0;
        let mut prev = self.head;
        self.origins[0] = self.head;
        for k in 0..n {
            let (jp, i2) = self.point_behind(prev, idx, self.lengths[k]);
            idx = i2;
            if k == 0 {
                prev = jp;
                continue;
            }
            // Module k spans J_k (= prev) to J_{k+1} (= jp).
            let xk = vec3::unit(vec3::sub(prev, jp)).unwrap_or_else(|| {
                let c = self.rotations[k - 1].column(0);
                [c[0], c[1], c[2]]
            });
            self.set_joint(k - 1, xk);
            prev = jp;
        }
    }

    /// Joint `k` (between modules `k` and `k + 1`): the pitch and yaw that
    /// turn module `k`'s frame so its x axis becomes `x_next`; places module
    /// `k + 1` by the convention.
    fn set_joint(&mut self, k: usize, x_next: V3) {
        // d = R_k^T x_{k+1} = (cos y cos p, sin y cos p, -sin p).
        let d = self.rotations[k].transpose() * to_v(x_next);
        let pitch = libm::asin((-d.z).clamp(-1.0, 1.0));
        let yaw = libm::atan2(d.y, d.x);
        self.joints[k] = JointRecord {
            pitch_rad: pitch,
            yaw_rad: yaw,
        };
        let rz = Rotation3::from_axis_angle(&Vector3::z_axis(), yaw);
        let ry = Rotation3::from_axis_angle(&Vector3::y_axis(), pitch);
        self.rotations[k + 1] = self.rotations[k] * rz.matrix() * ry.matrix();
        let c = self.rotations[k].column(0);
        self.origins[k + 1] = vec3::axpy(self.origins[k], -self.lengths[k], [c[0], c[1], c[2]]);
    }

    fn trim(&mut self) {
        // Trim only when the trail is a quarter longer than needed (the
        // walk below is the costliest part of a step otherwise).
        let need = (self.keep_m / TRAIL_STEP_M) as usize + 8;
        if self.trail.len() < need + need / 4 {
            return;
        }
        // Drop trail points more than keep_m behind the head (path length).
        let mut s = 0.0;
        let mut prev = self.head;
        let mut keep = self.trail.len();
        for (i, q) in self.trail.iter().enumerate() {
            s += vec3::dist(prev, *q);
            prev = *q;
            if s > self.keep_m {
                keep = i + 1;
                break;
            }
        }
        self.trail.truncate(keep);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn chain_follows_convention_and_path() {
        let mut b = Body::straight(&[0.2, 0.2, 0.2], [0.0, 0.0, 0.0], [1.0, 0.0, 0.0]);
        assert!(
            (b.origins[2][0] + 0.4).abs() < 1e-12,
            "{:?} {:?}",
            b.origins,
            b.rotations[0]
        );
        // Drive a quarter circle of radius 1 m in the x-y plane.
        for i in 1..=400 {
            let a = f64::from(i) / 400.0 * core::f64::consts::FRAC_PI_2;
            b.advance_to([libm::sin(a), 1.0 - libm::cos(a), 0.0]);
        }
        // Joint composition reproduces every frame and origin.
        for k in 0..2 {
            let j = b.joints[k];
            let rz = Rotation3::from_axis_angle(&Vector3::z_axis(), j.yaw_rad);
            let ry = Rotation3::from_axis_angle(&Vector3::y_axis(), j.pitch_rad);
            let r = b.rotations[k] * rz.matrix() * ry.matrix();
            assert!((r - b.rotations[k + 1]).norm() < 1e-12);
            let o = b.module_point(k, [-0.2, 0.0, 0.0]);
            assert!(vec3::dist(o, b.origins[k + 1]) < 1e-12);
        }
        // In a planar left turn each trailing module points to the right of
        // the one ahead (negative yaw about +z), by the chord angle
        // 2 asin(L / 2R) = 2 asin(0.1) on a 1 m circle; no pitch.
        let chord = 2.0 * libm::asin(0.1);
        for j in &b.joints {
            assert!((j.yaw_rad + chord).abs() < 0.01, "{j:?}");
            assert!(j.pitch_rad.abs() < 1e-9);
        }
        // The joints stay near the circle the head drove (chords cut inside).
        for o in &b.origins[1..] {
            let r = libm::hypot(o[0], o[1] - 1.0);
            assert!((r - 1.0).abs() < 0.01, "r = {r}");
        }
        // Backing up retraces the trail.
        let before = b.origins[1];
        b.retreat(0.2, &|p| Some(p));
        assert!(vec3::dist(b.head(), before) < 0.01);
    }
}
