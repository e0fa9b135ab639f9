//! Local cross-sections: window, axis, projection, fit, classification.
//!
//! # Axis
//!
//! The conduit axis near a station starts as the body path tangent there
//! (the body lies along the conduit). The wall normals refine it: the
//! normals of a cylinder are perpendicular to its axis, so the axis is the
//! eigenvector of the smallest eigenvalue of `S = sum n n^T`. That
//! estimate is used only when the normals span a plane (middle over
//! largest eigenvalue at least [`SectionSettings::min_normal_spread`]) and
//! agree with the tangent within [`SectionSettings::max_axis_correction_rad`];
//! it is then blended with the tangent by inverse variance: the tangent
//! with [`SectionSettings::tangent_sigma_rad`], the normals with
//! `lambda_min / (n lambda_mid)` (the small-angle variance of the
//! eigenvector tilt toward the weakest spanned direction).
//!
//! # Plane
//!
//! The section plane is normal to the axis `a`, through the station point.
//! Its first axis is "left" `l = z_map x a` (normalised) and its second
//! "up" `u = a x l`, so for a level conduit heading +x the plane axes are
//! map +y and +z and plane angles run from left toward up, like sensor
//! angles on a module. For a near-vertical axis (`|z_map x a| < 0.2`),
//! `l = x_map x a` instead.
//!
//! # Classification
//!
//! [`fit_plane_section`] never returns a wild radius: too few points or
//! degenerate data give [`SectionShape::Unknown`]; collinear data, short
//! arcs, an unconverged solver, a radius whose sigma is a large fraction of
//! itself, a radius beyond the plausible limit or below the body's give
//! [`SectionShape::LowerBoundOnly`] with a radius the data support from
//! below: at least half the points' extent, and, where the geometric fit
//! ran, `1 / (kappa + k sigma_kappa)` with the fitted curvature `kappa`
//! and its sigma, capped at [`SectionFitSettings::max_radius_m`].
//!
//! # Honest radius sigma
//! The geometric fit's covariance rests on the residual variance of few
//! points, so a normalised error follows Student's t with `k - 3` degrees
//! of freedom (`k` distinct points), not the normal law: with 8 points a
//! "3 sigma" interval would hold only 97 % of the time. The sigma is
//! scaled by `t_{k-3}(1 - p) / 3`, `p` the normal tail beyond 3
//! ([`T_OVER_Z3`]), so three reported sigmas cover what three sigmas of a
//! normal error would. The radius is `1 / kappa`, and near the coverage
//! limit the curvature is the parameter whose error is nearly normal: the
//! reported radius sigma is the larger of the scaled linear one and a
//! third of the distance from `r` to `1 / (kappa - 3 sigma_kappa)` (the
//! long side; infinite when that curvature is not positive).
//!
//! Degenerate data (three or fewer distinct points, a singular normal
//! matrix: the fit's covariance is unknown) give a lower bound only,
//! [`LowerBoundReason::Degenerate`], at half the points' extent. A circle
//! that leaves the station point (the body's axis, inside the conduit)
//! outside has its centre on the wrong side of the points: a lower bound
//! only, [`LowerBoundReason::WrongSide`], at half the extent, which no
//! circle through the points can undercut.

use super::ellipse::{GeometricEllipse, direct_ellipse, geometric_ellipse};
use super::fit::{
    Convergence, FitError, LmSettings, Point2, angular_coverage_rad, at_most, count_f64,
    hyper_then_geometric, positive, sq,
};
use super::{Station, TactileMap};
use nalgebra::{Matrix3, SymmetricEigen, Unit, Vector3};

