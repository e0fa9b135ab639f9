//! The sensor frame: everything the robot reports in one sample.
//!
//! A frame may be partial: any channel may be absent (`None`) when that
//! sensor dropped a sample. The contact channel says so itself:
//! `contacts_reported` tells a skin that reported and feels nothing (a
//! quiet skin) from one that did not report (a dead or silent skin). Capacities are const
//! generics: `P` probe ports, `J` joints, `C` contact slots.
//!
//! Frames, by name:
//! - *map frame*: fixed to the world where the traverse started; x, y
//!   horizontal, z up; metres.
//! - *head frame*: fixed to the head module; +x forward along the module
//!   axis, +z the module's "up" mark. The probe frame is the head frame.
//! - *module frame* `k`: fixed to module `k` (0 is the head), same axes.

/// Head pose in the map frame, from odometry / proprioception.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HeadPose {
    /// Head module origin (centre of its front face) in the map frame, m.
    pub position_m: [f64; 3],
    /// Unit quaternion `[w, x, y, z]` rotating head-frame vectors into the
    /// map frame.
    pub orientation_wxyz: [f64; 4],
    /// 1-sigma position uncertainty reported by odometry, m (isotropic).
    pub position_sigma_m: f64,
    /// 1-sigma attitude uncertainty reported by odometry, rad (isotropic).
    pub attitude_sigma_rad: f64,
}

/// One joint between module `k` and module `k + 1` (behind it).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct JointAngles {
    /// Rotation of the trailing module about the leading module's y axis, rad.
    pub pitch_rad: f64,
    /// Rotation of the trailing module about the leading module's z axis, rad.
    pub yaw_rad: f64,
}

/// One skin contact.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Contact {
    /// Module index (0 is the head).
    pub module: u16,
    /// Sensor index on that module.
    pub sensor: u16,
    /// Normal force pressing the skin, N (>= 0).
    pub force_n: f64,
    /// Outward contact normal in the module frame, where the sensor
    /// measures one (unit vector).
    pub normal_module: Option<[f64; 3]>,
}

/// One sample of every sensor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SensorFrame<const P: usize, const J: usize, const C: usize> {
    /// Sample time, s, on the robot's monotonic clock.
    pub time_s: f64,
    /// Head pose, if odometry reported this sample.
    pub pose: Option<HeadPose>,
    /// Joint angles, if proprioception reported this sample.
    pub joints: Option<[JointAngles; J]>,
    /// Absolute port pressures, Pa, in the probe layout's port order, if
    /// the probe reported this sample.
    pub port_pressures_pa: Option<[f64; P]>,
    /// Gas total temperature at the head, K, if measured.
    pub total_temperature_k: Option<f64>,
    /// Contact slots; only the first `contact_count` are meaningful.
    pub contacts: [Contact; C],
    /// Number of valid entries in `contacts`.
    pub contact_count: usize,
    /// The contact channel reported this sample (its heartbeat). With no
    /// contacts, `true` means nothing touches the skin; `false` means the
    /// skin said nothing. A frame with contacts counts as reported
    /// whatever this says.
    pub contacts_reported: bool,
}

impl<const P: usize, const J: usize, const C: usize> SensorFrame<P, J, C> {
    /// An empty frame at `time_s`: no channel reported.
    #[must_use]
    pub fn empty(time_s: f64) -> Self {
        Self {
            time_s,
            pose: None,
            joints: None,
            port_pressures_pa: None,
            total_temperature_k: None,
            contacts: [Contact::default(); C],
            contact_count: 0,
            contacts_reported: false,
        }
    }

    /// The valid contacts.
    #[must_use]
    pub fn contacts(&self) -> &[Contact] {
        self.contacts
            .get(..self.contact_count)
            .unwrap_or(&self.contacts)
    }

    /// Whether the contact channel reported: it says so, or it reported
    /// contacts.
    #[must_use]
    pub const fn skin_reported(&self) -> bool {
        self.contacts_reported || self.contact_count > 0
    }

    /// Append a contact (the contact channel then counts as reported).
    /// Returns `false` (and changes nothing) when the frame's contact
    /// slots are full.
    pub fn push_contact(&mut self, c: Contact) -> bool {
        match self.contacts.get_mut(self.contact_count) {
            Some(slot) => {
                *slot = c;
                self.contact_count += 1;
                self.contacts_reported = true;
                true
            }
            None => false,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_empty_frame_has_a_silent_skin() {
        let mut f: SensorFrame<7, 2, 2> = SensorFrame::empty(0.0);
        assert!(!f.skin_reported());
        f.contacts_reported = true;
        assert!(f.skin_reported());
    }

    #[test]
    fn push_until_full() {
        let mut f: SensorFrame<7, 2, 2> = SensorFrame::empty(0.0);
        assert!(f.push_contact(Contact::default()));
        assert!(f.push_contact(Contact {
            force_n: 2.0,
            ..Contact::default()
        }));
        assert!(!f.push_contact(Contact::default()));
        assert!(f.contacts_reported && f.skin_reported());
        assert_eq!(f.contacts().len(), 2);
        assert_eq!(f.contacts()[1].force_n, 2.0);
    }
}
