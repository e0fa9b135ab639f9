//! Circle fits to points in a plane (the cross-section plane).
//!
//! Algebraic fits: a circle is `A z + B x + C y + D = 0` with
//! `z = x^2 + y^2`. With the moment matrix `M` of `(z, x, y, 1)` each fit
//! minimises `a^T M a` under a quadratic constraint `a^T N a = 1`, that is
//! the generalised eigenproblem `M a = eta N a` at its smallest
//! non-negative `eta` (Chernov, *Circular and Linear Regression*, 2010,
//! ch. 5-7). The constraint matrices, for data centred on their mean:
//!
//! - Kasa (Kasa 1976, IEEE Trans. Instrum. Meas. 25): `A = 1`, `N = e0 e0^T`.
//! - Pratt (Pratt 1987, Computer Graphics 21(4)): `B^2 + C^2 - 4 A D = 1`.
//! - Hyper-accurate (Al-Sharadqah and Chernov 2009, Electron. J. Statist.
//!   3): `N = 2 N_Taubin - N_Pratt`, which removes the essential bias.
//!
//! `det(M - eta N)` is a polynomial of degree at most 4 in `eta`; it is
//! expanded exactly here and its smallest root found by Newton's method
//! from `eta = 0` (the procedure of Chernov's book), with an iteration cap.
//! The parameter vector is a column of the adjugate of `M - eta N`.
//!
//! For centred data `det(M - eta N_Pratt)` and `det(M - eta N_Hyper)` are
//! the same polynomial, the `(A, B, C)` parts of the solutions coincide and
//! only `D` differs: Pratt and the hyper fit share the centre and
//! `r_hyper^2 = r_pratt^2 - 4 eta`. The tests use that identity.
//!
//! Geometric fit: Levenberg–Marquardt on the orthogonal distances
//! `d_i = |p_i - c| - r` (as in Shakarji 1998, J. Res. NIST 103(6)),
//! started from the hyper fit, with an iteration cap and an explicit
//! status. Covariance `sigma^2 (J^T J)^-1` with `sigma^2 = RSS / (n - 3)`.
//!
//! Every fit works on points shifted to their mean and scaled by their RMS
//! distance from it, so the numbers it handles are of order one.

use nalgebra::{Matrix3, Matrix4, Vector3};

/// A point in the cross-section plane, m.
pub type Point2 = [f64; 2];

/// Which algebraic circle fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AlgebraicMethod {
    /// Kasa 1976: plain least squares on `z + B x + C y + D`.
    Kasa,
    /// Pratt 1987: gradient-weighted constraint `B^2 + C^2 - 4AD = 1`.
    Pratt,
    /// Al-Sharadqah and Chernov 2009, the hyper-accurate fit.
    Hyper,
}

/// Why a fit could not be made.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FitError {
    /// Not enough points for the model.
    TooFewPoints {
        /// Points given.
        given: usize,
        /// Points needed.
        needed: usize,
    },
    /// A point with a non-finite coordinate.
    NonFinite {
        /// Its index.
        index: usize,
    },
    /// All points coincide.
    Coincident,
    /// The points lie on a line (no finite circle or ellipse).
    Collinear,
    /// The constraint root or the eigenvector could not be found.
    NoSolution,
    /// The data do not determine an ellipse (the conic is not one).
    NotEllipse,
}

/// A circle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Circle {
    /// Centre, m.
    pub centre: Point2,
    /// Radius, m.
    pub radius_m: f64,
}

/// Result of an algebraic fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AlgebraicCircle {
    /// The circle.
    pub circle: Circle,
    /// The generalised eigenvalue reached, in the normalised units the fit
    /// works in (dimensionless).
    pub eta: f64,
    /// Newton iterations spent on the root.
    pub iterations: u32,
}

/// How an iterative solver ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Convergence {
    /// Step or cost change fell below tolerance.
    Converged {
        /// Iterations spent.
        iterations: u32,
    },
    /// The iteration cap was reached first; the result is the best found.
    IterationCap {
        /// Iterations spent (the cap).
        iterations: u32,
    },
}