/// Settings of the plane fit and its classification.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SectionFitSettings {
    /// Fewer points than this: [`SectionShape::Unknown`] (>= 3).
    pub min_points: usize,
    /// Angular coverage below this: lower bound only, rad.
    pub min_coverage_rad: f64,
    /// Radius sigma above this fraction of the radius: lower bound only.
    pub max_relative_radius_sigma: f64,
    /// Largest plausible radius, m; beyond it: lower bound only (capped
    /// here).
    pub max_radius_m: f64,
    /// Smallest plausible radius, m: the body lies inside the conduit, so
    /// a circle through its contacts narrower than the body is noise on a
    /// few close points; below it: lower bound only, at this radius.
    pub min_radius_m: f64,
    /// Sigmas of curvature margin in the lower bound.
    pub lower_bound_sigmas: f64,
    /// Coverage at or above which an ellipse is also fitted, rad.
    pub ellipse_min_coverage_rad: f64,
    /// Points needed for the ellipse (>= 6).
    pub ellipse_min_points: usize,
    /// Levenberg–Marquardt settings for both refinements.
    pub lm: LmSettings,
}

impl Default for SectionFitSettings {
    fn default() -> Self {
        Self {
            min_points: 5,
            min_coverage_rad: 30.0_f64.to_radians(),
            max_relative_radius_sigma: 0.2,
            max_radius_m: 10.0,
            min_radius_m: 0.0,
            lower_bound_sigmas: 2.0,
            ellipse_min_coverage_rad: 240.0_f64.to_radians(),
            ellipse_min_points: 10,
            lm: LmSettings::default(),
        }
    }
}

/// Why a section is unknown.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum UnknownReason {
    /// Fewer points than [`SectionFitSettings::min_points`].
    TooFewPoints,
    /// A point with a non-finite coordinate.
    NonFinite,
    /// All points coincide.
    Coincident,
}

/// Why only a lower bound on the radius is reported.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LowerBoundReason {
    /// The points are collinear (no finite circle).
    Collinear,
    /// Angular coverage below the minimum.
    ShortArc,
    /// The radius sigma is too large a fraction of the radius.
    RadiusUncertain,
    /// The radius exceeds the plausible limit.
    BeyondLimit,
    /// The geometric solver did not converge.
    NotConverged,
    /// The radius is below the smallest plausible one (narrower than the
    /// body that touched it).
    BelowBody,
    /// Three or fewer distinct points, or a singular normal matrix: the
    /// fit's covariance is unknown.
    Degenerate,
    /// The fitted circle leaves the station point (inside the conduit)
    /// outside: its centre is on the wrong side of the points.
    WrongSide,
}

/// `t_nu(1 - p) / 3` for `nu = 1 ..= 40` degrees of freedom, `p` the upper
/// tail of a standard normal beyond 3 (`1 - Phi(3)`), rounded up in the
/// fourth decimal place: computed from the Student-t tail through the
/// regularised incomplete beta function (Abramowitz and Stegun 26.7.1) by
/// `tests/reference/student_t_quantiles.py` (mpmath), which writes the
/// data file a test holds this table against.
pub const T_OVER_Z3: [f64; 40] = [
    78.6005, 6.4023, 3.0730, 2.2068, 1.8357, 1.6347, 1.5100, 1.4256, 1.3648, 1.3190, 1.2834,
    1.2548, 1.2314, 1.2120, 1.1955, 1.1814, 1.1692, 1.1585, 1.1491, 1.1408, 1.1333, 1.1266, 1.1205,
    1.1150, 1.1099, 1.1053, 1.1011, 1.0971, 1.0935, 1.0902, 1.0870, 1.0841, 1.0814, 1.0788, 1.0764,
    1.0742, 1.0720, 1.0700, 1.0681, 1.0663,
];

/// The radius sigma the section reports for a geometric fit (module docs,
/// "Honest radius sigma"): the fit's own sigma scaled by
/// [`t_sigma_scale`] of `k - 3` degrees of freedom, or a third of the long
/// side of the three-sigma curvature interval when that is larger;
/// infinite for degenerate fits.
#[must_use]
pub fn honest_radius_sigma_m(g: &super::fit::GeometricCircle) -> f64 {
    let r = g.circle.radius_m;
    let raw = g.radius_sigma_m();
    if !(raw.is_finite() && r > 0.0) || g.distinct_points <= 3 {
        return f64::INFINITY;
    }
    let t = t_sigma_scale(g.distinct_points - 3);
    let kappa = 1.0 / r;
    let sk = t * raw / (r * r);
    let long_side = if kappa > 3.0 * sk {
        (1.0 / (kappa - 3.0 * sk) - r) / 3.0
    } else {
        f64::INFINITY
    };
    (t * raw).max(long_side)
}

