//! The robot body: a chain of rigid cylindrical modules, its forward
//! kinematics, and where the contact sensors sit on its skin.
//!
//! # Conventions (shared with the simulator's truth model; keep exactly)
//!
//! - *Map frame*: x, y horizontal, z up, metres.
//! - *Module frame* `k` (0 is the head, whose frame is the head / probe
//!   frame): +x forward along the module axis, +y left, +z the module's
//!   "up" mark. Its origin is the centre of the module's FRONT face; the
//!   module body occupies x in `[-L_k, 0]` with radius `r_k`.
//! - [`HeadPose`]: `orientation_wxyz` rotates head-frame vectors into the
//!   map frame; `position_m` is the head module's front-face centre in the
//!   map frame. So `module_to_map[0]` is exactly that pose.
//! - Joint `k` joins module `k` to module `k + 1` behind it and sits at the
//!   rear-face centre of module `k`:
//!   `origin_{k+1} = origin_k + R_k (-L_k, 0, 0)`,
//!   `R_{k+1} = R_k Rz(yaw_k) Ry(pitch_k)`, with `Rz`, `Ry` the usual
//!   right-handed elementary rotations about module `k`'s own z and y axes.
//!   In isometry form: `module_{k+1}_to_map = module_k_to_map *
//!   (translation (-L_k, 0, 0), rotation Rz(yaw_k) Ry(pitch_k))`.
//! - A contact sensor on module `k` at axial distance `s` behind the front
//!   face and angle `psi` around the axis, measured from +y toward +z, has
//!   skin point `(-s, r cos psi, r sin psi)` and outward normal
//!   `(0, cos psi, sin psi)`, both in the module frame.
//! - A *nose-cap* sensor on the head (module 0) at polar angle `theta`
//!   from the head axis and angle `psi` around it sits on the nose cap, the
//!   hemisphere of the head's radius `r` on its front face (the simulator
//!   keeps this ball clear of the walls within the skin compliance): skin
//!   point `r (cos theta, sin theta cos psi, sin theta sin psi)` and outward
//!   normal `(cos theta, sin theta cos psi, sin theta sin psi)`, module
//!   frame. At `theta = 0` it is the nose tip, with an axial normal.
//! - `Contact.sensor` indexes the sensors *of that module*, in the order
//!   they appear in [`BodyConfig::sensors`].
//!
//! The body centre line is the polyline through the module origins (each
//! module's axis runs from its front-face centre to its rear-face centre,
//! which is the next module's origin); [`Body::station`] walks it by arc
//! length behind the head.
//!
//! Configuration is validated once, in [`Body::new`]; after that every
//! lookup is by index with `.get()` and nothing can fail except on bad
//! run-time input (pose, joints), which [`Body::module_poses`] checks.

use crate::frame::{HeadPose, JointAngles};
use nalgebra::{Isometry3, Quaternion, Translation3, Unit, UnitQuaternion, Vector3};

/// Geometry of one module.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct ModuleSpec {
    /// Length along the module axis, m (> 0).
    pub length_m: f64,
    /// Skin radius, m (> 0).
    pub radius_m: f64,
}

/// Placement of one contact sensor on a module's skin.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SensorSpec {
    /// Module carrying the sensor (0 is the head).
    pub module: u16,
    /// Axial distance behind the module's front face, m, in `[0, L]`.
    pub axial_m: f64,
    /// Angle around the module axis from +y toward +z, rad (finite).
    pub angle_rad: f64,
    /// On the head's nose cap at this polar angle from the head axis, rad,
    /// in `[0, pi/2]` (`axial_m` is then unused); `None`: on the side skin.
    pub cap_polar_rad: Option<f64>,
}

/// Body configuration: up to `M` modules and `S` contact sensors in all.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BodyConfig<const M: usize, const S: usize> {
    /// Module geometry, head first; only the first `module_count` count.
    pub modules: [ModuleSpec; M],
    /// Number of modules in use (1..=M).
    pub module_count: usize,
    /// Sensor placements; only the first `sensor_count` count.
    pub sensors: [SensorSpec; S],
    /// Number of sensors in use (0..=S).
    pub sensor_count: usize,
    /// 1-sigma joint-angle uncertainty, rad (>= 0), used to grow wall-point
    /// uncertainty with lever arm behind each joint.
    pub joint_sigma_rad: f64,
}

