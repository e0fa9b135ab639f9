//! What the decision stage is given: flow and wall observations already in
//! the map frame, and the frame helpers that put them there. Perception
//! (the navigator's estimation stages) builds these; nothing here calls a
//! decision.

use crate::map::{MAX_BRANCHES, Section, probe_to_map};

/// How far behind the head a stored wall point still counts as "beside"
/// it for the standoff (about one body length of a demo robot), m.
pub const WALL_BESIDE_M: f64 = 1.0;

/// A wall felt across the path with live flow whose upstream direction is
/// within this (cosine) of the head's forward axis is the source: the flow
/// comes out of the wall ahead.
pub const SOURCE_AHEAD_COS: f64 = 0.9;

/// Wall points per wall observation.
pub const MAX_FRAME_WALL_POINTS: usize = 32;

/// Rotate a probe-frame covariance into the map frame: `R C R^T`, with `R`
/// the head orientation. `None` when the quaternion is unusable.
#[must_use]
pub fn probe_cov_to_map(
    cov_probe: [[f64; 3]; 3],
    pose: &crate::frame::HeadPose,
) -> Option<[[f64; 3]; 3]> {
    let c0 = probe_to_map([1.0, 0.0, 0.0], pose)?;
    let c1 = probe_to_map([0.0, 1.0, 0.0], pose)?;
    let c2 = probe_to_map([0.0, 0.0, 1.0], pose)?;
    let r = nalgebra::Matrix3::new(
        c0[0], c1[0], c2[0], c0[1], c1[1], c2[1], c0[2], c1[2], c2[2],
    );
    let c = nalgebra::Matrix3::from_fn(|i, j| {
        cov_probe
            .get(i)
            .and_then(|row| row.get(j))
            .copied()
            .unwrap_or(0.0)
    });
    Some(mat3_to_arr(&(r * c * r.transpose())))
}

/// A nalgebra 3x3 matrix as row arrays.
#[must_use]
pub fn mat3_to_arr(m: &nalgebra::Matrix3<f64>) -> [[f64; 3]; 3] {
    let mut out = [[0.0; 3]; 3];
    for (i, row) in out.iter_mut().enumerate() {
        for (j, v) in row.iter_mut().enumerate() {
            *v = m.get((i, j)).copied().unwrap_or(0.0);
        }
    }
    out
}

// ------------------------------------------------------------ observations

/// One flow observation, already in the map frame (a probe flow solution
/// rotated by [`probe_to_map`] / [`probe_cov_to_map`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowObservation {
    /// Velocity direction (where the gas moves), unit, map frame; `None`
    /// when the probe solution is invalid.
    pub velocity_dir_map: Option<[f64; 3]>,
    /// Covariance of the direction, map frame, rad^2.
    pub dir_cov_map: [[f64; 3]; 3],
    /// Dynamic pressure, Pa.
    pub dynamic_pressure_pa: f64,
    /// Its 1-sigma, Pa.
    pub dynamic_pressure_sigma_pa: f64,
    /// Static pressure, Pa (recorded, not steered on).
    pub static_pressure_pa: f64,
    /// Mach number (recorded, not steered on).
    pub mach: f64,
    /// Gas density, kg/m^3 (from static pressure and temperature via
    /// `gas::IdealGas::density_kg_per_m3`).
    pub density_kg_per_m3: f64,
    /// The probe marked the solution degraded (a port excluded, poor fit).
    pub degraded: bool,
    /// Bit k: port k suspect.
    pub port_suspect_mask: u32,
    /// Bit k: port k failed (isolated).
    pub port_failed_mask: u32,
}

/// A throat (narrowing) the tactile layer found ahead.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Throat {
    /// Smallest clear diameter, m.
    pub min_clear_diameter_m: f64,
    /// Distance ahead of the head along the path, m (0 when at it).
    pub distance_ahead_m: f64,
}