/// The factor that turns a residual-based sigma with `dof` degrees of
/// freedom into one whose three-sigma interval covers like a normal one:
/// [`T_OVER_Z3`], and beyond 40 the Cornish-Fisher expansion of the t
/// quantile (Abramowitz and Stegun 26.7.5, first two terms, with z = 3):
/// `t / z = 1 + (z^2 + 1) / (4 nu) + (5 z^4 + 16 z^2 + 3) / (96 nu^2)`.
/// Infinite for no degree of freedom.
#[must_use]
pub fn t_sigma_scale(dof: usize) -> f64 {
    match dof {
        0 => f64::INFINITY,
        d if d <= T_OVER_Z3.len() => T_OVER_Z3.get(d - 1).copied().unwrap_or(f64::INFINITY),
        d => {
            let nu = count_f64(d);
            1.0 + 2.5 / nu + 5.75 / (nu * nu)
        }
    }
}

/// A fitted circular section, in the section plane.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CircleSection {
    /// Centre in plane coordinates (left, up) from the station point, m.
    pub centre_plane_m: Point2,
    /// Radius, m.
    pub radius_m: f64,
    /// 1-sigma of the radius, m.
    pub radius_sigma_m: f64,
    /// RMS orthogonal residual, m.
    pub rms_residual_m: f64,
    /// Covariance of (centre left, centre up, radius), m^2.
    pub covariance: Matrix3<f64>,
    /// Geometric solver status.
    pub convergence: Convergence,
    /// Radius of the hyper-accurate algebraic fit that started it, m.
    pub hyper_radius_m: f64,
}

/// Section shape.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SectionShape {
    /// Nothing can be said.
    Unknown {
        /// Why.
        reason: UnknownReason,
    },
    /// Only a lower bound on the radius.
    LowerBoundOnly {
        /// The radius is at least this, m.
        min_radius_m: f64,
        /// Why no estimate.
        reason: LowerBoundReason,
    },
    /// A circle estimate.
    Circle(CircleSection),
}

/// A plane fit: counts, coverage, the classified circle, an optional
/// ellipse.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlaneSection {
    /// Points used.
    pub points: usize,
    /// Angular coverage about the fitted centre (0 when none), rad.
    pub coverage_rad: f64,
    /// Circle result.
    pub shape: SectionShape,
    /// Ellipse (geometric, converged) when coverage allowed.
    pub ellipse: Option<GeometricEllipse>,
}

/// Half the extent of the points along their principal direction, m.
fn half_extent_m(points: &[Point2]) -> f64 {
    let n = count_f64(points.len());
    if points.is_empty() {
        return 0.0;
    }
    let (mut sx, mut sy) = (0.0, 0.0);
    for p in points {
        sx += p[0];
        sy += p[1];
    }
    let (mx, my) = (sx / n, sy / n);
    let (mut xx, mut yy, mut xy) = (0.0, 0.0, 0.0);
    for p in points {
        let (dx, dy) = (p[0] - mx, p[1] - my);
        xx += dx * dx;
        yy += dy * dy;
        xy += dx * dy;
    }
    let angle = 0.5 * libm::atan2(2.0 * xy, xx - yy);
    let (s, c) = (libm::sin(angle), libm::cos(angle));
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for p in points {
        let t = (p[0] - mx) * c + (p[1] - my) * s;
        lo = lo.min(t);
        hi = hi.max(t);
    }
    if hi >= lo { 0.5 * (hi - lo) } else { 0.0 }
}