impl<const M: usize, const S: usize> BodyConfig<M, S> {
    /// A chain of `count` identical modules (clamped to `M`) and no sensors.
    #[must_use]
    pub fn uniform(count: usize, module: ModuleSpec) -> Self {
        Self {
            modules: [module; M],
            module_count: count.min(M),
            sensors: [SensorSpec::default(); S],
            sensor_count: 0,
            joint_sigma_rad: 0.0,
        }
    }

    /// Append a sensor. Returns `false` (and changes nothing) when all `S`
    /// slots are used. Placement is checked by [`Body::new`].
    pub fn push_sensor(&mut self, sensor: SensorSpec) -> bool {
        match self.sensors.get_mut(self.sensor_count) {
            Some(slot) => {
                *slot = sensor;
                self.sensor_count += 1;
                true
            }
            None => false,
        }
    }
}

/// What is wrong with a [`BodyConfig`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BodyConfigError {
    /// `module_count` is 0 or above the capacity `M`.
    ModuleCount {
        /// The count given.
        count: usize,
        /// The capacity `M`.
        capacity: usize,
    },
    /// A module length that is not finite and positive.
    ModuleLength {
        /// Module index.
        module: usize,
        /// The value given, m.
        length_m: f64,
    },
    /// A module radius that is not finite and positive.
    ModuleRadius {
        /// Module index.
        module: usize,
        /// The value given, m.
        radius_m: f64,
    },
    /// `sensor_count` above the capacity `S`.
    SensorCount {
        /// The count given.
        count: usize,
        /// The capacity `S`.
        capacity: usize,
    },
    /// A sensor on a module that does not exist.
    SensorModule {
        /// Sensor index in the configuration.
        sensor: usize,
        /// The module it names.
        module: u16,
    },
    /// A sensor outside its module's length (or not finite).
    SensorAxial {
        /// Sensor index in the configuration.
        sensor: usize,
        /// The value given, m.
        axial_m: f64,
        /// The module length, m.
        length_m: f64,
    },
    /// A nose-cap sensor off the head, or with a polar angle outside
    /// `[0, pi/2]`.
    SensorCap {
        /// Sensor index in the configuration.
        sensor: usize,
        /// Its module.
        module: u16,
        /// The polar angle given, rad.
        polar_rad: f64,
    },
    /// A sensor angle that is not finite.
    SensorAngle {
        /// Sensor index in the configuration.
        sensor: usize,
        /// The value given, rad.
        angle_rad: f64,
    },
    /// Joint sigma not finite or negative.
    JointSigma {
        /// The value given, rad.
        joint_sigma_rad: f64,
    },
}

/// What is wrong with run-time kinematic input.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum KinematicsError {
    /// A head-pose component is not finite.
    PoseNotFinite,
    /// The head quaternion is too far from unit norm to be trusted
    /// (|norm - 1| > [`QUATERNION_NORM_TOLERANCE`]).
    QuaternionNotUnit {
        /// Its norm.
        norm: f64,
    },
    /// A pose sigma that is not finite and >= 0.
    PoseSigma {
        /// Position sigma given, m.
        position_sigma_m: f64,
        /// Attitude sigma given, rad.
        attitude_sigma_rad: f64,
    },
    /// Fewer joints than `module_count - 1`.
    TooFewJoints {
        /// Joints needed.
        needed: usize,
        /// Joints given.
        given: usize,
    },
    /// A joint angle that is not finite.
    JointNotFinite {
        /// Joint index.
        joint: usize,
    },
}

/// Largest accepted departure of the head quaternion's norm from 1; within
/// it the quaternion is normalised.
pub const QUATERNION_NORM_TOLERANCE: f64 = 1e-3;

