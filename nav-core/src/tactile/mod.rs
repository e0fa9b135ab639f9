//! Tactile wall sensing: contacts to wall points, cross-sections, throats
//! and openings.
//!
//! # Data flow
//!
//! 1. [`TactileMap::ingest`] takes one [`SensorFrame`] and the [`Body`]:
//!    every contact becomes a [`WallPoint`] in the map frame, kept in a
//!    bounded ring of the `W` most recent points. The whole frame is
//!    validated first (time order, modules, sensors, forces, normals,
//!    pose, joints); on any error nothing is stored.
//! 2. [`TactileMap::section_at`] takes a [`Station`] on the body centre
//!    line (from [`Body::station`]) and fits the local conduit
//!    cross-section: [`SectionEstimate`].
//! 3. [`TactileMap::throat`] runs sections along a list of stations and
//!    looks for a narrowing trend: [`ThroatReport`].
//!    [`TactileMap::openings`] looks around one section for angular
//!    sectors with no wall: [`OpeningReport`]. Both are plain data for
//!    the map and branch decisions downstream.
//!
//! # Wall points
//!
//! A contact on the `j`-th sensor of module `k` (see [`crate::body`] for
//! the skin-point convention) gives the skin point `p_skin` and the
//! contact normal `n` (the measured `Contact.normal_module`, normalised,
//! or the sensor's own outward normal when none is given), both taken to
//! the map frame with `module_to_map[k]`. The wall point is the skin
//! point pushed out along `n` by the penetration depth; the model here
//! assumes a rigid skin and a rigid wall touching it, so the penetration
//! is zero and the wall point *is* the skin point. The normal is kept with
//! the point (it constrains the conduit axis).
//!
//! A contact whose force is below [`TactileConfig::touch_threshold_n`] is
//! a sensor that sampled and felt nothing: it is stored as a *free-space
//! probe* (`touched == false`), evidence that there is no wall at that
//! skin point. Contacts that a frame does not list are no evidence either
//! way (the channel may have dropped them).
//!
//! Each point carries a 1-sigma position uncertainty from the kinematics:
//! head position sigma, attitude sigma times the lever arm from the head
//! origin, and joint sigma times the lever arm behind each joint, in
//! quadrature ([`Body::point_sigma_m`]). Pose errors are common to all
//! points of one frame: they move a fitted section's centre more than its
//! radius.

mod features;
mod section;

pub mod ellipse;
pub mod fit;

pub use features::{
    OPENING_SECTORS, OpeningCandidate, OpeningEvidence, OpeningReport, OpeningSettings,
    OpeningStatus, ThroatReport, ThroatSettings, ThroatStatus,
};
pub use section::{
    AxisSource, CircleSection, LowerBoundReason, PlaneSection, SectionEstimate, SectionFitSettings,
    SectionSettings, SectionShape, T_OVER_Z3, UnknownReason, fit_plane_section,
    fit_plane_section_around, honest_radius_sigma_m, t_sigma_scale,
};

use crate::body::{Body, KinematicsError, ModulePoses, head_to_map};
use crate::frame::{Contact, SensorFrame};
use nalgebra::{Isometry3, Point3, Vector3};

pub use crate::body::Station;

/// One wall observation (or free-space probe) in the map frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WallPoint {
    /// Wall point (skin point, see the module docs), map frame, m.
    pub point_map_m: Vector3<f64>,
    /// Unit contact normal, robot toward wall, map frame.
    pub normal_map: Vector3<f64>,
    /// 1-sigma position uncertainty from the kinematics, m.
    pub sigma_m: f64,
    /// Frame time, s.
    pub time_s: f64,
    /// Contact force, N.
    pub force_n: f64,
    /// Module index.
    pub module: u16,
    /// Sensor index on that module.
    pub sensor: u16,
    /// `true`: the skin touched wall here; `false`: a free-space probe.
    pub touched: bool,
}

impl Default for WallPoint {
    fn default() -> Self {
        Self {
            point_map_m: Vector3::zeros(),
            normal_map: Vector3::x(),
            sigma_m: 0.0,
            time_s: 0.0,
            force_n: 0.0,
            module: 0,
            sensor: 0,
            touched: false,
        }
    }
}