/// Fit and classify a cross-section from points in its plane.
///
/// Order: hyper-accurate algebraic fit, Levenberg–Marquardt geometric
/// refinement, coverage, classification (module docs), and an ellipse
/// (direct fit, then geometric) when the coverage and count allow.
#[must_use]
pub fn fit_plane_section(points: &[Point2], settings: &SectionFitSettings) -> PlaneSection {
    fit_plane_section_around(points, None, settings)
}

/// [`fit_plane_section`] knowing a point inside the conduit (`inside`,
/// plane coordinates: the station point, the body's axis): a circle that
/// leaves it outside is on the wrong side of the points
/// ([`LowerBoundReason::WrongSide`]).
#[must_use]
#[allow(clippy::too_many_lines)]
pub fn fit_plane_section_around(
    points: &[Point2],
    inside: Option<Point2>,
    settings: &SectionFitSettings,
) -> PlaneSection {
    let n = points.len();
    let unknown = |reason| PlaneSection {
        points: n,
        coverage_rad: 0.0,
        shape: SectionShape::Unknown { reason },
        ellipse: None,
    };
    if n < settings.min_points.max(3) {
        return unknown(UnknownReason::TooFewPoints);
    }
    let cap = settings.max_radius_m;
    let lower = |min_radius_m: f64, reason, coverage_rad| PlaneSection {
        points: n,
        coverage_rad,
        shape: SectionShape::LowerBoundOnly {
            min_radius_m: min_radius_m.min(cap),
            reason,
        },
        ellipse: None,
    };
    let (start, g) = match hyper_then_geometric(points, &settings.lm) {
        Ok((h, g)) => (h.circle, g),
        Err(FitError::NonFinite { .. }) => return unknown(UnknownReason::NonFinite),
        Err(FitError::Coincident) => return unknown(UnknownReason::Coincident),
        Err(FitError::TooFewPoints { .. }) => return unknown(UnknownReason::TooFewPoints),
        Err(_) => return lower(half_extent_m(points), LowerBoundReason::Collinear, 0.0),
    };
    let coverage = angular_coverage_rad(points, &g.circle.centre);
    if !g.convergence.converged() {
        return lower(
            half_extent_m(points),
            LowerBoundReason::NotConverged,
            coverage,
        );
    }
    let r = g.circle.radius_m;
    let raw_sr = g.radius_sigma_m();
    if !raw_sr.is_finite() || g.distinct_points <= 3 {
        return lower(
            half_extent_m(points),
            LowerBoundReason::Degenerate,
            coverage,
        );
    }
    if let Some(c) = inside
        && sq(c[0] - g.circle.centre[0]) + sq(c[1] - g.circle.centre[1]) > r * r
    {
        return lower(half_extent_m(points), LowerBoundReason::WrongSide, coverage);
    }
    let t = t_sigma_scale(g.distinct_points - 3);
    let kappa = 1.0 / r;
    let sk = t * raw_sr / (r * r);
    let sr = honest_radius_sigma_m(&g);
    // Curvature bound: 1 / (kappa + k sigma_kappa).
    let bound = || {
        let curvature_bound = 1.0 / (kappa + settings.lower_bound_sigmas * sk);
        half_extent_m(points).max(curvature_bound)
    };
    if coverage < settings.min_coverage_rad {
        return lower(bound(), LowerBoundReason::ShortArc, coverage);
    }
    if !at_most(sr, settings.max_relative_radius_sigma * r) {
        return lower(bound(), LowerBoundReason::RadiusUncertain, coverage);
    }
    if !at_most(r, settings.max_radius_m) {
        return lower(bound(), LowerBoundReason::BeyondLimit, coverage);
    }
    if r < settings.min_radius_m {
        return lower(
            bound().max(settings.min_radius_m),
            LowerBoundReason::BelowBody,
            coverage,
        );
    }
    let ellipse = if coverage >= settings.ellipse_min_coverage_rad
        && n >= settings.ellipse_min_points.max(6)
    {
        let start = direct_ellipse(points).ok();
        start
            .and_then(|e| geometric_ellipse(points, &e, &settings.lm).ok())
            .filter(|e| {
                e.convergence.converged()
                    && e.ellipse.semi_major_m <= settings.max_radius_m
                    && e.ellipse.semi_minor_m > 0.0
            })
    } else {
        None
    };
    PlaneSection {
        points: n,
        coverage_rad: coverage,
        shape: SectionShape::Circle(CircleSection {
            centre_plane_m: g.circle.centre,
            radius_m: r,
            radius_sigma_m: sr,
            rms_residual_m: g.rms_residual_m,
            covariance: g.covariance * (t * t),
            convergence: g.convergence,
            hyper_radius_m: start.radius_m,
        }),
        ellipse,
    }
}

