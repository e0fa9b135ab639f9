//! Host-side record types shared by the simulator, the log format, the
//! importer and the runner.
//!
//! These are the owned, variable-size (Vec-based) twins of `nav-core`'s
//! fixed-capacity types. They derive serde only: the log codec (bincode 2,
//! behind `replay::log`'s codec module) and the JSON outputs both go through
//! serde, so no other module names bincode.

use nav_core::frame::{Contact, HeadPose, JointAngles, SensorFrame};
use serde::{Deserialize, Serialize};

/// One skin contact (see [`nav_core::frame::Contact`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ContactRecord {
    /// Module index (0 is the head).
    pub module: u16,
    /// Sensor index on that module, in configuration order.
    pub sensor: u16,
    /// Normal force, N.
    pub force_n: f64,
    /// Unit vector from the skin toward the wall, module frame, if measured.
    pub normal_module: Option<[f64; 3]>,
}

/// Head pose (see [`nav_core::frame::HeadPose`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PoseRecord {
    /// Head front-face centre in the map frame, m.
    pub position_m: [f64; 3],
    /// Unit quaternion `[w, x, y, z]`, head frame to map frame.
    pub orientation_wxyz: [f64; 4],
    /// 1-sigma position uncertainty, m.
    pub position_sigma_m: f64,
    /// 1-sigma attitude uncertainty, rad.
    pub attitude_sigma_rad: f64,
}

/// One joint (see [`nav_core::frame::JointAngles`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
pub struct JointRecord {
    /// Pitch of the trailing module, rad.
    pub pitch_rad: f64,
    /// Yaw of the trailing module, rad.
    pub yaw_rad: f64,
}

/// One sensor frame, owned and variable-size.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrameRecord {
    /// Sample time, s.
    pub time_s: f64,
    /// Head pose, if reported.
    pub pose: Option<PoseRecord>,
    /// Joint angles, if reported (one per joint, head first).
    pub joints: Option<Vec<JointRecord>>,
    /// Absolute port pressures, Pa, in layout order, if reported.
    pub port_pressures_pa: Option<Vec<f64>>,
    /// Total temperature at the head, K, if measured.
    pub total_temperature_k: Option<f64>,
    /// Contacts this sample.
    pub contacts: Vec<ContactRecord>,
    /// The contact channel reported this sample (with no contacts: a
    /// quiet skin; `false`: the skin was silent). Logs of format version 1
    /// do not carry it and read as `true`.
    pub contacts_reported: bool,
}

/// Why a [`FrameRecord`] does not fit a fixed-capacity frame.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitError {
    /// The record has a different number of ports than the layout.
    PortCount {
        /// Ports in the record.
        got: usize,
        /// Ports the layout has.
        want: usize,
    },
    /// The record has more joints than the frame has slots (fewer are
    /// padded with straight joints; the body uses only its own count).
    JointCount {
        /// Joints in the record.
        got: usize,
        /// Joints the body has.
        want: usize,
    },
    /// More contacts than the frame has slots.
    TooManyContacts {
        /// Contacts in the record.
        got: usize,
        /// Slots in the frame.
        capacity: usize,
    },
}

impl std::fmt::Display for FitError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::PortCount { got, want } => write!(f, "{got} port pressures, layout has {want}"),
            Self::JointCount { got, want } => write!(f, "{got} joints, body has {want}"),
            Self::TooManyContacts { got, capacity } => {
                write!(f, "{got} contacts, frame holds {capacity}")
            }
        }
    }
}

impl std::error::Error for FitError {}

impl FrameRecord {
    /// Copy into a fixed-capacity `nav-core` frame.
    ///
    /// # Errors
    /// [`FitError`] when a channel's size does not match the capacities.
    pub fn to_sensor_frame<const P: usize, const J: usize, const C: usize>(
        &self,
    ) -> Result<SensorFrame<P, J, C>, FitError> {
        let mut f = SensorFrame::<P, J, C>::empty(self.time_s);
        f.pose = self.pose.map(|p| HeadPose {
            position_m: p.position_m,
            orientation_wxyz: p.orientation_wxyz,
            position_sigma_m: p.position_sigma_m,
            attitude_sigma_rad: p.attitude_sigma_rad,
        });
        if let Some(js) = &self.joints {
            let arr: [JointAngles; J] = std::array::from_fn(|i| {
                js.get(i).map_or(JointAngles::default(), |j| JointAngles {
                    pitch_rad: j.pitch_rad,
                    yaw_rad: j.yaw_rad,
                })
            });
            if js.len() > J {
                return Err(FitError::JointCount {
                    got: js.len(),
                    want: J,
                });
            }
            f.joints = Some(arr);
        }
        if let Some(ps) = &self.port_pressures_pa {
            let arr: [f64; P] = ps.as_slice().try_into().map_err(|_| FitError::PortCount {
                got: ps.len(),
                want: P,
            })?;
            f.port_pressures_pa = Some(arr);
        }
        f.total_temperature_k = self.total_temperature_k;
        f.contacts_reported = self.contacts_reported;
        if self.contacts.len() > C {
            return Err(FitError::TooManyContacts {
                got: self.contacts.len(),
                capacity: C,
            });
        }
        for c in &self.contacts {
            f.push_contact(Contact {
                module: c.module,
                sensor: c.sensor,
                force_n: c.force_n,
                normal_module: c.normal_module,
            });
        }
        Ok(f)
    }