impl Convergence {
    /// True for [`Convergence::Converged`].
    #[must_use]
    pub const fn converged(&self) -> bool {
        matches!(self, Self::Converged { .. })
    }
}

/// Levenberg–Marquardt settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LmSettings {
    /// Hard cap on iterations (accepted plus rejected steps).
    pub max_iterations: u32,
    /// Stop when the step is below this, relative to the parameter norm
    /// (normalised units).
    pub step_tolerance: f64,
    /// Stop when an accepted step lowers the cost by less than this
    /// fraction.
    pub cost_tolerance: f64,
}

impl Default for LmSettings {
    fn default() -> Self {
        Self {
            max_iterations: 50,
            step_tolerance: 1e-9,
            cost_tolerance: 1e-12,
        }
    }
}

/// Result of the geometric circle fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeometricCircle {
    /// The circle.
    pub circle: Circle,
    /// RMS orthogonal residual, m.
    pub rms_residual_m: f64,
    /// Covariance of `(centre x, centre y, radius)`, m^2, from the
    /// residuals: `RSS / (n - 3) * (J^T J)^-1`. Zero for `n = 3`.
    pub covariance: Matrix3<f64>,
    /// How the solver ended.
    pub convergence: Convergence,
}

impl GeometricCircle {
    /// 1-sigma of the radius, m.
    #[must_use]
    pub fn radius_sigma_m(&self) -> f64 {
        libm::sqrt(self.covariance.m33.max(0.0))
    }
}

/// Shift and scale taking the points to order-one numbers:
/// `x' = (x - mean) / scale`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Normaliser {
    pub mean: Point2,
    pub scale: f64,
}

impl Normaliser {
    /// Mean and RMS distance from the mean; checks finiteness and count.
    pub(crate) fn new(points: &[Point2], needed: usize) -> Result<Self, FitError> {
        if points.len() < needed {
            return Err(FitError::TooFewPoints {
                given: points.len(),
                needed,
            });
        }
        let mut sx = 0.0;
        let mut sy = 0.0;
        for (i, p) in points.iter().enumerate() {
            if !(p[0].is_finite() && p[1].is_finite()) {
                return Err(FitError::NonFinite { index: i });
            }
            sx += p[0];
            sy += p[1];
        }
        let n = count_f64(points.len());
        let mean = [sx / n, sy / n];
        let mut ss = 0.0;
        for p in points {
            ss += sq(p[0] - mean[0]) + sq(p[1] - mean[1]);
        }
        let scale = libm::sqrt(ss / n);
        if !(positive(scale) && scale.is_finite()) {
            return Err(FitError::Coincident);
        }
        Ok(Self { mean, scale })
    }

    pub(crate) fn apply(&self, p: &Point2) -> Point2 {
        [
            (p[0] - self.mean[0]) / self.scale,
            (p[1] - self.mean[1]) / self.scale,
        ]
    }

    pub(crate) fn undo(&self, p: Point2) -> Point2 {
        [
            p[0] * self.scale + self.mean[0],
            p[1] * self.scale + self.mean[1],
        ]
    }
}

/// `usize` count as `f64` without a lossy cast (exact below 2^32).
pub(crate) fn count_f64(n: usize) -> f64 {
    u32::try_from(n).map_or(f64::from(u32::MAX), f64::from)
}

pub(crate) fn sq(x: f64) -> f64 {
    x * x
}

/// `x > 0`, false for NaN.
pub(crate) fn positive(x: f64) -> bool {
    x > 0.0
}

/// `a <= b`, false when either is NaN.
pub(crate) fn at_most(a: f64, b: f64) -> bool {
    a <= b
}