/// Settings for turning contacts into wall points.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TactileConfig {
    /// Force at or above which a contact counts as touching wall, N (> 0).
    /// Below it the contact is a free-space probe.
    pub touch_threshold_n: f64,
    /// Largest accepted `| |normal| - 1 |` of a measured contact normal.
    pub normal_norm_tolerance: f64,
}

impl Default for TactileConfig {
    fn default() -> Self {
        Self {
            touch_threshold_n: 0.2,
            normal_norm_tolerance: 0.05,
        }
    }
}

/// Why a frame or a configuration was rejected. The map is unchanged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum TactileError {
    /// A [`TactileConfig`] field out of range.
    InvalidConfig {
        /// Field name.
        field: &'static str,
        /// Value given.
        value: f64,
    },
    /// Frame time not finite.
    TimeNotFinite {
        /// The value given, s.
        time_s: f64,
    },
    /// Frame time earlier than the last ingested frame.
    TimeOutOfOrder {
        /// This frame's time, s.
        time_s: f64,
        /// Last accepted time, s.
        last_time_s: f64,
    },
    /// `contact_count` exceeds the frame's slots.
    ContactCount {
        /// The count claimed.
        count: usize,
        /// The slots `C`.
        capacity: usize,
    },
    /// Contact on a module the body does not have.
    ContactModule {
        /// Contact index in the frame.
        contact: usize,
        /// Module named.
        module: u16,
        /// Modules in the body.
        module_count: usize,
    },
    /// Contact on a sensor the module does not have.
    ContactSensor {
        /// Contact index in the frame.
        contact: usize,
        /// Module.
        module: u16,
        /// Sensor named.
        sensor: u16,
        /// Sensors on that module.
        sensors_on_module: usize,
    },
    /// Force not finite or negative.
    ContactForce {
        /// Contact index in the frame.
        contact: usize,
        /// Value given, N.
        force_n: f64,
    },
    /// Measured normal not finite or not of unit length.
    ContactNormal {
        /// Contact index in the frame.
        contact: usize,
    },
    /// Bad pose or joints.
    Kinematics(KinematicsError),
}

impl From<KinematicsError> for TactileError {
    fn from(e: KinematicsError) -> Self {
        Self::Kinematics(e)
    }
}

/// What one [`TactileMap::ingest`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct IngestReport {
    /// Wall points stored (touching contacts).
    pub wall_points: usize,
    /// Free-space probes stored (contacts below the touch threshold).
    pub free_probes: usize,
    /// Contacts not placed because the frame had no pose.
    pub skipped_no_pose: usize,
    /// Contacts not placed because the frame had no joints (contacts on
    /// the head module need none).
    pub skipped_no_joints: usize,
    /// Older points overwritten in the ring.
    pub evicted: usize,
}

/// Bounded store of the `W` most recent wall points and free-space probes.
#[derive(Debug, Clone)]
pub struct TactileMap<const W: usize> {
    config: TactileConfig,
    points: [WallPoint; W],
    /// Next slot to write.
    next: usize,
    /// Valid entries.
    len: usize,
    last_time_s: Option<f64>,
}

impl<const W: usize> TactileMap<W> {
    /// An empty map.
    ///
    /// # Errors
    /// [`TactileError::InvalidConfig`] for a threshold that is not finite
    /// and positive, or a tolerance not in `(0, 1)`.
    pub fn new(config: TactileConfig) -> Result<Self, TactileError> {
        if !(config.touch_threshold_n.is_finite() && config.touch_threshold_n > 0.0) {
            return Err(TactileError::InvalidConfig {
                field: "touch_threshold_n",
                value: config.touch_threshold_n,
            });
        }
        if !(config.normal_norm_tolerance > 0.0 && config.normal_norm_tolerance < 1.0) {
            return Err(TactileError::InvalidConfig {
                field: "normal_norm_tolerance",
                value: config.normal_norm_tolerance,
            });
        }
        Ok(Self {
            config,
            points: [WallPoint::default(); W],
            next: 0,
            len: 0,
            last_time_s: None,
        })
    }