    /// Copy from a fixed-capacity `nav-core` frame.
    #[must_use]
    pub fn from_sensor_frame<const P: usize, const J: usize, const C: usize>(
        f: &SensorFrame<P, J, C>,
    ) -> Self {
        Self {
            time_s: f.time_s,
            pose: f.pose.map(|p| PoseRecord {
                position_m: p.position_m,
                orientation_wxyz: p.orientation_wxyz,
                position_sigma_m: p.position_sigma_m,
                attitude_sigma_rad: p.attitude_sigma_rad,
            }),
            joints: f.joints.map(|js| {
                js.iter()
                    .map(|j| JointRecord {
                        pitch_rad: j.pitch_rad,
                        yaw_rad: j.yaw_rad,
                    })
                    .collect()
            }),
            port_pressures_pa: f.port_pressures_pa.map(|p| p.to_vec()),
            total_temperature_k: f.total_temperature_k,
            contacts: f
                .contacts()
                .iter()
                .map(|c| ContactRecord {
                    module: c.module,
                    sensor: c.sensor,
                    force_n: c.force_n,
                    normal_module: c.normal_module,
                })
                .collect(),
            contacts_reported: f.skin_reported(),
        }
    }
}

/// Probe port layout, as configured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ProbeLayoutSpec {
    /// Tip port plus 4 ports on a cone (azimuths 0, 90, 180, 270 deg).
    FivePort {
        /// Cone half-angle of the side ports, deg.
        cone_angle_deg: f64,
    },
    /// Tip port plus 6 ports on a cone (azimuths 0, 60, ..., 300 deg).
    SevenPort {
        /// Cone half-angle of the side ports, deg.
        cone_angle_deg: f64,
    },
    /// Any layout: one unit normal per port, probe frame.
    Custom {
        /// Port normals.
        normals: Vec<[f64; 3]>,
    },
}

/// `7-port, side ports at 40° from the axis`, `custom, 9 ports`.
impl std::fmt::Display for ProbeLayoutSpec {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::FivePort { cone_angle_deg } => {
                write!(f, "5-port, side ports at {cone_angle_deg}° from the axis")
            }
            Self::SevenPort { cone_angle_deg } => {
                write!(f, "7-port, side ports at {cone_angle_deg}° from the axis")
            }
            Self::Custom { normals } => write!(f, "custom, {} ports", normals.len()),
        }
    }
}

/// The probe as configured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ProbeSpec {
    /// Port layout.
    pub layout: ProbeLayoutSpec,
    /// Head (sphere) radius, m.
    pub head_radius_m: f64,
    /// Port transducer noise, 1 sigma, Pa (the estimator's assumption).
    pub port_noise_pa: f64,
}

/// One contact sensor on a module's skin.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SensorSpec {
    /// Axial distance behind the module's front face, m.
    pub axial_m: f64,
    /// Angle around the module axis from +y toward +z, deg.
    pub angle_deg: f64,
    /// Whether the sensor reports a contact normal.
    pub measures_normal: bool,
    /// On the head's nose cap at this polar angle from the head axis, deg
    /// (`axial_m` unused); absent: on the side skin. Robot specs written
    /// before nose caps existed have no such key and read as side skin.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cap_polar_deg: Option<f64>,
}

/// One rigid module of the body.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModuleSpec {
    /// Length along its axis, m.
    pub length_m: f64,
    /// Skin radius, m.
    pub radius_m: f64,
    /// Contact sensors on this module, in index order.
    pub sensors: Vec<SensorSpec>,
}

/// The robot as configured: what the navigator needs to be rebuilt.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RobotSpec {
    /// Modules, head first.
    pub modules: Vec<ModuleSpec>,
    /// The head's multi-hole probe.
    pub probe: ProbeSpec,
    /// Speed limit, m/s.
    pub max_speed_m_per_s: f64,
}

/// The gas, as configured.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct GasSpec {
    /// Ratio of specific heats.
    pub gamma: f64,
    /// Specific gas constant, J/(kg K).
    pub r_j_per_kg_k: f64,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> FrameRecord {
        FrameRecord {
            time_s: 1.25,
            pose: Some(PoseRecord {
                position_m: [1.0, 2.0, 3.0],
                orientation_wxyz: [1.0, 0.0, 0.0, 0.0],
                position_sigma_m: 0.01,
                attitude_sigma_rad: 0.001,
            }),
            joints: Some(vec![JointRecord::default(); 3]),
            port_pressures_pa: Some(vec![101_325.0; 7]),
            total_temperature_k: Some(300.0),
            contacts: vec![ContactRecord {
                module: 2,
                sensor: 5,
                force_n: 3.5,
                normal_module: Some([0.0, 1.0, 0.0]),
            }],
            contacts_reported: true,
        }
    }

    #[test]
    fn round_trip_through_fixed_frame() {
        let r = sample();
        let f = r.to_sensor_frame::<7, 3, 8>().unwrap();
        assert_eq!(FrameRecord::from_sensor_frame(&f), r);
    }

    #[test]
    fn size_mismatch_is_typed() {
        let r = sample();
        assert_eq!(
            r.to_sensor_frame::<5, 3, 8>().unwrap_err(),
            FitError::PortCount { got: 7, want: 5 }
        );
        assert_eq!(
            r.to_sensor_frame::<7, 2, 8>().unwrap_err(),
            FitError::JointCount { got: 3, want: 2 }
        );
        // Fewer joints than slots: padded.
        let f = r.to_sensor_frame::<7, 5, 8>().unwrap();
        assert_eq!(f.joints.unwrap()[4], JointAngles::default());
        assert_eq!(
            r.to_sensor_frame::<7, 3, 0>().unwrap_err(),
            FitError::TooManyContacts {
                got: 1,
                capacity: 0
            }
        );
    }
}