/// The 24 permutations of (0, 1, 2, 3) with their signs, for the exact
/// expansion of a 4x4 determinant with polynomial entries.
const PERMUTATIONS_4: [([usize; 4], f64); 24] = [
    ([0, 1, 2, 3], 1.0),
    ([0, 1, 3, 2], -1.0),
    ([0, 2, 1, 3], -1.0),
    ([0, 2, 3, 1], 1.0),
    ([0, 3, 1, 2], 1.0),
    ([0, 3, 2, 1], -1.0),
    ([1, 0, 2, 3], -1.0),
    ([1, 0, 3, 2], 1.0),
    ([1, 2, 0, 3], 1.0),
    ([1, 2, 3, 0], -1.0),
    ([1, 3, 0, 2], -1.0),
    ([1, 3, 2, 0], 1.0),
    ([2, 0, 1, 3], 1.0),
    ([2, 0, 3, 1], -1.0),
    ([2, 1, 0, 3], -1.0),
    ([2, 1, 3, 0], 1.0),
    ([2, 3, 0, 1], 1.0),
    ([2, 3, 1, 0], -1.0),
    ([3, 0, 1, 2], -1.0),
    ([3, 0, 2, 1], 1.0),
    ([3, 1, 0, 2], 1.0),
    ([3, 1, 2, 0], -1.0),
    ([3, 2, 0, 1], -1.0),
    ([3, 2, 1, 0], 1.0),
];

/// Coefficients `c[0] + c[1] eta + ... + c[4] eta^4` of `det(M - eta N)`.
fn char_polynomial(m: &Matrix4<f64>, n: &Matrix4<f64>) -> [f64; 5] {
    let mut out = [0.0; 5];
    for (perm, sign) in &PERMUTATIONS_4 {
        // Product over rows i of (m[i, p(i)] - eta n[i, p(i)]).
        let mut poly = [1.0, 0.0, 0.0, 0.0, 0.0];
        for (row, col) in perm.iter().enumerate() {
            let a = m.get((row, *col)).copied().unwrap_or(0.0);
            let b = -n.get((row, *col)).copied().unwrap_or(0.0);
            let mut next = [0.0; 5];
            for (d, c) in poly.iter().enumerate() {
                if let Some(s) = next.get_mut(d) {
                    *s += a * c;
                }
                if let Some(s) = next.get_mut(d + 1) {
                    *s += b * c;
                }
            }
            poly = next;
        }
        for (o, p) in out.iter_mut().zip(poly.iter()) {
            *o += sign * p;
        }
    }
    out
}

fn horner(c: &[f64; 5], x: f64) -> (f64, f64) {
    let mut p = 0.0;
    let mut dp = 0.0;
    for coef in c.iter().rev() {
        dp = dp * x + p;
        p = p * x + coef;
    }
    (p, dp)
}

/// Cap on Newton iterations for the constraint root.
pub const ROOT_MAX_ITERATIONS: u32 = 64;

/// Smallest root of the characteristic polynomial by Newton from zero,
/// stopping as soon as `|p|` stops decreasing (Chernov 2010's rule).
fn smallest_root(c: &[f64; 5]) -> Result<(f64, u32), FitError> {
    let mut x = 0.0;
    let (mut y, _) = horner(c, x);
    let mut it = 0;
    while it < ROOT_MAX_ITERATIONS {
        it += 1;
        let (_, dy) = horner(c, x);
        if dy == 0.0 {
            break;
        }
        let xn = x - y / dy;
        if !xn.is_finite() {
            return Err(FitError::NoSolution);
        }
        let (yn, _) = horner(c, xn);
        if !positive(libm::fabs(y) - libm::fabs(yn)) {
            break;
        }
        let step = libm::fabs(xn - x);
        x = xn;
        y = yn;
        if step <= 1e-15 * libm::fabs(x).max(1e-300) {
            break;
        }
    }
    Ok((x, it))
}