    /// The configuration.
    #[must_use]
    pub const fn config(&self) -> &TactileConfig {
        &self.config
    }

    /// Stored entries (wall points and free probes).
    #[must_use]
    pub const fn len(&self) -> usize {
        self.len
    }

    /// True when nothing is stored.
    #[must_use]
    pub const fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Time of the last accepted frame, s.
    #[must_use]
    pub const fn last_time_s(&self) -> Option<f64> {
        self.last_time_s
    }

    /// Stored entries, oldest first.
    pub fn points(
        &self,
    ) -> core::iter::Chain<core::slice::Iter<'_, WallPoint>, core::slice::Iter<'_, WallPoint>> {
        let (older, newer) = self.ordered();
        older.iter().chain(newer.iter())
    }

    /// The stored entries as two slices, oldest first: the ring from the
    /// oldest entry to the end of storage, then the wrapped part.
    pub(crate) fn ordered(&self) -> (&[WallPoint], &[WallPoint]) {
        let start = (self.next + W - self.len) % W.max(1);
        let first = self.len.min(W - start);
        let older = self.points.get(start..start + first).unwrap_or(&[]);
        let newer = self.points.get(..self.len - first).unwrap_or(&[]);
        (older, newer)
    }

    /// The stored entries whose time is at least `time_s`, oldest first:
    /// a suffix of [`Self::points`], since entries are stored in time
    /// order ([`Self::ingest`] refuses a frame older than the last one).
    /// Found from the newest end, so it costs the suffix, not the map.
    pub fn points_since(
        &self,
        time_s: f64,
    ) -> core::iter::Chain<core::slice::Iter<'_, WallPoint>, core::slice::Iter<'_, WallPoint>> {
        let (older, newer) = self.ordered();
        let in_newer = newer
            .iter()
            .rev()
            .take_while(|p| p.time_s >= time_s)
            .count();
        let newer_len = newer.len();
        if in_newer < newer_len {
            let tail = newer.get(newer_len - in_newer..).unwrap_or(&[]);
            return [].iter().chain(tail.iter());
        }
        let in_older = older
            .iter()
            .rev()
            .take_while(|p| p.time_s >= time_s)
            .count();
        let tail = older.get(older.len() - in_older..).unwrap_or(&[]);
        tail.iter().chain(newer.iter())
    }

    /// Forget everything (configuration kept).
    pub fn clear(&mut self) {
        self.next = 0;
        self.len = 0;
        self.last_time_s = None;
    }

    fn push(&mut self, p: WallPoint) -> bool {
        if W == 0 {
            return true;
        }
        let evicted = self.len == W;
        if let Some(slot) = self.points.get_mut(self.next) {
            *slot = p;
        }
        self.next = (self.next + 1) % W;
        if !evicted {
            self.len += 1;
        }
        evicted
    }

    fn check_contact<const M: usize, const S: usize>(
        &self,
        i: usize,
        c: &Contact,
        body: &Body<M, S>,
    ) -> Result<(), TactileError> {
        let k = usize::from(c.module);
        if k >= body.module_count() {
            return Err(TactileError::ContactModule {
                contact: i,
                module: c.module,
                module_count: body.module_count(),
            });
        }
        let on = body.sensors_on_module(k);
        if usize::from(c.sensor) >= on {
            return Err(TactileError::ContactSensor {
                contact: i,
                module: c.module,
                sensor: c.sensor,
                sensors_on_module: on,
            });
        }
        if !(c.force_n.is_finite() && c.force_n >= 0.0) {
            return Err(TactileError::ContactForce {
                contact: i,
                force_n: c.force_n,
            });
        }
        if let Some(n) = c.normal_module {
            let norm = libm::sqrt(n[0] * n[0] + n[1] * n[1] + n[2] * n[2]);
            if !(crate::num::all_finite(&n)
                && libm::fabs(norm - 1.0) <= self.config.normal_norm_tolerance)
            {
                return Err(TactileError::ContactNormal { contact: i });
            }
        }
        Ok(())
    }

