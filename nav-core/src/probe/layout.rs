//! Port layouts: where the holes are, how noisy and how biased each one is.
//!
//! Presets follow the project convention (probe frame): port 0 at the tip,
//! normal `(1, 0, 0)`; the other ports on a cone of half-angle `c` about +x
//! at azimuth `phi` measured from +y toward +z,
//! `n = (cos c, sin c cos phi, sin c sin phi)`. 5-port: `phi = 0, 90, 180,
//! 270 deg`; 7-port: `phi = 0, 60, ..., 300 deg`.

use nalgebra::{Matrix3, Matrix4, Vector3, Vector4};

/// Fewest ports that can determine the four unknowns (two direction
/// angles, static pressure, pressure amplitude).
pub const MIN_PORTS: usize = 4;
/// Most ports a layout may have ([`PortSet`] is a 32-bit mask).
pub const MAX_PORTS: usize = 32;
/// How far a normal's length may stray from 1.
pub const UNIT_TOLERANCE: f64 = 1e-9;
/// Two normals closer than this (rad) count as the same direction.
const DUPLICATE_ANGLE_RAD: f64 = 1e-6;
/// Smallest eigenvalue of `mean(n n^T)` for the normals to span 3-D.
const SPAN_MIN_EIGENVALUE: f64 = 1e-6;
/// Smallest Cholesky pivot ratio of the head-on information matrix.
const HEAD_ON_MIN_PIVOT: f64 = 1e-9;

/// One pressure port.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Port {
    /// Outward unit normal of the hole, probe frame.
    pub normal: [f64; 3],
    /// Known transducer offset, Pa: the reading is the surface pressure plus
    /// this. The solver subtracts it.
    pub bias_pa: f64,
    /// 1-sigma reading noise, Pa (> 0).
    pub sigma_pa: f64,
}

/// Which published arrangement a layout is, if any (calibration schemes
/// need to know the port roles).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LayoutKind {
    /// Tip port plus 4 ports on a cone at azimuths 0, 90, 180, 270 deg.
    FivePort {
        /// Cone half-angle of the side ports, rad.
        cone_angle_rad: f64,
    },
    /// Tip port plus 6 ports on a cone at azimuths 0, 60, ..., 300 deg.
    SevenPort {
        /// Cone half-angle of the side ports, rad.
        cone_angle_rad: f64,
    },
    /// Any other arrangement.
    Custom,
}

/// Why a layout was refused.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LayoutError {
    /// Fewer than [`MIN_PORTS`] or more than [`MAX_PORTS`] ports.
    PortCount {
        /// Ports given.
        ports: usize,
    },
    /// A preset cone angle outside (0, 90) deg.
    ConeAngle {
        /// The value given, rad.
        cone_angle_rad: f64,
    },
    /// A normal with a non-finite component.
    NonFiniteNormal {
        /// Port index.
        port: usize,
    },
    /// A normal whose length is not 1 (within [`UNIT_TOLERANCE`]).
    NotUnitNormal {
        /// Port index.
        port: usize,
        /// Its length.
        norm: f64,
    },
    /// Two ports look the same way.
    DuplicateNormals {
        /// First port.
        first: usize,
        /// Second port.
        second: usize,
    },
    /// The normals do not span three dimensions (all on one plane or line):
    /// some flow directions would be invisible.
    NotSpanning {
        /// Smallest eigenvalue of the mean of `n n^T`.
        smallest_eigenvalue: f64,
    },
    /// Even a head-on flow cannot be resolved into direction, static
    /// pressure and amplitude (e.g. a ring of ports with no tip port).
    Unresolvable,
    /// A port sigma that is not finite and positive.
    Sigma {
        /// Port index.
        port: usize,
        /// The value given, Pa.
        sigma_pa: f64,
    },
    /// A port bias that is not finite.
    Bias {
        /// Port index.
        port: usize,
        /// The value given, Pa.
        bias_pa: f64,
    },
    /// A port index outside the layout.
    PortIndex {
        /// The index given.
        port: usize,
        /// Ports in the layout.
        ports: usize,
    },
}