/// A validated body. Build with [`Body::new`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Body<const M: usize, const S: usize> {
    config: BodyConfig<M, S>,
    /// Global sensor indices grouped by module, configuration order kept.
    by_module: [u16; S],
    /// Start of each module's run in `by_module`.
    module_first: [u16; M],
    /// Number of sensors on each module.
    module_sensor_count: [u16; M],
    /// Arc length from the head front face to each module's front face, m.
    front_arc_m: [f64; M],
    total_length_m: f64,
}

/// Every module's pose in the map frame for one head pose and joint state.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ModulePoses<const M: usize> {
    /// `module_to_map[k]` maps module-`k`-frame points into the map frame.
    /// Entries at and beyond `count` repeat the last module's pose.
    pub module_to_map: [Isometry3<f64>; M],
    /// Modules in use.
    pub count: usize,
    /// Head position 1-sigma, m (from the pose).
    pub position_sigma_m: f64,
    /// Head attitude 1-sigma, rad (from the pose).
    pub attitude_sigma_rad: f64,
}

impl<const M: usize> ModulePoses<M> {
    /// Pose of module `k` (module frame to map frame), if it exists.
    #[must_use]
    pub fn module_to_map(&self, k: usize) -> Option<&Isometry3<f64>> {
        if k < self.count {
            self.module_to_map.get(k)
        } else {
            None
        }
    }
}

/// A place on the body centre line, with the local path tangent.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Station {
    /// Arc length behind the head front face along the body centre line, m.
    pub arc_m: f64,
    /// Point on the centre line, map frame, m.
    pub point_map_m: Vector3<f64>,
    /// Unit tangent pointing forward (toward the head), map frame.
    pub tangent_map: Unit<Vector3<f64>>,
}

/// A sensor's skin point and outward normal, module frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SkinPoint {
    /// Skin point in the module frame, m.
    pub point_module_m: Vector3<f64>,
    /// Outward unit normal in the module frame.
    pub normal_module: Unit<Vector3<f64>>,
}

/// Rotation by `angle` about the z axis, as a unit quaternion built with
/// `libm` (w = cos(a/2), z = sin(a/2)).
fn rot_z(angle_rad: f64) -> UnitQuaternion<f64> {
    let h = 0.5 * angle_rad;
    UnitQuaternion::new_unchecked(Quaternion::new(libm::cos(h), 0.0, 0.0, libm::sin(h)))
}

/// Rotation by `angle` about the y axis (w = cos(a/2), y = sin(a/2)).
fn rot_y(angle_rad: f64) -> UnitQuaternion<f64> {
    let h = 0.5 * angle_rad;
    UnitQuaternion::new_unchecked(Quaternion::new(libm::cos(h), 0.0, libm::sin(h), 0.0))
}

/// Normalise a quaternion with `libm::sqrt`.
fn normalized(q: Quaternion<f64>) -> UnitQuaternion<f64> {
    let n = libm::sqrt(q.w * q.w + q.i * q.i + q.j * q.j + q.k * q.k);
    UnitQuaternion::new_unchecked(Quaternion::new(q.w / n, q.i / n, q.j / n, q.k / n))
}

/// The head pose as an isometry (head frame to map frame), validated.
///
/// # Errors
/// [`KinematicsError`] for non-finite values, a quaternion whose norm is
/// off by more than [`QUATERNION_NORM_TOLERANCE`], or bad sigmas.
pub fn head_to_map(pose: &HeadPose) -> Result<Isometry3<f64>, KinematicsError> {
    let [w, x, y, z] = pose.orientation_wxyz;
    if !crate::num::all_finite(&pose.position_m) || !crate::num::all_finite(&[w, x, y, z]) {
        return Err(KinematicsError::PoseNotFinite);
    }
    if !(pose.position_sigma_m.is_finite()
        && pose.position_sigma_m >= 0.0
        && pose.attitude_sigma_rad.is_finite()
        && pose.attitude_sigma_rad >= 0.0)
    {
        return Err(KinematicsError::PoseSigma {
            position_sigma_m: pose.position_sigma_m,
            attitude_sigma_rad: pose.attitude_sigma_rad,
        });
    }
    let norm = libm::sqrt(w * w + x * x + y * y + z * z);
    if libm::fabs(norm - 1.0) > QUATERNION_NORM_TOLERANCE || norm.is_nan() {
        return Err(KinematicsError::QuaternionNotUnit { norm });
    }
    let q = normalized(Quaternion::new(w, x, y, z));
    let [px, py, pz] = pose.position_m;
    Ok(Isometry3::from_parts(Translation3::new(px, py, pz), q))
}