    /// Turn a frame's contacts into wall points and store them.
    ///
    /// Everything is checked before anything is stored: on `Err` the map
    /// (points and last time) is exactly as before. A frame without pose
    /// (or without joints, for contacts behind the head module) is not an
    /// error: those contacts are counted as skipped. Frames with equal
    /// time stamps are accepted; an earlier one is not.
    ///
    /// # Errors
    /// [`TactileError`] naming the bad field or contact.
    pub fn ingest<
        const P: usize,
        const J: usize,
        const C: usize,
        const M: usize,
        const S: usize,
    >(
        &mut self,
        frame: &SensorFrame<P, J, C>,
        body: &Body<M, S>,
    ) -> Result<IngestReport, TactileError> {
        if !frame.time_s.is_finite() {
            return Err(TactileError::TimeNotFinite {
                time_s: frame.time_s,
            });
        }
        if let Some(last) = self.last_time_s
            && frame.time_s < last
        {
            return Err(TactileError::TimeOutOfOrder {
                time_s: frame.time_s,
                last_time_s: last,
            });
        }
        if frame.contact_count > C {
            return Err(TactileError::ContactCount {
                count: frame.contact_count,
                capacity: C,
            });
        }
        let contacts = frame.contacts();
        for (i, c) in contacts.iter().enumerate() {
            self.check_contact(i, c, body)?;
        }
        let mut report = IngestReport::default();
        // Poses: full chain with joints, head only without.
        let poses: Option<ModulePoses<M>> = match (&frame.pose, &frame.joints) {
            (None, _) => {
                report.skipped_no_pose = contacts.len();
                None
            }
            (Some(pose), Some(joints)) => Some(body.module_poses(pose, joints)?),
            (Some(pose), None) => {
                let head = head_to_map(pose)?;
                Some(ModulePoses {
                    module_to_map: [head; M],
                    count: 1,
                    position_sigma_m: pose.position_sigma_m,
                    attitude_sigma_rad: pose.attitude_sigma_rad,
                })
            }
        };
        let mut staged = [WallPoint::default(); C];
        let mut staged_count = 0;
        if let Some(poses) = &poses {
            for c in contacts {
                let k = usize::from(c.module);
                let (Some(iso), Some(skin)) = (
                    poses.module_to_map(k),
                    body.skin_point(k, usize::from(c.sensor)),
                ) else {
                    report.skipped_no_joints += 1;
                    continue;
                };
                let n_module = match c.normal_module {
                    Some(n) => {
                        let v = Vector3::new(n[0], n[1], n[2]);
                        v / v.norm()
                    }
                    None => skin.normal_module.into_inner(),
                };
                let wp = wall_point(iso, &skin.point_module_m, &n_module);
                let touched = c.force_n >= self.config.touch_threshold_n;
                if let Some(slot) = staged.get_mut(staged_count) {
                    *slot = WallPoint {
                        point_map_m: wp,
                        normal_map: iso.rotation * n_module,
                        sigma_m: body.point_sigma_m(poses, k, &skin.point_module_m),
                        time_s: frame.time_s,
                        force_n: c.force_n,
                        module: c.module,
                        sensor: c.sensor,
                        touched,
                    };
                    staged_count += 1;
                }
                if touched {
                    report.wall_points += 1;
                } else {
                    report.free_probes += 1;
                }
            }
        }
        // Commit.
        for p in staged.iter().take(staged_count) {
            if self.push(*p) {
                report.evicted += 1;
            }
        }
        self.last_time_s = Some(frame.time_s);
        Ok(report)
    }
}

/// Wall point of a skin contact: the skin point pushed out along the
/// contact normal by the penetration depth, which the rigid-contact model
/// takes as zero (see the module docs), in the map frame.
fn wall_point(
    module_to_map: &Isometry3<f64>,
    skin_module_m: &Vector3<f64>,
    normal_module: &Vector3<f64>,
) -> Vector3<f64> {
    const PENETRATION_M: f64 = 0.0;
    let p = skin_module_m + normal_module * PENETRATION_M;
    (module_to_map * Point3::from(p)).coords
}

#[cfg(test)]
mod fit_weakness_tests;
#[cfg(test)]
mod tests;