/// Null vector of a (numerically) singular 4x4 matrix: the adjugate
/// column of largest norm.
fn null_vector_4(a: &Matrix4<f64>) -> Option<[f64; 4]> {
    let mut best = [0.0; 4];
    let mut best_norm = 0.0;
    for j in 0..4 {
        // Column j of adj(a) is row j of the cofactor matrix:
        // adj[i][j] = (-1)^(i+j) det(minor(j, i)).
        let mut col = [0.0; 4];
        for (i, slot) in col.iter_mut().enumerate() {
            let minor = a.remove_row(j).remove_column(i);
            let sign = if (i + j) % 2 == 0 { 1.0 } else { -1.0 };
            *slot = sign * minor.determinant();
        }
        let norm = col.iter().map(|v| v * v).sum::<f64>();
        if norm > best_norm {
            best_norm = norm;
            best = col;
        }
    }
    if best_norm > 0.0 && best_norm.is_finite() {
        Some(best)
    } else {
        None
    }
}

/// Algebraic circle fit by `method`.
///
/// # Errors
/// [`FitError`] for fewer than 3 points, non-finite or coincident points,
/// collinear points (the fit is a line), or no root.
pub fn algebraic_circle(
    points: &[Point2],
    method: AlgebraicMethod,
) -> Result<AlgebraicCircle, FitError> {
    let norm = Normaliser::new(points, 3)?;
    let n = count_f64(points.len());
    let (mut mxx, mut myy, mut mxy, mut mxz, mut myz, mut mzz, mut mz) =
        (0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
    for p in points {
        let [x, y] = norm.apply(p);
        let z = x * x + y * y;
        mxx += x * x;
        myy += y * y;
        mxy += x * y;
        mxz += x * z;
        myz += y * z;
        mzz += z * z;
        mz += z;
    }
    let (mxx, myy, mxy, mxz, myz, mzz, mz) =
        (mxx / n, myy / n, mxy / n, mxz / n, myz / n, mzz / n, mz / n);
    // Order of the parameter vector: (A, B, C, D) for z, x, y, 1. The data
    // are centred, so the means of x and y are zero.
    #[rustfmt::skip]
    let m = Matrix4::new(
        mzz, mxz, myz, mz,
        mxz, mxx, mxy, 0.0,
        myz, mxy, myy, 0.0,
        mz,  0.0, 0.0, 1.0,
    );
    #[rustfmt::skip]
    let constraint = match method {
        AlgebraicMethod::Kasa => Matrix4::new(
            1.0, 0.0, 0.0, 0.0,
            0.0, 0.0, 0.0, 0.0,
            0.0, 0.0, 0.0, 0.0,
            0.0, 0.0, 0.0, 0.0,
        ),
        AlgebraicMethod::Pratt => Matrix4::new(
            0.0, 0.0, 0.0, -2.0,
            0.0, 1.0, 0.0, 0.0,
            0.0, 0.0, 1.0, 0.0,
            -2.0, 0.0, 0.0, 0.0,
        ),
        // 2 N_Taubin - N_Pratt; N_Taubin = [[4 mz, 2 mx, 2 my, 0],
        // [2 mx, 1, 0, 0], [2 my, 0, 1, 0], [0, 0, 0, 0]] with mx = my = 0.
        AlgebraicMethod::Hyper => Matrix4::new(
            8.0 * mz, 0.0, 0.0, 2.0,
            0.0, 1.0, 0.0, 0.0,
            0.0, 0.0, 1.0, 0.0,
            2.0, 0.0, 0.0, 0.0,
        ),
    };
    let poly = char_polynomial(&m, &constraint);
    let (eta, iterations) = smallest_root(&poly)?;
    let a = null_vector_4(&(m - constraint * eta)).ok_or(FitError::NoSolution)?;
    let [ca, cb, cc, cd] = a;
    let size = libm::sqrt(ca * ca + cb * cb + cc * cc + cd * cd);
    if !positive(libm::fabs(ca) - 1e-12 * size) {
        return Err(FitError::Collinear);
    }
    let cx = -cb / (2.0 * ca);
    let cy = -cc / (2.0 * ca);
    let r2 = (cb * cb + cc * cc - 4.0 * ca * cd) / (4.0 * ca * ca);
    if !(positive(r2) && r2.is_finite()) {
        return Err(FitError::NoSolution);
    }
    Ok(AlgebraicCircle {
        circle: Circle {
            centre: norm.undo([cx, cy]),
            radius_m: libm::sqrt(r2) * norm.scale,
        },
        eta,
        iterations,
    })
}

/// Cost, `J^T J` and `J^T d` of the orthogonal distances, normalised units.
fn circle_normal_equations(
    points: &[Point2],
    norm: &Normaliser,
    p: &Vector3<f64>,
) -> (f64, Matrix3<f64>, Vector3<f64>) {
    let mut cost = 0.0;
    let mut jtj = Matrix3::zeros();
    let mut jtd = Vector3::zeros();
    for q in points {
        let [x, y] = norm.apply(q);
        let dx = x - p.x;
        let dy = y - p.y;
        let rho = libm::sqrt(dx * dx + dy * dy);
        let (ux, uy) = if rho > 0.0 {
            (dx / rho, dy / rho)
        } else {
            (1.0, 0.0)
        };
        let d = rho - p.z;
        let j = Vector3::new(-ux, -uy, -1.0);
        cost += d * d;
        jtj += j * j.transpose();
        jtd += j * d;
    }
    (cost, jtj, jtd)
}

/// Geometric (orthogonal-distance) circle fit by Levenberg–Marquardt from
/// `initial`.
///
/// # Errors
/// [`FitError`] for fewer than 3 points, non-finite or coincident points,
/// or a non-finite start.
pub fn geometric_circle(
    points: &[Point2],
    initial: &Circle,
    settings: &LmSettings,
) -> Result<GeometricCircle, FitError> {
    let norm = Normaliser::new(points, 3)?;
    let c0 = norm.apply(&initial.centre);
    let mut p = Vector3::new(c0[0], c0[1], initial.radius_m / norm.scale);
    if !(p.x.is_finite() && p.y.is_finite() && p.z.is_finite()) {
        return Err(FitError::NoSolution);
    }
    let (mut cost, mut jtj, mut jtd) = circle_normal_equations(points, &norm, &p);
    let mut lambda = 1e-3;
    let mut convergence = Convergence::IterationCap {
        iterations: settings.max_iterations,
    };
    for it in 1..=settings.max_iterations {
        let damped = jtj + Matrix3::from_diagonal(&(jtj.diagonal() * lambda));
        let Some(inv) = damped.try_inverse() else {
            lambda *= 10.0;
            continue;
        };
        let delta = -(inv * jtd);
        let small = delta.norm() <= settings.step_tolerance * (p.norm() + settings.step_tolerance);
        let cand = p + delta;
        let (c_cost, c_jtj, c_jtd) = circle_normal_equations(points, &norm, &cand);
        if c_cost.is_finite() && c_cost <= cost {
            let drop = cost - c_cost;
            p = cand;
            cost = c_cost;
            jtj = c_jtj;
            jtd = c_jtd;
            lambda = (lambda * 0.3).max(1e-12);
            if small || drop <= settings.cost_tolerance * cost {
                convergence = Convergence::Converged { iterations: it };
                break;
            }
        } else {
            if small {
                convergence = Convergence::Converged { iterations: it };
                break;
            }
            lambda *= 10.0;
        }
    }
    let n = points.len();
    let sigma2_n = if n > 3 {
        cost / count_f64(n - 3)
    } else {
        0.0
    };
    let cov_n = jtj.try_inverse().unwrap_or_else(Matrix3::zeros) * sigma2_n;
    let s2 = norm.scale * norm.scale;
    Ok(GeometricCircle {
        circle: Circle {
            centre: norm.undo([p.x, p.y]),
            radius_m: libm::fabs(p.z) * norm.scale,
        },
        rms_residual_m: libm::sqrt(cost / count_f64(n)) * norm.scale,
        covariance: cov_n * s2,
        convergence,
    })
}

/// Points used at most by [`angular_coverage_rad`]; larger sets are
/// sub-sampled with a fixed stride.
pub const COVERAGE_MAX_POINTS: usize = 256;

/// Angular coverage of the points seen from `centre`: `2 pi` minus the
/// largest angular gap between neighbouring points, rad.
#[must_use]
pub fn angular_coverage_rad(points: &[Point2], centre: &Point2) -> f64 {
    let mut angles = [0.0f64; COVERAGE_MAX_POINTS];
    let stride = points.len().div_ceil(COVERAGE_MAX_POINTS).max(1);
    let mut k = 0;
    for (slot, p) in angles.iter_mut().zip(points.iter().step_by(stride)) {
        *slot = libm::atan2(p[1] - centre[1], p[0] - centre[0]);
        k += 1;
    }
    let Some(used) = angles.get_mut(..k) else {
        return 0.0;
    };
    if used.len() < 2 {
        return 0.0;
    }
    used.sort_unstable_by(f64::total_cmp);
    let mut max_gap = 0.0f64;
    for w in used.windows(2) {
        if let [a, b] = w {
            max_gap = max_gap.max(b - a);
        }
    }
    if let (Some(first), Some(last)) = (used.first(), used.last()) {
        max_gap = max_gap.max(first + core::f64::consts::TAU - last);
    }
    core::f64::consts::TAU - max_gap
}

#[cfg(test)]
mod tests {
    use super::*;

    fn arc(n: usize, r: f64, c: [f64; 2], from: f64, to: f64) -> [[f64; 2]; 64] {
        let mut out = [[0.0; 2]; 64];
        for (i, o) in out.iter_mut().take(n).enumerate() {
            let t = from + (to - from) * i as f64 / (n - 1) as f64;
            *o = [c[0] + r * libm::cos(t), c[1] + r * libm::sin(t)];
        }
        out
    }

    #[test]
    fn exact_circle_is_recovered_by_every_fit() {
        let pts = arc(12, 0.5, [1.0, -2.0], 0.3, 2.5);
        let pts = &pts[..12];
        for m in [
            AlgebraicMethod::Kasa,
            AlgebraicMethod::Pratt,
            AlgebraicMethod::Hyper,
        ] {
            let f = algebraic_circle(pts, m).unwrap();
            assert!((f.circle.radius_m - 0.5).abs() < 1e-10, "{m:?} {f:?}");
            assert!((f.circle.centre[0] - 1.0).abs() < 1e-10);
            assert!((f.circle.centre[1] + 2.0).abs() < 1e-10);
        }
        let g = geometric_circle(
            pts,
            &Circle {
                centre: [1.1, -1.9],
                radius_m: 0.6,
            },
            &LmSettings::default(),
        )
        .unwrap();
        assert!(g.convergence.converged());
        assert!((g.circle.radius_m - 0.5).abs() < 1e-9);
    }

    #[test]
    fn collinear_points_are_reported() {
        let pts = [[0.0, 0.0], [1.0, 1.0], [2.0, 2.0], [3.0, 3.0]];
        for m in [
            AlgebraicMethod::Kasa,
            AlgebraicMethod::Pratt,
            AlgebraicMethod::Hyper,
        ] {
            assert!(algebraic_circle(&pts, m).is_err(), "{m:?}");
        }
        let same = [[1.0, 1.0]; 4];
        assert_eq!(
            algebraic_circle(&same, AlgebraicMethod::Hyper),
            Err(FitError::Coincident)
        );
        let nan = [[1.0, 1.0], [f64::NAN, 0.0], [0.0, 0.0]];
        assert_eq!(
            algebraic_circle(&nan, AlgebraicMethod::Kasa),
            Err(FitError::NonFinite { index: 1 })
        );
    }

    #[test]
    fn coverage_of_half_circle() {
        let pts = arc(19, 1.0, [0.0, 0.0], 0.0, core::f64::consts::PI);
        let c = angular_coverage_rad(&pts[..19], &[0.0, 0.0]);
        assert!((c - core::f64::consts::PI).abs() < 1e-12);
    }
}