impl<const M: usize, const S: usize> Body<M, S> {
    /// Validate a configuration and build the lookup tables.
    ///
    /// # Errors
    /// [`BodyConfigError`] naming the first bad module or sensor.
    pub fn new(config: BodyConfig<M, S>) -> Result<Self, BodyConfigError> {
        let mc = config.module_count;
        if mc == 0 || mc > M {
            return Err(BodyConfigError::ModuleCount {
                count: mc,
                capacity: M,
            });
        }
        if config.sensor_count > S {
            return Err(BodyConfigError::SensorCount {
                count: config.sensor_count,
                capacity: S,
            });
        }
        if !(config.joint_sigma_rad.is_finite() && config.joint_sigma_rad >= 0.0) {
            return Err(BodyConfigError::JointSigma {
                joint_sigma_rad: config.joint_sigma_rad,
            });
        }
        let mut front_arc_m = [0.0; M];
        let mut arc = 0.0;
        for (k, (m, slot)) in config
            .modules
            .iter()
            .zip(front_arc_m.iter_mut())
            .take(mc)
            .enumerate()
        {
            if !(m.length_m.is_finite() && m.length_m > 0.0) {
                return Err(BodyConfigError::ModuleLength {
                    module: k,
                    length_m: m.length_m,
                });
            }
            if !(m.radius_m.is_finite() && m.radius_m > 0.0) {
                return Err(BodyConfigError::ModuleRadius {
                    module: k,
                    radius_m: m.radius_m,
                });
            }
            *slot = arc;
            arc += m.length_m;
        }
        // Later (unused) slots continue the arc so lookups stay monotone.
        for slot in front_arc_m.iter_mut().skip(mc) {
            *slot = arc;
        }
        let mut module_sensor_count = [0u16; M];
        for (i, s) in config.sensors.iter().take(config.sensor_count).enumerate() {
            let k = usize::from(s.module);
            let Some(m) = config.modules.get(k).filter(|_| k < mc) else {
                return Err(BodyConfigError::SensorModule {
                    sensor: i,
                    module: s.module,
                });
            };
            if !(s.axial_m.is_finite() && s.axial_m >= 0.0 && s.axial_m <= m.length_m) {
                return Err(BodyConfigError::SensorAxial {
                    sensor: i,
                    axial_m: s.axial_m,
                    length_m: m.length_m,
                });
            }
            if let Some(th) = s.cap_polar_rad
                && !(s.module == 0
                    && th.is_finite()
                    && (0.0..=core::f64::consts::FRAC_PI_2).contains(&th))
            {
                return Err(BodyConfigError::SensorCap {
                    sensor: i,
                    module: s.module,
                    polar_rad: th,
                });
            }
            if !s.angle_rad.is_finite() {
                return Err(BodyConfigError::SensorAngle {
                    sensor: i,
                    angle_rad: s.angle_rad,
                });
            }
            if let Some(c) = module_sensor_count.get_mut(k) {
                // S <= u16::MAX is not assumed: saturate, and the
                // try_from below rejects what cannot be indexed.
                *c = c.saturating_add(1);
            }
        }
        let mut module_first = [0u16; M];
        let mut run = 0u16;
        for (first, count) in module_first.iter_mut().zip(module_sensor_count.iter()) {
            *first = run;
            run = run.saturating_add(*count);
        }
        let mut by_module = [0u16; S];
        let mut fill = [0u16; M];
        for (i, s) in config.sensors.iter().take(config.sensor_count).enumerate() {
            let k = usize::from(s.module);
            let (Some(first), Some(f)) = (module_first.get(k), fill.get_mut(k)) else {
                continue;
            };
            let Ok(gi) = u16::try_from(i) else {
                return Err(BodyConfigError::SensorCount {
                    count: config.sensor_count,
                    capacity: usize::from(u16::MAX),
                });
            };
            if let Some(slot) = by_module.get_mut(usize::from(first.saturating_add(*f))) {
                *slot = gi;
            }
            *f = f.saturating_add(1);
        }
        Ok(Self {
            config,
            by_module,
            module_first,
            module_sensor_count,
            front_arc_m,
            total_length_m: arc,
        })
    }