/// Where the section axis came from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AxisSource {
    /// The body path tangent alone (normals too few, too alike, or in
    /// disagreement).
    Tangent,
    /// Tangent blended with the wall-normal estimate.
    Blended {
        /// Weight of the normal estimate, in `[0, 1]`.
        normal_weight: f64,
    },
}

/// Settings for [`TactileMap::section_at`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SectionSettings {
    /// Half-length of the axial window around the station, m.
    pub half_window_m: f64,
    /// Points farther than this from the station's axis line are ignored, m.
    pub max_distance_m: f64,
    /// Points older than this (relative to the last ingested frame) are
    /// ignored, s.
    pub max_age_s: f64,
    /// 1-sigma of the path tangent as the conduit axis, rad.
    pub tangent_sigma_rad: f64,
    /// Normal-based axis farther than this from the tangent is rejected, rad.
    pub max_axis_correction_rad: f64,
    /// Smallest middle/largest eigenvalue ratio of `sum n n^T` for the
    /// normals to count as spanning a plane.
    pub min_normal_spread: f64,
    /// Plane fit and classification.
    pub fit: SectionFitSettings,
}

impl Default for SectionSettings {
    fn default() -> Self {
        Self {
            half_window_m: 0.1,
            max_distance_m: 3.0,
            max_age_s: f64::INFINITY,
            tangent_sigma_rad: 0.1,
            max_axis_correction_rad: 0.35,
            min_normal_spread: 0.05,
            fit: SectionFitSettings::default(),
        }
    }
}

/// A cross-section at a station, in the map frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SectionEstimate {
    /// The station asked for.
    pub station: Station,
    /// Unit conduit axis used, forward, map frame.
    pub axis_map: Unit<Vector3<f64>>,
    /// Where the axis came from.
    pub axis_source: AxisSource,
    /// Plane first axis ("left"), map frame.
    pub left_map: Vector3<f64>,
    /// Plane second axis ("up"), map frame.
    pub up_map: Vector3<f64>,
    /// RMS kinematic sigma of the points used, m (common-mode: it moves
    /// the centre, not the radius; not in the fit covariance).
    pub kinematic_sigma_m: f64,
    /// The plane fit.
    pub plane: PlaneSection,
}

impl SectionEstimate {
    /// A plane point (left, up from the station point) in the map frame.
    #[must_use]
    pub fn plane_to_map(&self, p: Point2) -> Vector3<f64> {
        self.station.point_map_m + self.left_map * p[0] + self.up_map * p[1]
    }

    /// Map-frame unit vector of a plane angle (from left toward up).
    #[must_use]
    pub fn direction_map(&self, angle_rad: f64) -> Vector3<f64> {
        self.left_map * libm::cos(angle_rad) + self.up_map * libm::sin(angle_rad)
    }

    /// The fitted circle's centre in the map frame, if there is one.
    #[must_use]
    pub fn centre_map_m(&self) -> Option<Vector3<f64>> {
        match self.plane.shape {
            SectionShape::Circle(c) => Some(self.plane_to_map(c.centre_plane_m)),
            _ => None,
        }
    }