/// A set of port indices (bit `k` = port `k`), for exclusions and reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Hash)]
pub struct PortSet(u32);

impl PortSet {
    /// No ports.
    pub const EMPTY: Self = Self(0);

    /// Ports `0..n` (all of an `n`-port layout; `n` is clamped to 32).
    #[must_use]
    pub const fn first(n: usize) -> Self {
        if n >= 32 {
            Self(u32::MAX)
        } else if n == 0 {
            Self(0)
        } else {
            // n in 1..32: the shift is in range.
            Self(u32::MAX >> (32 - n))
        }
    }

    /// The set with the given mask (bit `k` = port `k`).
    #[must_use]
    pub const fn from_bits(bits: u32) -> Self {
        Self(bits)
    }

    /// The raw mask.
    #[must_use]
    pub const fn bits(self) -> u32 {
        self.0
    }

    /// Whether port `k` is in the set (false for `k >= 32`).
    #[must_use]
    pub const fn contains(self, k: usize) -> bool {
        k < 32 && (self.0 >> k) & 1 == 1
    }

    /// The set with port `k` added (unchanged for `k >= 32`).
    #[must_use]
    pub const fn with(self, k: usize) -> Self {
        if k < 32 {
            Self(self.0 | (1 << k))
        } else {
            self
        }
    }

    /// The set with port `k` removed.
    #[must_use]
    pub const fn without(self, k: usize) -> Self {
        if k < 32 {
            Self(self.0 & !(1 << k))
        } else {
            self
        }
    }

    /// Number of ports in the set.
    #[must_use]
    pub const fn count(self) -> u32 {
        self.0.count_ones()
    }

    /// Ports in both sets.
    #[must_use]
    pub const fn intersect(self, other: Self) -> Self {
        Self(self.0 & other.0)
    }
}

/// A validated port layout with `N` ports.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeLayout<const N: usize> {
    normals: [Vector3<f64>; N],
    bias_pa: [f64; N],
    sigma_pa: [f64; N],
    kind: LayoutKind,
}

fn check_cone(cone_angle_rad: f64) -> Result<(), LayoutError> {
    if cone_angle_rad.is_finite() && cone_angle_rad > 0.0 && cone_angle_rad < deg90() {
        Ok(())
    } else {
        Err(LayoutError::ConeAngle { cone_angle_rad })
    }
}

fn deg90() -> f64 {
    0.5 * core::f64::consts::PI
}

/// Tip port plus `M` ring ports at azimuths `k * 2 pi / M`.
fn ring_normals<const N: usize>(cone_angle_rad: f64) -> [Vector3<f64>; N] {
    let mut out = [Vector3::new(1.0, 0.0, 0.0); N];
    let ring = N.saturating_sub(1);
    let (sc, cc) = (libm::sin(cone_angle_rad), libm::cos(cone_angle_rad));
    for (k, n) in out.iter_mut().skip(1).enumerate() {
        let phi = 2.0 * core::f64::consts::PI * f64::from(small(k)) / f64::from(small(ring));
        *n = Vector3::new(cc, sc * libm::cos(phi), sc * libm::sin(phi));
    }
    out
}

/// A port count as `u32` (counts here never exceed [`MAX_PORTS`]).
pub(crate) fn small(n: usize) -> u32 {
    u32::try_from(n).unwrap_or(u32::MAX)
}

impl ProbeLayout<5> {
    /// The 5-port preset (tip plus 4 ports at azimuths 0, 90, 180, 270 deg
    /// on a cone of half-angle `cone_angle_rad`; 45 deg is the project's
    /// default), every port with noise `sigma_pa` and no bias.
    ///
    /// # Errors
    /// [`LayoutError::ConeAngle`] outside (0, 90) deg;
    /// [`LayoutError::Sigma`] for a bad sigma.
    pub fn five_port(cone_angle_rad: f64, sigma_pa: f64) -> Result<Self, LayoutError> {
        check_cone(cone_angle_rad)?;
        Self::from_parts(
            ring_normals::<5>(cone_angle_rad),
            [0.0; 5],
            [sigma_pa; 5],
            LayoutKind::FivePort { cone_angle_rad },
        )
    }
}