    /// The validated configuration.
    #[must_use]
    pub const fn config(&self) -> &BodyConfig<M, S> {
        &self.config
    }

    /// Modules in use.
    #[must_use]
    pub const fn module_count(&self) -> usize {
        self.config.module_count
    }

    /// Total body length along the centre line, m.
    #[must_use]
    pub const fn total_length_m(&self) -> f64 {
        self.total_length_m
    }

    /// Geometry of module `k`, if it exists.
    #[must_use]
    pub fn module(&self, k: usize) -> Option<&ModuleSpec> {
        if k < self.config.module_count {
            self.config.modules.get(k)
        } else {
            None
        }
    }

    /// Arc length from the head front face to module `k`'s front face, m.
    #[must_use]
    pub fn module_front_arc_m(&self, k: usize) -> Option<f64> {
        if k < self.config.module_count {
            self.front_arc_m.get(k).copied()
        } else {
            None
        }
    }

    /// Number of sensors on module `k` (0 for a missing module).
    #[must_use]
    pub fn sensors_on_module(&self, k: usize) -> usize {
        if k < self.config.module_count {
            self.module_sensor_count
                .get(k)
                .map_or(0, |c| usize::from(*c))
        } else {
            0
        }
    }

    /// The `j`-th sensor of module `k` (configuration order), as
    /// `Contact.sensor` indexes it.
    #[must_use]
    pub fn sensor(&self, k: usize, j: usize) -> Option<&SensorSpec> {
        let count = usize::from(*self.module_sensor_count.get(k)?);
        if k >= self.config.module_count || j >= count {
            return None;
        }
        let first = usize::from(*self.module_first.get(k)?);
        let gi = usize::from(*self.by_module.get(first + j)?);
        self.config.sensors.get(gi)
    }

    /// Skin point and outward normal of the `j`-th sensor of module `k`, in
    /// module `k`'s frame: `(-s, r cos psi, r sin psi)` and
    /// `(0, cos psi, sin psi)` on the side skin; on the nose cap as the
    /// module docs give.
    #[must_use]
    pub fn skin_point(&self, k: usize, j: usize) -> Option<SkinPoint> {
        let s = self.sensor(k, j)?;
        let m = self.module(k)?;
        let (sp, cp) = (libm::sin(s.angle_rad), libm::cos(s.angle_rad));
        if let Some(th) = s.cap_polar_rad {
            let (st, ct) = (libm::sin(th), libm::cos(th));
            let n = Vector3::new(ct, st * cp, st * sp);
            return Some(SkinPoint {
                point_module_m: n * m.radius_m,
                normal_module: Unit::new_normalize(n),
            });
        }
        Some(SkinPoint {
            point_module_m: Vector3::new(-s.axial_m, m.radius_m * cp, m.radius_m * sp),
            normal_module: Unit::new_unchecked(Vector3::new(0.0, cp, sp)),
        })
    }