/// One opening (candidate branch) the tactile layer found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Opening {
    /// Direction into the opening, unit, map frame.
    pub direction_map: [f64; 3],
    /// Centre of the opening's mouth (where its axis leaves the current
    /// conduit), map frame, m.
    pub mouth_m: [f64; 3],
    /// Clear width, m.
    pub clear_width_m: f64,
    /// True when the width is only a lower bound.
    pub width_is_lower_bound: bool,
}

impl Opening {
    /// A placeholder slot.
    pub const EMPTY: Self = Self {
        direction_map: [1.0, 0.0, 0.0],
        mouth_m: [0.0; 3],
        clear_width_m: 0.0,
        width_is_lower_bound: true,
    };
}

/// One wall observation, map frame (a tactile section fit, its throat and
/// openings, and the contact points it used).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WallObservation {
    /// Cross-section at the head.
    pub section: Section,
    /// Conduit axis (either sign), unit, map frame, if estimated.
    pub conduit_axis_map: Option<[f64; 3]>,
    /// Narrowest point ahead, if one was found.
    pub throat: Option<Throat>,
    /// Wall across the path ahead: no continuation.
    pub end_ahead: bool,
    /// Openings ahead or aside (every continuation, including straight on;
    /// the trunk behind may be included, it is rejected as "came from").
    pub openings: [Opening; MAX_BRANCHES],
    /// Valid entries in `openings`.
    pub opening_count: u8,
    /// Wall points touched this frame, map frame, m.
    pub wall_points_m: [[f64; 3]; MAX_FRAME_WALL_POINTS],
    /// Valid entries in `wall_points_m`.
    pub wall_point_count: u8,
    /// Bit k: contact sensor k suspect.
    pub contact_suspect_mask: u64,
    /// Bit k: contact sensor k failed.
    pub contact_failed_mask: u64,
    /// The nose is loaded this frame: a head contact whose normal leans
    /// forward (a nose-cap sensor, or a measured normal facing ahead).
    pub nose_loaded: bool,
    /// Centroid of this frame's nose contacts, map frame, m.
    pub nose_point_m: Option<[f64; 3]>,
    /// Clear width ahead the nose measured this frame: the widest span
    /// across the head axis between two nose contacts on opposite sides
    /// (more than 90 degrees apart around the axis), m.
    pub nose_width_m: Option<f64>,
}

impl WallObservation {
    /// An observation with nothing in it.
    pub const EMPTY: Self = Self {
        section: Section::Unknown,
        conduit_axis_map: None,
        throat: None,
        end_ahead: false,
        openings: [Opening::EMPTY; MAX_BRANCHES],
        opening_count: 0,
        wall_points_m: [[0.0; 3]; MAX_FRAME_WALL_POINTS],
        wall_point_count: 0,
        contact_suspect_mask: 0,
        contact_failed_mask: 0,
        nose_loaded: false,
        nose_point_m: None,
        nose_width_m: None,
    };

    /// The valid openings.
    #[must_use]
    pub fn openings(&self) -> &[Opening] {
        let n = usize::from(self.opening_count).min(MAX_BRANCHES);
        self.openings.get(..n).unwrap_or(&[])
    }
    /// The valid wall points.
    #[must_use]
    pub fn wall_points(&self) -> &[[f64; 3]] {
        let n = usize::from(self.wall_point_count).min(MAX_FRAME_WALL_POINTS);
        self.wall_points_m.get(..n).unwrap_or(&[])
    }
    /// Add an opening; false when full.
    pub fn push_opening(&mut self, o: Opening) -> bool {
        match self.openings.get_mut(usize::from(self.opening_count)) {
            Some(s) => {
                *s = o;
                self.opening_count += 1;
                true
            }
            None => false,
        }
    }
    /// Add a wall point; false when full.
    pub fn push_wall_point(&mut self, p: [f64; 3]) -> bool {
        match self
            .wall_points_m
            .get_mut(usize::from(self.wall_point_count))
        {
            Some(s) => {
                *s = p;
                self.wall_point_count += 1;
                true
            }
            None => false,
        }
    }
}