impl ProbeLayout<7> {
    /// The 7-port preset (tip plus 6 ports at azimuths 0, 60, ..., 300 deg
    /// on a cone of half-angle `cone_angle_rad`; 40 deg is the project's
    /// default), every port with noise `sigma_pa` and no bias.
    ///
    /// # Errors
    /// [`LayoutError::ConeAngle`] outside (0, 90) deg;
    /// [`LayoutError::Sigma`] for a bad sigma.
    pub fn seven_port(cone_angle_rad: f64, sigma_pa: f64) -> Result<Self, LayoutError> {
        check_cone(cone_angle_rad)?;
        Self::from_parts(
            ring_normals::<7>(cone_angle_rad),
            [0.0; 7],
            [sigma_pa; 7],
            LayoutKind::SevenPort { cone_angle_rad },
        )
    }
}

impl<const N: usize> ProbeLayout<N> {
    /// Any layout, one [`Port`] per hole.
    ///
    /// # Errors
    /// A [`LayoutError`] saying which check failed and at which port: port
    /// count, non-unit or duplicate normals, normals not spanning 3-D, a
    /// layout that cannot resolve even a head-on flow, bad sigma or bias.
    pub fn custom(ports: [Port; N]) -> Result<Self, LayoutError> {
        let mut normals = [Vector3::zeros(); N];
        let mut bias = [0.0; N];
        let mut sigma = [0.0; N];
        for (k, p) in ports.iter().enumerate() {
            if let (Some(n), Some(b), Some(s)) =
                (normals.get_mut(k), bias.get_mut(k), sigma.get_mut(k))
            {
                *n = Vector3::new(p.normal[0], p.normal[1], p.normal[2]);
                *b = p.bias_pa;
                *s = p.sigma_pa;
            }
        }
        Self::from_parts(normals, bias, sigma, LayoutKind::Custom)
    }

    fn from_parts(
        normals: [Vector3<f64>; N],
        bias_pa: [f64; N],
        sigma_pa: [f64; N],
        kind: LayoutKind,
    ) -> Result<Self, LayoutError> {
        if !(MIN_PORTS..=MAX_PORTS).contains(&N) {
            return Err(LayoutError::PortCount { ports: N });
        }
        for (port, n) in normals.iter().enumerate() {
            if !(n.x.is_finite() && n.y.is_finite() && n.z.is_finite()) {
                return Err(LayoutError::NonFiniteNormal { port });
            }
            let norm = n.norm();
            if libm::fabs(norm - 1.0) > UNIT_TOLERANCE {
                return Err(LayoutError::NotUnitNormal { port, norm });
            }
        }
        for (first, a) in normals.iter().enumerate() {
            for (second, b) in normals.iter().enumerate().skip(first + 1) {
                if a.cross(b).norm() < DUPLICATE_ANGLE_RAD && a.dot(b) > 0.0 {
                    return Err(LayoutError::DuplicateNormals { first, second });
                }
            }
        }
        for (port, &s) in sigma_pa.iter().enumerate() {
            if !(s.is_finite() && s > 0.0) {
                return Err(LayoutError::Sigma { port, sigma_pa: s });
            }
        }
        for (port, &b) in bias_pa.iter().enumerate() {
            if !b.is_finite() {
                return Err(LayoutError::Bias { port, bias_pa: b });
            }
        }
        // The normals must span 3-D.
        let mut m = Matrix3::zeros();
        for n in &normals {
            m += n * n.transpose();
        }
        m /= f64::from(small(N));
        let ev = m.symmetric_eigenvalues();
        let smallest = ev.min();
        if smallest.is_nan() || smallest < SPAN_MIN_EIGENVALUE {
            return Err(LayoutError::NotSpanning {
                smallest_eigenvalue: smallest,
            });
        }
        // The four unknowns must be resolvable for a head-on flow (flow from
        // +x, sphere shape, unit amplitude, unit weights).
        if !head_on_resolvable(&normals) {
            return Err(LayoutError::Unresolvable);
        }
        Ok(Self {
            normals,
            bias_pa,
            sigma_pa,
            kind,
        })
    }