    /// Forward kinematics: every module's pose in the map frame.
    ///
    /// `joints` needs at least `module_count - 1` entries (joint `k` is
    /// between modules `k` and `k + 1`); extra entries are ignored.
    ///
    /// # Errors
    /// [`KinematicsError`] for a bad pose, too few or non-finite joints.
    pub fn module_poses(
        &self,
        pose: &HeadPose,
        joints: &[JointAngles],
    ) -> Result<ModulePoses<M>, KinematicsError> {
        let head = head_to_map(pose)?;
        let needed = self.config.module_count - 1;
        if joints.len() < needed {
            return Err(KinematicsError::TooFewJoints {
                needed,
                given: joints.len(),
            });
        }
        for (i, j) in joints.iter().take(needed).enumerate() {
            if !(j.pitch_rad.is_finite() && j.yaw_rad.is_finite()) {
                return Err(KinematicsError::JointNotFinite { joint: i });
            }
        }
        let mut module_to_map = [head; M];
        let mut current = head;
        for (k, slot) in module_to_map.iter_mut().enumerate().skip(1) {
            if k < self.config.module_count {
                let (Some(prev), Some(joint)) = (self.config.modules.get(k - 1), joints.get(k - 1))
                else {
                    break;
                };
                let rot = rot_z(joint.yaw_rad) * rot_y(joint.pitch_rad);
                let step = Isometry3::from_parts(Translation3::new(-prev.length_m, 0.0, 0.0), rot);
                let next = current * step;
                // Renormalise the composed rotation so a long chain cannot
                // drift off the unit sphere.
                current =
                    Isometry3::from_parts(next.translation, normalized(next.rotation.into_inner()));
            }
            *slot = current;
        }
        Ok(ModulePoses {
            module_to_map,
            count: self.config.module_count,
            position_sigma_m: pose.position_sigma_m,
            attitude_sigma_rad: pose.attitude_sigma_rad,
        })
    }

    /// The point of the body centre line `arc_m` behind the head front face
    /// and the forward tangent there (the axis of the module containing it;
    /// at a joint, the module ahead of it). `None` when `arc_m` is not
    /// finite or outside `[0, total_length_m]`.
    #[must_use]
    pub fn station(&self, poses: &ModulePoses<M>, arc_m: f64) -> Option<Station> {
        if !(arc_m.is_finite() && arc_m >= 0.0 && arc_m <= self.total_length_m) {
            return None;
        }
        let mc = self.config.module_count.min(poses.count);
        let mut k = 0;
        for (i, front) in self.front_arc_m.iter().enumerate().take(mc) {
            if *front <= arc_m {
                k = i;
            }
        }
        // At an exact joint, report the module ahead of it.
        if k > 0 && self.front_arc_m.get(k).copied() == Some(arc_m) {
            k -= 1;
        }
        let iso = poses.module_to_map(k)?;
        let local = arc_m - self.front_arc_m.get(k)?;
        let p = iso * nalgebra::Point3::new(-local, 0.0, 0.0);
        let t = iso.rotation * Vector3::x();
        Some(Station {
            arc_m,
            point_map_m: p.coords,
            tangent_map: Unit::new_normalize(t),
        })
    }

    /// 1-sigma position uncertainty, m, of a point fixed to module `k` at
    /// `point_module_m`, from the head pose sigmas (position, plus attitude
    /// times the lever arm from the head origin) and the joint sigma times
    /// the lever arm from each joint ahead of module `k`. Independent
    /// contributions add in quadrature.
    #[must_use]
    pub fn point_sigma_m(
        &self,
        poses: &ModulePoses<M>,
        k: usize,
        point_module_m: &Vector3<f64>,
    ) -> f64 {
        let Some(iso) = poses.module_to_map(k) else {
            return f64::INFINITY;
        };
        let p = (iso * nalgebra::Point3::from(*point_module_m)).coords;
        let head = poses
            .module_to_map
            .first()
            .map_or(p, |h| h.translation.vector);
        let lever_head = (p - head).norm();
        let mut var = poses.position_sigma_m * poses.position_sigma_m
            + sq(poses.attitude_sigma_rad * lever_head);
        let js = self.config.joint_sigma_rad;
        if js > 0.0 {
            // Joint j sits at module (j + 1)'s origin; it moves every module
            // behind it. Each joint has two axes (yaw, pitch).
            for j in 1..=k {
                if let Some(jp) = poses.module_to_map(j) {
                    let lever = (p - jp.translation.vector).norm();
                    var += 2.0 * sq(js * lever);
                }
            }
        }
        libm::sqrt(var)
    }
}