    /// Estimated clear diameter, m: the ellipse minor axis when there is
    /// one, else the circle's diameter; `None` without an estimate.
    #[must_use]
    pub fn clear_diameter_m(&self) -> Option<f64> {
        match (self.plane.shape, self.plane.ellipse) {
            (SectionShape::Circle(_), Some(e)) => Some(2.0 * e.ellipse.semi_minor_m),
            (SectionShape::Circle(c), None) => Some(2.0 * c.radius_m),
            _ => None,
        }
    }
}

/// Plane basis (left, up) for an axis (module docs).
pub(crate) fn plane_basis(axis: &Vector3<f64>) -> (Vector3<f64>, Vector3<f64>) {
    let l = Vector3::z().cross(axis);
    let l = if l.norm() >= 0.2 {
        l.normalize()
    } else {
        Vector3::x().cross(axis).normalize()
    };
    let u = axis.cross(&l);
    (l, u)
}

impl<const W: usize> TactileMap<W> {
    /// True when `p` is recent enough and near the station's axis line.
    pub(crate) fn usable(
        &self,
        p: &super::WallPoint,
        station: &Station,
        settings: &SectionSettings,
    ) -> bool {
        let recent = match self.last_time_s() {
            Some(t) => t - p.time_s <= settings.max_age_s,
            None => true,
        };
        let d = p.point_map_m - station.point_map_m;
        let axial = d.dot(&station.tangent_map);
        let radial2 = d.norm_squared() - axial * axial;
        recent && radial2 <= sq(settings.max_distance_m)
    }

    /// Cross-section at `station` from the stored wall points (module docs
    /// for the axis, plane and classification).
    #[must_use]
    pub fn section_at(&self, station: &Station, settings: &SectionSettings) -> SectionEstimate {
        let t = station.tangent_map.into_inner();
        let hw = settings.half_window_m;
        // The axis ends within `max_axis_correction_rad` of the tangent
        // (blend_axis), so `|d . axis| >= |d . t| - |d| |axis - t|`: pass 1
        // also keeps every touched point that might lie in the axis-based
        // window (a superset, with slack for rounding) for pass 2 to test
        // exactly, oldest first like the points themselves.
        let half = 0.5
            * settings
                .max_axis_correction_rad
                .clamp(0.0, core::f64::consts::PI);
        let reach = 2.0 * libm::sin(half) + 1e-6;
        let reach2 = reach * reach;
        // A usable point is within `max_distance_m` of the station's axis
        // line, so `|d| <= |d . t| + r_max`, and a pass-2 point also has
        // `|d . t| (1 - reach) <= hw + reach r_max`: a cheap first test.
        let r_max = libm::fabs(settings.max_distance_m);
        let along_max = if reach < 1.0 {
            ((hw + reach * r_max) / (1.0 - reach)) * (1.0 + 1e-9) + 1e-12
        } else {
            f64::INFINITY
        };
        let mut maybe = [0usize; W];
        let mut maybe_count = 0usize;
        // Pass 1: normals of the points in the tangent-based window.
        let mut s = Matrix3::zeros();
        let mut count = 0usize;
        let (older, newer) = self.ordered();
        let first = older.len();
        older
            .iter()
            .enumerate()
            .chain(newer.iter().enumerate().map(|(i, p)| (first + i, p)))
            .for_each(|(i, p)| {
                if !p.touched {
                    return;
                }
                let d = p.point_map_m - station.point_map_m;
                let along = libm::fabs(d.dot(&t));
                if along <= hw && self.usable(p, station, settings) {
                    s += p.normal_map * p.normal_map.transpose();
                    count += 1;
                }
                let excess = along - hw;
                if along <= along_max
                    && (excess <= 0.0 || excess * excess <= d.norm_squared() * reach2 + 1e-24)
                    && let Some(slot) = maybe.get_mut(maybe_count)
                {
                    *slot = i;
                    maybe_count += 1;
                }
            });
        let (axis, axis_source) = blend_axis(&s, count, &t, settings);
        let (left, up) = plane_basis(&axis);
        // Pass 2: project the points in the axis-based window, into a
        // small buffer when the candidates fit in it.
        let mut small = [[0.0f64; 2]; SMALL_SECTION_POINTS];
        let mut large;
        let buf: &mut [[f64; 2]] = if maybe_count <= SMALL_SECTION_POINTS {
            &mut small
        } else {
            large = [[0.0f64; 2]; W];
            &mut large
        };
        let mut n = 0usize;
        let mut var_sum = 0.0;
        let pass2 = maybe
            .get(..maybe_count)
            .unwrap_or(&[])
            .iter()
            .filter_map(|&i| {
                if i < first {
                    older.get(i)
                } else {
                    newer.get(i - first)
                }
            });
        for p in pass2 {
            let d = p.point_map_m - station.point_map_m;
            if p.touched
                && libm::fabs(d.dot(&axis)) <= hw
                && self.usable(p, station, settings)
                && let Some(slot) = buf.get_mut(n)
            {
                *slot = [d.dot(&left), d.dot(&up)];
                n += 1;
                var_sum += p.sigma_m * p.sigma_m;
            }
        }
        let pts = buf.get(..n).unwrap_or(&[]);
        let plane = fit_plane_section_around(pts, Some([0.0, 0.0]), &settings.fit);
        SectionEstimate {
            station: *station,
            axis_map: Unit::new_unchecked(axis),
            axis_source,
            left_map: left,
            up_map: up,
            kinematic_sigma_m: if n > 0 {
                libm::sqrt(var_sum / count_f64(n))
            } else {
                0.0
            },
            plane,
        }
    }
}

