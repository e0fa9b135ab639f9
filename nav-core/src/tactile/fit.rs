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
//! Two implementations, which the tests hold against each other:
//!
//! - [`algebraic_circle_general`]: the 4x4 problem as stated. `det(M - eta
//!   N)` (degree at most 4 in `eta`) is expanded exactly, its smallest root
//!   found by Newton's method from `eta = 0` (the procedure of Chernov's
//!   book) with an iteration cap, and the parameter vector taken as a column
//!   of the adjugate of `M - eta N`.
//! - [`algebraic_circle`] (the one the pipeline uses): the same problem
//!   reduced by hand. `M - eta N` has a 1 in its `(1, 1)` corner, so its
//!   determinant is that of the 3x3 Schur complement `K(eta)`; for centred
//!   data, with `Mab` the mean of `a b`,
//!   `K = [[Mzz - Mz^2 - 4 Mz eta - 4 eta^2, Mxz, Myz], [Mxz, Mxx - eta, Mxy],
//!   [Myz, Mxy, Myy - eta]]` for BOTH Pratt and the hyper fit
//!   (`Mzz - Mz^2 - eta` for Kasa), `(A, B, C)` is its null vector and
//!   `D = -(Mz + 2 eta) A` (Pratt), `(2 eta - Mz) A` (hyper), `-Mz A` (Kasa).
//!
//! The reduction shows the identity the issue asks to check: Pratt and the
//! hyper fit share `eta` and `(A, B, C)`, hence the centre, and differ only
//! in `D`, so `r_hyper^2 = r_pratt^2 - 4 eta` (normalised units). In
//! [`algebraic_circle`] that holds by construction; the tests check it on
//! [`algebraic_circle_general`], where the two constraint matrices enter
//! separately, and check the two implementations against each other and
//! against scipy.
//!
//! Geometric fit: Levenberg–Marquardt on the orthogonal distances
//! `d_i = |p_i - c| - r` (as in Shakarji 1998, J. Res. NIST 103(6)),
//! started from the hyper fit, with an iteration cap and an explicit
//! status. Covariance `sigma^2 (J^T J)^-1` with `sigma^2 = RSS / (k - 3)`,
//! `k` the number of *distinct* points (a point repeated, as when a
//! stationary robot feels the same contacts frame after frame, is one
//! measurement, not many). With three or fewer distinct points, or a
//! singular `J^T J`, the covariance is unknown and reported as infinite,
//! never as zero: a circle through three points fits them exactly and says
//! nothing about its own error.
//!
//! Every fit works on points shifted to their mean and scaled by their RMS
//! distance from it, so the numbers it handles are of order one.