    /// Port normals, probe frame.
    #[must_use]
    pub const fn normals(&self) -> &[Vector3<f64>; N] {
        &self.normals
    }

    /// Port biases, Pa.
    #[must_use]
    pub const fn bias_pa(&self) -> &[f64; N] {
        &self.bias_pa
    }

    /// Port noise sigmas, Pa.
    #[must_use]
    pub const fn sigma_pa(&self) -> &[f64; N] {
        &self.sigma_pa
    }

    /// Which arrangement this is.
    #[must_use]
    pub const fn kind(&self) -> LayoutKind {
        self.kind
    }

    /// The layout with port `port`'s bias set.
    ///
    /// # Errors
    /// [`LayoutError::PortIndex`] or [`LayoutError::Bias`].
    pub fn with_bias(mut self, port: usize, bias_pa: f64) -> Result<Self, LayoutError> {
        if !bias_pa.is_finite() {
            return Err(LayoutError::Bias { port, bias_pa });
        }
        let slot = self
            .bias_pa
            .get_mut(port)
            .ok_or(LayoutError::PortIndex { port, ports: N })?;
        *slot = bias_pa;
        Ok(self)
    }

    /// The layout with port `port`'s noise sigma set.
    ///
    /// # Errors
    /// [`LayoutError::PortIndex`] or [`LayoutError::Sigma`].
    pub fn with_sigma(mut self, port: usize, sigma_pa: f64) -> Result<Self, LayoutError> {
        if !(sigma_pa.is_finite() && sigma_pa > 0.0) {
            return Err(LayoutError::Sigma { port, sigma_pa });
        }
        let slot = self
            .sigma_pa
            .get_mut(port)
            .ok_or(LayoutError::PortIndex { port, ports: N })?;
        *slot = sigma_pa;
        Ok(self)
    }
}