/// Pass-2 candidates up to this many are projected into a stack buffer of
/// this size rather than one of the map's capacity.
const SMALL_SECTION_POINTS: usize = 64;

/// Cap on the symmetric eigen-solver sweeps for the normal scatter.
const EIGEN_MAX_ITERATIONS: usize = 64;

/// Axis from the tangent and the normal scatter (module docs).
pub(super) fn blend_axis(
    s: &Matrix3<f64>,
    count: usize,
    t: &Vector3<f64>,
    settings: &SectionSettings,
) -> (Vector3<f64>, AxisSource) {
    let fallback = (*t, AxisSource::Tangent);
    if count < 3 {
        return fallback;
    }
    let Some(eig) = SymmetricEigen::try_new(*s, 1e-14, EIGEN_MAX_ITERATIONS) else {
        return fallback;
    };
    // Sort eigenpairs ascending (three values: a fixed comparison network).
    let mut order = [0usize, 1, 2];
    let val = |i: usize| eig.eigenvalues.get(i).copied().unwrap_or(f64::INFINITY);
    order.sort_unstable_by(|a, b| val(*a).total_cmp(&val(*b)));
    let [i_min, i_mid, i_max] = order;
    let (l_min, l_mid, l_max) = (val(i_min), val(i_mid), val(i_max));
    if !positive(l_max) || l_mid / l_max < settings.min_normal_spread {
        return fallback;
    }
    let mut v = eig.eigenvectors.column(i_min).into_owned();
    if v.dot(t) < 0.0 {
        v = -v;
    }
    let cos_angle = v.dot(t).clamp(-1.0, 1.0);
    if libm::acos(cos_angle) > settings.max_axis_correction_rad {
        return fallback;
    }
    let var_n = l_min.max(0.0) / (count_f64(count) * l_mid) + 1e-8;
    let var_t = sq(settings.tangent_sigma_rad).max(1e-12);
    let w_n = (1.0 / var_n) / (1.0 / var_n + 1.0 / var_t);
    let blended = v * w_n + t * (1.0 - w_n);
    let norm = blended.norm();
    if !(positive(norm) && norm.is_finite()) {
        return fallback;
    }
    (blended / norm, AxisSource::Blended { normal_weight: w_n })
}