use nalgebra::{Matrix3, Matrix4, SMatrix, SVector, Vector3};

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
            step_tolerance: 1e-8,
            cost_tolerance: 1e-8,
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
    /// residuals: `RSS / (k - 3) * (J^T J)^-1` with `k` distinct points.
    /// Infinite on the diagonal (unknown) for `k <= 3` or a singular
    /// `J^T J`.
    pub covariance: Matrix3<f64>,
    /// Distinct points (coordinates differing by more than `1e-9` of the
    /// points' spread).
    pub distinct_points: usize,
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
    inv_scale: f64,
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
        // Spread at rounding level of the coordinates: coincident.
        let floor = 1e-12 * (libm::fabs(mean[0]) + libm::fabs(mean[1]));
        if !(positive(scale - floor) && scale.is_finite()) {
            return Err(FitError::Coincident);
        }
        Ok(Self {
            mean,
            scale,
            inv_scale: 1.0 / scale,
        })
    }

    pub(crate) fn apply(&self, p: &Point2) -> Point2 {
        [
            (p[0] - self.mean[0]) * self.inv_scale,
            (p[1] - self.mean[1]) * self.inv_scale,
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
/// Permutations with a factor that is identically zero are skipped.
fn char_polynomial(m: &Matrix4<f64>, n: &Matrix4<f64>) -> [f64; 5] {
    let mut out = [0.0; 5];
    'perm: for (perm, sign) in &PERMUTATIONS_4 {
        let mut factors = [(0.0, 0.0); 4];
        for ((row, col), f) in perm.iter().enumerate().zip(factors.iter_mut()) {
            let a = m.get((row, *col)).copied().unwrap_or(0.0);
            let b = -n.get((row, *col)).copied().unwrap_or(0.0);
            if a == 0.0 && b == 0.0 {
                continue 'perm;
            }
            *f = (a, b);
        }
        // Product over rows of (a + b eta).
        let mut poly = [1.0, 0.0, 0.0, 0.0, 0.0];
        for (deg, (a, b)) in factors.iter().enumerate() {
            let mut next = [0.0; 5];
            for (d, c) in poly.iter().enumerate().take(deg + 1) {
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
    let (mut y, mut dy) = horner(c, x);
    let mut it = 0;
    while it < ROOT_MAX_ITERATIONS {
        it += 1;
        if dy == 0.0 {
            break;
        }
        let xn = x - y / dy;
        if !xn.is_finite() {
            return Err(FitError::NoSolution);
        }
        let (yn, dyn_) = horner(c, xn);
        if !positive(libm::fabs(y) - libm::fabs(yn)) {
            break;
        }
        let step = libm::fabs(xn - x);
        x = xn;
        y = yn;
        dy = dyn_;
        if step <= 1e-15 * libm::fabs(x).max(1e-300) {
            break;
        }
    }
    Ok((x, it))
}

/// The three indices other than `k` (0..4).
const OTHERS_4: [[usize; 3]; 4] = [[1, 2, 3], [0, 2, 3], [0, 1, 3], [0, 1, 2]];

/// Signed cofactor `(-1)^(i+j) det(minor(i, j))` of a 4x4 matrix.
fn cofactor_4(a: &Matrix4<f64>, i: usize, j: usize) -> f64 {
    let (Some(rows), Some(cols)) = (OTHERS_4.get(i), OTHERS_4.get(j)) else {
        return 0.0;
    };
    let e = |r: usize, c: usize| match (rows.get(r), cols.get(c)) {
        (Some(rr), Some(cc)) => a.get((*rr, *cc)).copied().unwrap_or(0.0),
        _ => 0.0,
    };
    let det = e(0, 0) * (e(1, 1) * e(2, 2) - e(1, 2) * e(2, 1))
        - e(0, 1) * (e(1, 0) * e(2, 2) - e(1, 2) * e(2, 0))
        + e(0, 2) * (e(1, 0) * e(2, 1) - e(1, 1) * e(2, 0));
    if (i + j).is_multiple_of(2) { det } else { -det }
}

/// Null vector of a (numerically) singular symmetric 4x4 matrix: a column
/// of its adjugate. For a symmetric rank-3 matrix `adj = c v v^T`, so the
/// column `j` with the largest diagonal cofactor `|c| v_j^2` is the best
/// conditioned one.
fn null_vector_4(a: &Matrix4<f64>) -> Option<[f64; 4]> {
    let mut j = 0;
    let mut best = 0.0;
    for k in 0..4 {
        let d = libm::fabs(cofactor_4(a, k, k));
        if d > best {
            best = d;
            j = k;
        }
    }
    // Column j of adj(a): adj[i][j] = cofactor(j, i).
    let col = [
        cofactor_4(a, j, 0),
        cofactor_4(a, j, 1),
        cofactor_4(a, j, 2),
        cofactor_4(a, j, 3),
    ];
    let norm = col.iter().map(|v| v * v).sum::<f64>();
    if norm > 0.0 && norm.is_finite() {
        Some(col)
    } else {
        None
    }
}

/// Centred, normalised moments of the points.
#[derive(Debug, Clone, Copy)]
struct Moments {
    mxx: f64,
    myy: f64,
    mxy: f64,
    mxz: f64,
    myz: f64,
    mzz: f64,
    mz: f64,
}

fn moments(points: &[Point2], norm: &Normaliser) -> Moments {
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
    Moments {
        mxx: mxx / n,
        myy: myy / n,
        mxy: mxy / n,
        mxz: mxz / n,
        myz: myz / n,
        mzz: mzz / n,
        mz: mz / n,
    }
}

/// Circle from `(A, B, C, D)` in normalised units, back to metres.
fn circle_from_parameters(
    [ca, cb, cc, cd]: [f64; 4],
    norm: &Normaliser,
) -> Result<Circle, FitError> {
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
    Ok(Circle {
        centre: norm.undo([cx, cy]),
        radius_m: libm::sqrt(r2) * norm.scale,
    })
}

/// Algebraic circle fit by `method`, by the hand-reduced 3x3 form (module
/// docs). This is the form the section pipeline uses.
///
/// # Errors
/// [`FitError`] for fewer than 3 points, non-finite or coincident points,
/// collinear points (the fit is a line), or no root.
pub fn algebraic_circle(
    points: &[Point2],
    method: AlgebraicMethod,
) -> Result<AlgebraicCircle, FitError> {
    let norm = Normaliser::new(points, 3)?;
    algebraic_circle_in(points, &norm, method)
}

fn algebraic_circle_in(
    points: &[Point2],
    norm: &Normaliser,
    method: AlgebraicMethod,
) -> Result<AlgebraicCircle, FitError> {
    let norm = *norm;
    let m = moments(points, &norm);
    let c0 = m.mzz - m.mz * m.mz;
    let q = m.mxy * m.mxy;
    let kasa = method == AlgebraicMethod::Kasa;
    // K(eta)[0][0] and its derivative.
    let k00 = |eta: f64| {
        if kasa {
            (c0 - eta, -1.0)
        } else {
            (
                c0 - 4.0 * m.mz * eta - 4.0 * eta * eta,
                -4.0 * m.mz - 8.0 * eta,
            )
        }
    };
    // Kasa's constraint has no x, y terms: K's diagonal below the corner
    // does not move with eta.
    let e = if kasa { 0.0 } else { 1.0 };
    // det K(eta) and its derivative.
    let p = |eta: f64| {
        let (a, da) = k00(eta);
        let b = m.mxx - e * eta;
        let c = m.myy - e * eta;
        let minor = b * c - q;
        let det = a * minor - m.mxz * m.mxz * c + 2.0 * m.mxz * m.mxy * m.myz - m.myz * m.myz * b;
        let ddet = da * minor - e * (a * (b + c) - m.mxz * m.mxz - m.myz * m.myz);
        (det, ddet)
    };
    let mut eta = 0.0;
    let (mut y, mut dy) = p(eta);
    let mut iterations = 0;
    while iterations < ROOT_MAX_ITERATIONS {
        iterations += 1;
        if dy == 0.0 {
            break;
        }
        let next = eta - y / dy;
        if !next.is_finite() {
            return Err(FitError::NoSolution);
        }
        let (yn, dyn_) = p(next);
        if !positive(libm::fabs(y) - libm::fabs(yn)) {
            break;
        }
        let step = libm::fabs(next - eta);
        eta = next;
        y = yn;
        dy = dyn_;
        if step <= 1e-15 * libm::fabs(eta).max(1e-300) {
            break;
        }
    }
    let (a, _) = k00(eta);
    let r0 = Vector3::new(a, m.mxz, m.myz);
    let r1 = Vector3::new(m.mxz, m.mxx - e * eta, m.mxy);
    let r2 = Vector3::new(m.myz, m.mxy, m.myy - e * eta);
    let mut v = r0.cross(&r1);
    for c in [r0.cross(&r2), r1.cross(&r2)] {
        if c.norm_squared() > v.norm_squared() {
            v = c;
        }
    }
    if !(positive(v.norm_squared()) && v.norm_squared().is_finite()) {
        return Err(FitError::NoSolution);
    }
    let d = match method {
        AlgebraicMethod::Kasa => -m.mz * v.x,
        AlgebraicMethod::Pratt => -(m.mz + 2.0 * eta) * v.x,
        AlgebraicMethod::Hyper => (2.0 * eta - m.mz) * v.x,
    };
    Ok(AlgebraicCircle {
        circle: circle_from_parameters([v.x, v.y, v.z, d], &norm)?,
        eta,
        iterations,
    })
}

/// Algebraic circle fit by `method`, by the general 4x4 form (module
/// docs): slower, kept as the independent cross-check of
/// [`algebraic_circle`].
///
/// # Errors
/// As [`algebraic_circle`].
pub fn algebraic_circle_general(
    points: &[Point2],
    method: AlgebraicMethod,
) -> Result<AlgebraicCircle, FitError> {
    let norm = Normaliser::new(points, 3)?;
    let Moments {
        mxx,
        myy,
        mxy,
        mxz,
        myz,
        mzz,
        mz,
    } = moments(points, &norm);
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
    Ok(AlgebraicCircle {
        circle: circle_from_parameters(a, &norm)?,
        eta,
        iterations,
    })
}

/// Cost, `J^T J` and `J^T d` of the orthogonal distances, normalised units.
/// The Jacobian row is `(-ux, -uy, -1)` with `u` the unit vector from the
/// centre to the point; the symmetric sums are accumulated directly.
fn circle_normal_equations(
    points: &[Point2],
    norm: &Normaliser,
    p: &Vector3<f64>,
) -> (f64, Matrix3<f64>, Vector3<f64>) {
    let (mut cost, mut sxx, mut sxy, mut syy, mut sx, mut sy) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
    let (mut sxd, mut syd, mut sd) = (0.0, 0.0, 0.0);
    for q in points {
        let [x, y] = norm.apply(q);
        let dx = x - p.x;
        let dy = y - p.y;
        let rho = libm::sqrt(dx * dx + dy * dy);
        let (ux, uy) = if rho > 0.0 {
            let inv = 1.0 / rho;
            (dx * inv, dy * inv)
        } else {
            (1.0, 0.0)
        };
        let d = rho - p.z;
        cost += d * d;
        sxx += ux * ux;
        sxy += ux * uy;
        syy += uy * uy;
        sx += ux;
        sy += uy;
        sxd += ux * d;
        syd += uy * d;
        sd += d;
    }
    let n = count_f64(points.len());
    #[rustfmt::skip]
    let jtj = Matrix3::new(
        sxx, sxy, sx,
        sxy, syy, sy,
        sx,  sy,  n,
    );
    (cost, jtj, -Vector3::new(sxd, syd, sd))
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
    geometric_circle_in(points, &norm, initial, settings)
}

/// The hyper-accurate algebraic fit, then the geometric refinement from
/// it, sharing one normalisation pass: the pair the section pipeline uses.
///
/// # Errors
/// As [`algebraic_circle`] and [`geometric_circle`].
pub fn hyper_then_geometric(
    points: &[Point2],
    settings: &LmSettings,
) -> Result<(AlgebraicCircle, GeometricCircle), FitError> {
    let norm = Normaliser::new(points, 3)?;
    let h = algebraic_circle_in(points, &norm, AlgebraicMethod::Hyper)?;
    let g = geometric_circle_in(points, &norm, &h.circle, settings)?;
    Ok((h, g))
}

fn geometric_circle_in(
    points: &[Point2],
    norm: &Normaliser,
    initial: &Circle,
    settings: &LmSettings,
) -> Result<GeometricCircle, FitError> {
    let norm = *norm;
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
        let eval = circle_normal_equations(points, &norm, &cand);
        if lm_offer(
            (&mut p, &mut cost, &mut jtj, &mut jtd, &mut lambda),
            cand,
            eval,
            small,
            settings.cost_tolerance,
        ) {
            convergence = Convergence::Converged { iterations: it };
            break;
        }
    }
    let n = points.len();
    let k = distinct_points(points, &norm);
    let unknown = Matrix3::from_diagonal_element(f64::INFINITY);
    let cov_n = match jtj.try_inverse() {
        Some(inv) if k > 3 && inv.iter().all(|v| v.is_finite()) => inv * (cost / count_f64(k - 3)),
        _ => unknown,
    };
    let s2 = norm.scale * norm.scale;
    Ok(GeometricCircle {
        circle: Circle {
            centre: norm.undo([p.x, p.y]),
            radius_m: libm::fabs(p.z) * norm.scale,
        },
        rms_residual_m: libm::sqrt(cost / count_f64(n)) * norm.scale,
        covariance: cov_n * s2,
        distinct_points: k,
        convergence,
    })
}

/// Distinct points: a point within `1e-9` of the spread (in normalised
/// units) of an earlier one is a repeat. `O(n^2)` in the points given.
fn distinct_points(points: &[Point2], norm: &Normaliser) -> usize {
    const TOL2: f64 = 1e-18;
    let mut k = 0usize;
    for (i, p) in points.iter().enumerate() {
        let a = norm.apply(p);
        let repeat = points.get(..i).is_some_and(|before| {
            before.iter().any(|q| {
                let b = norm.apply(q);
                sq(a[0] - b[0]) + sq(a[1] - b[1]) <= TOL2
            })
        });
        if !repeat {
            k += 1;
        }
    }
    k
}

/// One Levenberg–Marquardt acceptance decision, shared by the circle and
/// ellipse fits: take the candidate when it does not raise the cost (and
/// relax the damping), otherwise stiffen the damping. Returns `true` when
/// the fit has converged: an accepted step that was tiny or lowered the
/// cost by at most `cost_tolerance` of it, or a rejected tiny step.
pub(crate) fn lm_offer<const N: usize>(
    (p, cost, jtj, jtd, lambda): (
        &mut SVector<f64, N>,
        &mut f64,
        &mut SMatrix<f64, N, N>,
        &mut SVector<f64, N>,
        &mut f64,
    ),
    cand: SVector<f64, N>,
    (c_cost, c_jtj, c_jtd): (f64, SMatrix<f64, N, N>, SVector<f64, N>),
    small: bool,
    cost_tolerance: f64,
) -> bool {
    if c_cost.is_finite() && c_cost <= *cost {
        let drop = *cost - c_cost;
        *p = cand;
        *cost = c_cost;
        *jtj = c_jtj;
        *jtd = c_jtd;
        *lambda = (*lambda * 0.3).max(1e-12);
        small || drop <= cost_tolerance * *cost
    } else {
        if !small {
            *lambda *= 10.0;
        }
        small
    }
}

/// A monotone stand-in for the angle of `(x, y)`, in `[0, 4)`: the
/// "diamond angle" (exact order, no trigonometry), written with selects
/// rather than branches. `d theta / d pa` lies in `[1, 2]`.
fn pseudo_angle(x: f64, y: f64) -> f64 {
    let s = libm::fabs(x) + libm::fabs(y);
    let t = if positive(s) { y / s } else { 0.0 };
    let a = if x < 0.0 { 2.0 - t } else { t };
    if a < 0.0 { a + 4.0 } else { a }
}

/// The direction (on the diamond `|x| + |y| = 1`) of a pseudo-angle: the
/// exact inverse of [`pseudo_angle`] up to rounding.
fn pseudo_direction(pa: f64) -> (f64, f64) {
    if pa < 1.0 {
        (1.0 - pa, pa)
    } else if pa < 2.0 {
        let t = 2.0 - pa;
        (t - 1.0, t)
    } else if pa < 3.0 {
        let t = 2.0 - pa;
        (-(1.0 + t), t)
    } else {
        let t = pa - 4.0;
        (1.0 + t, t)
    }
}

/// Counter-clockwise angle from pseudo-angle `a` to pseudo-angle `b`, rad,
/// in `[0, 2 pi)`.
fn pseudo_gap_rad(a: f64, b: f64) -> f64 {
    let (ax, ay) = pseudo_direction(a);
    let (bx, by) = pseudo_direction(b);
    let g = libm::atan2(ax * by - ay * bx, ax * bx + ay * by);
    if g < 0.0 {
        g + core::f64::consts::TAU
    } else {
        g
    }
}

/// Bins of [`angular_coverage_rad`] (over the pseudo-angle).
const COVERAGE_BINS: usize = 64;

/// Bin of a pseudo-angle in `[0, 4)`: the top 6 mantissa bits of
/// `1 + pa / 4`, which lies in `[1, 2)` (a float-to-integer step without
/// an `as` cast).
fn coverage_bin(pa: f64) -> usize {
    let bits = (1.0 + 0.25 * pa.clamp(0.0, 4.0)).to_bits() >> 46;
    usize::try_from(bits & 63).unwrap_or(0)
}

/// Angular coverage of the points seen from `centre`: `2 pi` minus the
/// largest angular gap between neighbouring points, rad.
///
/// O(n), no sorting, one `atan2` in the usual case: points go into 64 bins
/// of a monotone pseudo-angle, each bin keeping its smallest and largest
/// value; the candidate gaps are those from the last value of one occupied
/// bin to the first of the next. Since `d theta / d pa` is within `[1, 2]`,
/// only candidates whose pseudo-angle gap is at least half the largest can
/// be the widest in radians; those are measured exactly. Exact whenever
/// the widest gap spans a bin boundary, which every gap wider than a bin
/// (at most 7.2 deg) does: below about 352 deg of coverage the value is
/// exact, above it within 7.2 deg. Points at the centre itself have no
/// direction and are ignored.
#[must_use]
pub fn angular_coverage_rad(points: &[Point2], centre: &Point2) -> f64 {
    let mut occupied: u64 = 0;
    let mut lo = [f64::INFINITY; COVERAGE_BINS];
    let mut hi = [f64::NEG_INFINITY; COVERAGE_BINS];
    let mut count = 0usize;
    for p in points {
        let (x, y) = (p[0] - centre[0], p[1] - centre[1]);
        if x == 0.0 && y == 0.0 {
            continue;
        }
        let pa = pseudo_angle(x, y);
        let b = coverage_bin(pa);
        if let (Some(l), Some(h)) = (lo.get_mut(b), hi.get_mut(b)) {
            *l = l.min(pa);
            *h = h.max(pa);
        }
        occupied |= 1u64 << b;
        count += 1;
    }
    if count < 2 {
        return 0.0;
    }
    let bin_index = |bits: u64| usize::try_from(bits.trailing_zeros()).unwrap_or(0);
    let first = bin_index(occupied);
    let last = usize::try_from(63 - occupied.leading_zeros()).unwrap_or(0);
    let (Some(first_lo), Some(last_hi)) = (lo.get(first).copied(), hi.get(last).copied()) else {
        return 0.0;
    };
    // Every point in one direction: no coverage.
    if first_lo == last_hi {
        return 0.0;
    }
    // Pass 1: the largest pseudo-angle gap (the wrap from the last bin's
    // largest value to the first bin's smallest adds a full turn, 4).
    let pseudo_gap = |from: usize, to: usize| match (hi.get(from), lo.get(to)) {
        (Some(h), Some(l)) => {
            let g = l - h;
            if g < 0.0 { g + 4.0 } else { g }
        }
        _ => 0.0,
    };
    let mut max_pd = first_lo + 4.0 - last_hi;
    let mut rest = occupied & (occupied - 1);
    let mut prev = first;
    while rest != 0 {
        let b = bin_index(rest);
        rest &= rest - 1;
        max_pd = max_pd.max(pseudo_gap(prev, b));
        prev = b;
    }
    // Pass 2: measure the candidates within a factor 2.
    let mut widest = 0.0f64;
    let wrap_pd = first_lo + 4.0 - last_hi;
    if wrap_pd >= 0.5 * max_pd {
        widest = widest.max(pseudo_gap_rad(last_hi, first_lo));
    }
    let mut rest = occupied & (occupied - 1);
    let mut prev = first;
    while rest != 0 {
        let b = bin_index(rest);
        rest &= rest - 1;
        if pseudo_gap(prev, b) >= 0.5 * max_pd
            && let (Some(h), Some(l)) = (hi.get(prev), lo.get(b))
        {
            widest = widest.max(pseudo_gap_rad(*h, *l));
        }
        prev = b;
    }
    core::f64::consts::TAU - widest
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

    fn noisy_arc(seed: u64, n: usize, span: f64) -> [[f64; 2]; 64] {
        // Small deterministic perturbations (a linear congruential sequence).
        let mut state = seed;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((state >> 11) as f64 / (1u64 << 53) as f64) - 0.5
        };
        let mut pts = arc(n, 0.5, [0.3, -0.2], 0.4, 0.4 + span);
        for p in pts.iter_mut().take(n) {
            p[0] += 0.01 * next();
            p[1] += 0.01 * next();
        }
        pts
    }

    /// The general 4x4 form, where the Pratt and hyper constraint matrices
    /// enter separately, gives both the same centre and eta, and radii with
    /// r_hyper^2 = r_pratt^2 - 4 eta s^2 (s the normalising scale), as the
    /// hand reduction in the module docs predicts.
    #[test]
    fn pratt_and_hyper_share_the_centre() {
        for (seed, span) in [(1, 1.0), (2, 2.5), (3, 6.0), (4, 0.6)] {
            let pts = noisy_arc(seed, 20, span);
            let pts = &pts[..20];
            let p = algebraic_circle_general(pts, AlgebraicMethod::Pratt).unwrap();
            let h = algebraic_circle_general(pts, AlgebraicMethod::Hyper).unwrap();
            let scale = Normaliser::new(pts, 3).unwrap().scale;
            assert!((p.eta - h.eta).abs() <= 1e-12 * p.eta.abs().max(1e-12));
            for k in 0..2 {
                assert!(
                    (p.circle.centre[k] - h.circle.centre[k]).abs() < 1e-12,
                    "{p:?} {h:?}"
                );
            }
            let predicted = p.circle.radius_m.powi(2) - 4.0 * p.eta * scale * scale;
            assert!((h.circle.radius_m.powi(2) - predicted).abs() < 1e-12);
            assert!(p.eta > 0.0, "noisy data have a positive eta");
            assert!(h.circle.radius_m < p.circle.radius_m);
        }
    }

    #[test]
    fn reduced_and_general_forms_agree() {
        for (seed, span) in [(5, 1.0), (6, 3.0), (7, 6.2)] {
            let pts = noisy_arc(seed, 16, span);
            let pts = &pts[..16];
            for m in [
                AlgebraicMethod::Kasa,
                AlgebraicMethod::Pratt,
                AlgebraicMethod::Hyper,
            ] {
                let a = algebraic_circle(pts, m).unwrap();
                let b = algebraic_circle_general(pts, m).unwrap();
                assert!(
                    (a.circle.radius_m - b.circle.radius_m).abs() < 1e-12,
                    "{m:?}"
                );
                assert!((a.circle.centre[0] - b.circle.centre[0]).abs() < 1e-12);
                assert!((a.circle.centre[1] - b.circle.centre[1]).abs() < 1e-12);
            }
        }
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
            assert!(algebraic_circle_general(&pts, m).is_err(), "{m:?}");
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
    fn coverage_of_arcs() {
        use core::f64::consts::PI;
        let pts = arc(19, 1.0, [0.0, 0.0], 0.0, PI);
        let c = angular_coverage_rad(&pts[..19], &[0.0, 0.0]);
        assert!((c - PI).abs() < 1e-12);
        // An arc inside one bin, one across the +x axis, one of 300 deg.
        for (from, to) in [(0.1, 0.15), (-0.5, 0.7), (1.0, 1.0 + 300f64.to_radians())] {
            let pts = arc(25, 2.0, [1.0, 1.0], from, to);
            let c = angular_coverage_rad(&pts[..25], &[1.0, 1.0]);
            assert!((c - (to - from)).abs() < 1e-12, "{from} {to} {c}");
        }
        let one_way = [[2.0, 1.0], [3.0, 1.0], [4.0, 1.0]];
        assert_eq!(angular_coverage_rad(&one_way, &[1.0, 1.0]), 0.0);
        // 64 evenly spaced points (every bin occupied): within one bin of
        // the true 360 - 5.625 deg.
        let pts = arc(64, 1.0, [0.0, 0.0], 0.0, 2.0 * PI * 63.0 / 64.0);
        let c = angular_coverage_rad(&pts[..64], &[0.0, 0.0]);
        assert!(
            (c - 2.0 * PI * 63.0 / 64.0).abs() <= 7.2f64.to_radians(),
            "{c}"
        );
    }
}