fn sq(x: f64) -> f64 {
    x * x
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    const MOD: ModuleSpec = ModuleSpec {
        length_m: 0.3,
        radius_m: 0.05,
    };

    fn level_pose() -> HeadPose {
        HeadPose {
            position_m: [1.0, 2.0, 3.0],
            orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
            position_sigma_m: 0.0,
            attitude_sigma_rad: 0.0,
        }
    }

    fn body3() -> Body<4, 8> {
        let mut c = BodyConfig::<4, 8>::uniform(3, MOD);
        assert!(c.push_sensor(SensorSpec {
            module: 1,
            axial_m: 0.1,
            angle_rad: 0.0,
            cap_polar_rad: None,
        }));
        assert!(c.push_sensor(SensorSpec {
            module: 0,
            axial_m: 0.2,
            angle_rad: core::f64::consts::FRAC_PI_2,
            cap_polar_rad: None,
        }));
        assert!(c.push_sensor(SensorSpec {
            module: 1,
            axial_m: 0.3,
            angle_rad: core::f64::consts::PI,
            cap_polar_rad: None,
        }));
        Body::new(c).unwrap()
    }

    #[test]
    fn straight_chain_lies_behind_the_head() {
        let b = body3();
        let poses = b
            .module_poses(&level_pose(), &[JointAngles::default(); 2])
            .unwrap();
        for k in 0..3 {
            let t = poses.module_to_map(k).unwrap().translation.vector;
            assert_relative_eq!(t.x, 1.0 - 0.3 * k as f64, epsilon = 1e-15);
            assert_relative_eq!(t.y, 2.0);
        }
        assert!(poses.module_to_map(3).is_none());
    }

    /// Hand-computed: yaw +90 deg at joint 0 turns module 1 to face +y
    /// (Rz(90) maps +x to +y), so its rear face lies 0.3 m toward -y of
    /// the joint; pitch +90 deg (Ry(90) maps +x to -z) then points module
    /// 2 down, so module 2's own -x direction is up.
    #[test]
    fn yaw_then_pitch_follow_the_convention() {
        let b = body3();
        let joints = [
            JointAngles {
                pitch_rad: 0.0,
                yaw_rad: core::f64::consts::FRAC_PI_2,
            },
            JointAngles {
                pitch_rad: core::f64::consts::FRAC_PI_2,
                yaw_rad: 0.0,
            },
        ];
        let poses = b.module_poses(&level_pose(), &joints).unwrap();
        let m1 = poses.module_to_map(1).unwrap();
        assert_relative_eq!(
            m1.translation.vector,
            Vector3::new(0.7, 2.0, 3.0),
            epsilon = 1e-12
        );
        let fwd1 = m1.rotation * Vector3::x();
        assert_relative_eq!(fwd1, Vector3::new(0.0, 1.0, 0.0), epsilon = 1e-12);
        let m2 = poses.module_to_map(2).unwrap();
        // origin_2 = origin_1 + R_1 (-0.3, 0, 0) = (0.7, 2.0 - 0.3, 3.0)
        assert_relative_eq!(
            m2.translation.vector,
            Vector3::new(0.7, 1.7, 3.0),
            epsilon = 1e-12
        );
        // R_2 x = R_1 Ry(90) x = R_1 (0, 0, -1) = (0, 0, -1)
        let fwd2 = m2.rotation * Vector3::x();
        assert_relative_eq!(fwd2, Vector3::new(0.0, 0.0, -1.0), epsilon = 1e-12);
    }

    #[test]
    fn sensors_are_indexed_per_module_in_config_order() {
        let b = body3();
        assert_eq!(b.sensors_on_module(0), 1);
        assert_eq!(b.sensors_on_module(1), 2);
        assert_eq!(b.sensors_on_module(2), 0);
        assert_relative_eq!(b.sensor(1, 0).unwrap().axial_m, 0.1);
        assert_relative_eq!(b.sensor(1, 1).unwrap().axial_m, 0.3);
        assert!(b.sensor(1, 2).is_none());
        assert!(b.sensor(3, 0).is_none());
        let sp = b.skin_point(0, 0).unwrap();
        assert_relative_eq!(
            sp.point_module_m,
            Vector3::new(-0.2, 0.0, 0.05),
            epsilon = 1e-15
        );
        assert_relative_eq!(sp.normal_module.into_inner(), Vector3::z(), epsilon = 1e-15);
    }

    #[test]
    fn config_errors_name_the_culprit() {
        let mut c = BodyConfig::<4, 8>::uniform(3, MOD);
        c.modules[1].radius_m = 0.0;
        assert_eq!(
            Body::new(c).unwrap_err(),
            BodyConfigError::ModuleRadius {
                module: 1,
                radius_m: 0.0
            }
        );
        let mut c = BodyConfig::<4, 8>::uniform(3, MOD);
        c.push_sensor(SensorSpec {
            module: 3,
            axial_m: 0.0,
            angle_rad: 0.0,
            cap_polar_rad: None,
        });
        assert!(matches!(
            Body::new(c),
            Err(BodyConfigError::SensorModule {
                sensor: 0,
                module: 3
            })
        ));
        let mut c = BodyConfig::<4, 8>::uniform(3, MOD);
        c.push_sensor(SensorSpec {
            module: 0,
            axial_m: 0.31,
            angle_rad: 0.0,
            cap_polar_rad: None,
        });
        assert!(matches!(
            Body::new(c),
            Err(BodyConfigError::SensorAxial { .. })
        ));
        let c = BodyConfig::<4, 8>::uniform(0, MOD);
        assert!(matches!(
            Body::new(c),
            Err(BodyConfigError::ModuleCount { .. })
        ));
        let mut c = BodyConfig::<4, 8>::uniform(2, MOD);
        c.modules[0].length_m = f64::NAN;
        assert!(matches!(
            Body::new(c),
            Err(BodyConfigError::ModuleLength { module: 0, .. })
        ));
    }

    #[test]
    fn runtime_errors() {
        let b = body3();
        let e = b
            .module_poses(&level_pose(), &[JointAngles::default(); 1])
            .unwrap_err();
        assert_eq!(
            e,
            KinematicsError::TooFewJoints {
                needed: 2,
                given: 1
            }
        );
        let mut p = level_pose();
        p.orientation_wxyz = [2.0, 0.0, 0.0, 0.0];
        assert!(matches!(
            b.module_poses(&p, &[JointAngles::default(); 2]),
            Err(KinematicsError::QuaternionNotUnit { .. })
        ));
        let j = [
            JointAngles::default(),
            JointAngles {
                pitch_rad: f64::NAN,
                yaw_rad: 0.0,
            },
        ];
        assert_eq!(
            b.module_poses(&level_pose(), &j).unwrap_err(),
            KinematicsError::JointNotFinite { joint: 1 }
        );
    }

    #[test]
    fn station_walks_the_centre_line() {
        let b = body3();
        let joints = [
            JointAngles {
                pitch_rad: 0.0,
                yaw_rad: core::f64::consts::FRAC_PI_2,
            },
            JointAngles::default(),
        ];
        let poses = b.module_poses(&level_pose(), &joints).unwrap();
        let s = b.station(&poses, 0.45).unwrap();
        assert_relative_eq!(s.point_map_m, Vector3::new(0.7, 1.85, 3.0), epsilon = 1e-12);
        assert_relative_eq!(s.tangent_map.into_inner(), Vector3::y(), epsilon = 1e-12);
        assert!(b.station(&poses, 0.95).is_none());
        let at_joint = b.station(&poses, 0.3).unwrap();
        assert_relative_eq!(
            at_joint.tangent_map.into_inner(),
            Vector3::x(),
            epsilon = 1e-12
        );
    }

    #[test]
    fn sigma_grows_with_lever_arm() {
        let b = body3();
        let mut p = level_pose();
        p.position_sigma_m = 0.01;
        p.attitude_sigma_rad = 0.02;
        let poses = b.module_poses(&p, &[JointAngles::default(); 2]).unwrap();
        let near = b.point_sigma_m(&poses, 0, &Vector3::zeros());
        let far = b.point_sigma_m(&poses, 2, &Vector3::new(-0.3, 0.0, 0.0));
        assert_relative_eq!(near, 0.01, epsilon = 1e-15);
        // lever 0.9 m: sqrt(0.01^2 + (0.02 * 0.9)^2)
        assert_relative_eq!(far, libm::sqrt(1e-4 + 0.018 * 0.018), epsilon = 1e-12);
    }
}