fn head_on_resolvable<const N: usize>(normals: &[Vector3<f64>; N]) -> bool {
    let d = Vector3::new(1.0, 0.0, 0.0);
    let (e1, e2) = (Vector3::new(0.0, 1.0, 0.0), Vector3::new(0.0, 0.0, 1.0));
    let mut h = Matrix4::zeros();
    for n in normals {
        let c = n.dot(&d);
        let s = -1.25 + 2.25 * c * c;
        let ds = 4.5 * c;
        let j = Vector4::new(ds * n.dot(&e1), ds * n.dot(&e2), 1.0, s);
        h += j * j.transpose();
    }
    let scale = h.diagonal().max();
    if scale.is_nan() || scale <= 0.0 {
        return false;
    }
    match (h / scale).cholesky() {
        Some(ch) => {
            let l = ch.l_dirty().diagonal();
            l.min() * l.min() > HEAD_ON_MIN_PIVOT
        }
        None => false,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::probe::deg;

    #[test]
    fn presets_follow_the_convention() {
        let l = ProbeLayout::seven_port(deg(40.0), 1.0).unwrap();
        let n = l.normals();
        assert_eq!(n[0], Vector3::new(1.0, 0.0, 0.0));
        // Port 2 at phi = 60 deg: (cos c, sin c cos 60, sin c sin 60).
        let c = deg(40.0);
        let want = Vector3::new(
            libm::cos(c),
            libm::sin(c) * 0.5,
            libm::sin(c) * libm::sqrt(3.0) / 2.0,
        );
        assert!((n[2] - want).norm() < 1e-15);
        let f = ProbeLayout::five_port(deg(45.0), 1.0).unwrap();
        // Port 2 of the 5-port head at phi = 90 deg points up (+z).
        assert!(f.normals()[2].y.abs() < 1e-15 && f.normals()[2].z > 0.7);
        assert!(matches!(f.kind(), LayoutKind::FivePort { .. }));
    }

    fn port(n: [f64; 3]) -> Port {
        Port {
            normal: n,
            bias_pa: 0.0,
            sigma_pa: 1.0,
        }
    }

    #[test]
    fn custom_layouts_are_validated() {
        let s = 1.0 / libm::sqrt(2.0);
        // Tetrahedral-ish good layout.
        let good = [
            port([1.0, 0.0, 0.0]),
            port([s, s, 0.0]),
            port([s, 0.0, s]),
            port([s, -s, 0.0]),
            port([s, 0.0, -s]),
        ];
        assert!(ProbeLayout::custom(good).is_ok());
        let mut bad = good;
        bad[3].normal = [1.0, 0.1, 0.0];
        assert!(matches!(
            ProbeLayout::custom(bad),
            Err(LayoutError::NotUnitNormal { port: 3, .. })
        ));
        let mut dup = good;
        dup[4].normal = dup[1].normal;
        assert!(matches!(
            ProbeLayout::custom(dup),
            Err(LayoutError::DuplicateNormals {
                first: 1,
                second: 4
            })
        ));
        // All in the x-y plane: cannot see the z component of the flow.
        let planar = [
            port([1.0, 0.0, 0.0]),
            port([s, s, 0.0]),
            port([s, -s, 0.0]),
            port([0.0, 1.0, 0.0]),
        ];
        assert!(matches!(
            ProbeLayout::custom(planar),
            Err(LayoutError::NotSpanning { .. })
        ));
        // A ring with no tip: head-on, every port sees the same pressure, so
        // static pressure and amplitude cannot be separated.
        let ring = [
            port([s, s, 0.0]),
            port([s, 0.0, s]),
            port([s, -s, 0.0]),
            port([s, 0.0, -s]),
        ];
        assert_eq!(ProbeLayout::custom(ring), Err(LayoutError::Unresolvable));
        let mut nan = good;
        nan[0].normal = [f64::NAN, 0.0, 0.0];
        assert_eq!(
            ProbeLayout::custom(nan),
            Err(LayoutError::NonFiniteNormal { port: 0 })
        );
        let mut sig = good;
        sig[2].sigma_pa = 0.0;
        assert!(matches!(
            ProbeLayout::custom(sig),
            Err(LayoutError::Sigma { port: 2, .. })
        ));
        let three = [
            port([1.0, 0.0, 0.0]),
            port([0.0, 1.0, 0.0]),
            port([0.0, 0.0, 1.0]),
        ];
        assert_eq!(
            ProbeLayout::custom(three),
            Err(LayoutError::PortCount { ports: 3 })
        );
    }

    #[test]
    fn bad_cone_angles_and_indices() {
        assert!(matches!(
            ProbeLayout::seven_port(0.0, 1.0),
            Err(LayoutError::ConeAngle { .. })
        ));
        assert!(matches!(
            ProbeLayout::five_port(deg(90.0), 1.0),
            Err(LayoutError::ConeAngle { .. })
        ));
        let l = ProbeLayout::five_port(deg(45.0), 1.0).unwrap();
        assert_eq!(
            l.with_bias(5, 1.0),
            Err(LayoutError::PortIndex { port: 5, ports: 5 })
        );
        assert_eq!(l.with_bias(4, 2.5).unwrap().bias_pa()[4], 2.5);
        assert!(l.with_sigma(1, -1.0).is_err());
    }

    #[test]
    fn port_sets() {
        let s = PortSet::first(7);
        assert_eq!(s.count(), 7);
        assert!(s.contains(6) && !s.contains(7));
        assert_eq!(s.without(3).count(), 6);
        assert!(!s.without(3).contains(3));
        assert_eq!(PortSet::first(32).count(), 32);
        assert_eq!(PortSet::EMPTY.with(40), PortSet::EMPTY);
    }
}
