//! Ellipse fits to points in the cross-section plane.
//!
//! Direct least squares of Fitzgibbon, Pilu and Fisher (1999, IEEE TPAMI
//! 21), in the numerically stable partitioned form of Halir and Flusser
//! (1998, "Numerically stable direct least squares fitting of ellipses"):
//! the conic `a x^2 + b xy + c y^2 + d x + e y + f = 0` minimising the
//! algebraic distance under `4ac - b^2 = 1`, from the 3x3 reduced
//! eigenproblem, keeping the eigenvector with `4ac - b^2 > 0`. The reduced
//! matrix is not symmetric; its eigenvalues come from the characteristic
//! cubic (trigonometric / Cardano roots, Newton-polished) and each
//! eigenvector from cross products of rows of `M - lambda I`.
//!
//! Geometric refinement: Levenberg–Marquardt on the orthogonal distances
//! to the ellipse over `(cx, cy, a, b, phi)`. The foot point of each point
//! comes from Eberly's robust bisection ("Distance from a point to an
//! ellipse", Geometric Tools, 2011), capped. At the foot point the
//! derivative of the signed distance with respect to a shape parameter is
//! `-n . dq/dtheta` (the tangential terms vanish), which gives an exact
//! Jacobian.

use super::fit::{
    Convergence, FitError, LmSettings, Normaliser, Point2, count_f64, lm_offer, positive, sq,
};
use nalgebra::{Matrix3, SMatrix, SVector, Vector3};

/// An ellipse in the cross-section plane.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Ellipse {
    /// Centre, m.
    pub centre: Point2,
    /// Semi-major axis, m.
    pub semi_major_m: f64,
    /// Semi-minor axis, m (<= semi-major).
    pub semi_minor_m: f64,
    /// Angle of the major axis from the plane's first axis toward its
    /// second, rad, in `(-pi/2, pi/2]`.
    pub major_axis_angle_rad: f64,
}

/// Result of the geometric ellipse fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeometricEllipse {
    /// The ellipse.
    pub ellipse: Ellipse,
    /// RMS orthogonal residual, m.
    pub rms_residual_m: f64,
    /// Covariance of `(cx, cy, semi-major, semi-minor, angle)`, SI units,
    /// `RSS / (n - 5) (J^T J)^-1`; `None` when `J^T J` is singular (for
    /// instance the angle of a near-circle is not determined).
    pub covariance: Option<SMatrix<f64, 5, 5>>,
    /// How the solver ended.
    pub convergence: Convergence,
}

/// Cap on the foot-point root iterations.
pub const FOOT_MAX_ITERATIONS: u32 = 80;

/// Real roots of `x^3 + a x^2 + b x + c` (Numerical Recipes section 5.6
/// forms), each polished by two Newton steps. Returns the roots and count.
fn cubic_real_roots(a: f64, b: f64, c: f64) -> ([f64; 3], usize) {
    let q = (a * a - 3.0 * b) / 9.0;
    let r = (2.0 * a * a * a - 9.0 * a * b + 27.0 * c) / 54.0;
    let mut roots = [0.0; 3];
    let count;
    let third = a / 3.0;
    if r * r < q * q * q {
        let sq_q = libm::sqrt(q);
        let theta = libm::acos((r / (sq_q * sq_q * sq_q)).clamp(-1.0, 1.0));
        let tau = core::f64::consts::TAU;
        roots = [
            -2.0 * sq_q * libm::cos(theta / 3.0) - third,
            -2.0 * sq_q * libm::cos((theta + tau) / 3.0) - third,
            -2.0 * sq_q * libm::cos((theta - tau) / 3.0) - third,
        ];
        count = 3;
    } else {
        let big_a = -r.signum() * libm::cbrt(libm::fabs(r) + libm::sqrt(r * r - q * q * q));
        let big_b = if big_a == 0.0 { 0.0 } else { q / big_a };
        roots[0] = big_a + big_b - third;
        count = 1;
    }
    for x in roots.iter_mut().take(count) {
        for _ in 0..2 {
            let f = ((*x + a) * *x + b) * *x + c;
            let df = (3.0 * *x + 2.0 * a) * *x + b;
            if df != 0.0 {
                let xn = *x - f / df;
                if xn.is_finite() {
                    *x = xn;
                }
            }
        }
    }
    (roots, count)
}

/// A null vector of a 3x3 matrix from the cross products of its rows.
fn null_vector_3(m: &Matrix3<f64>) -> Option<Vector3<f64>> {
    let r0 = m.row(0).transpose();
    let r1 = m.row(1).transpose();
    let r2 = m.row(2).transpose();
    let mut best = r0.cross(&r1);
    for c in [r0.cross(&r2), r1.cross(&r2)] {
        if c.norm_squared() > best.norm_squared() {
            best = c;
        }
    }
    let n = best.norm();
    if n > 0.0 && n.is_finite() {
        Some(best / n)
    } else {
        None
    }
}

/// Conic coefficients to centre, semi-axes and angle.
fn conic_to_ellipse(con: [f64; 6]) -> Result<Ellipse, FitError> {
    let [a, b, c, d, e, f] = con;
    let den = 4.0 * a * c - b * b;
    if !positive(den) {
        return Err(FitError::NotEllipse);
    }
    let x0 = (b * e - 2.0 * c * d) / den;
    let y0 = (b * d - 2.0 * a * e) / den;
    let f0 = f + 0.5 * (d * x0 + e * y0);
    let m = 0.5 * (a + c);
    let h = libm::sqrt(sq(0.5 * (a - c)) + sq(0.5 * b));
    let (mut l_big, mut l_small, mut f0) = (m + h, m - h, f0);
    if m < 0.0 {
        // Overall sign is free: make the quadratic form positive.
        l_big = -(m - h);
        l_small = -(m + h);
        f0 = -f0;
    }
    if !positive(l_small) || !positive(-f0) {
        return Err(FitError::NotEllipse);
    }
    let semi_major = libm::sqrt(-f0 / l_small);
    let semi_minor = libm::sqrt(-f0 / l_big);
    // Eigenvector of the larger eigenvalue of [[a, b/2], [b/2, c]] (sign
    // normalised) lies at 0.5 atan2(b, a - c); the major axis is normal to it.
    let (a_n, b_n, c_n) = if m < 0.0 { (-a, -b, -c) } else { (a, b, c) };
    let minor_dir = 0.5 * libm::atan2(b_n, a_n - c_n);
    Ok(Ellipse {
        centre: [x0, y0],
        semi_major_m: semi_major,
        semi_minor_m: semi_minor,
        major_axis_angle_rad: wrap_half_pi(minor_dir + core::f64::consts::FRAC_PI_2),
    })
}

/// Wrap an axis angle into `(-pi/2, pi/2]`.
fn wrap_half_pi(mut a: f64) -> f64 {
    let pi = core::f64::consts::PI;
    // Bounded: inputs here are within a few multiples of pi.
    for _ in 0..8 {
        if a > 0.5 * pi {
            a -= pi;
        } else if a <= -0.5 * pi {
            a += pi;
        } else {
            break;
        }
    }
    a
}

/// Direct least-squares ellipse (Fitzgibbon, Pilu and Fisher 1999; Halir
/// and Flusser 1998 form).
///
/// # Errors
/// [`FitError`] for fewer than 5 points, bad or degenerate points, or when
/// no eigenvector gives an ellipse.
pub fn direct_ellipse(points: &[Point2]) -> Result<Ellipse, FitError> {
    let norm = Normaliser::new(points, 5)?;
    let mut s1 = Matrix3::zeros();
    let mut s2 = Matrix3::zeros();
    let mut s3 = Matrix3::zeros();
    for p in points {
        let [x, y] = norm.apply(p);
        let d1 = Vector3::new(x * x, x * y, y * y);
        let d2 = Vector3::new(x, y, 1.0);
        s1 += d1 * d1.transpose();
        s2 += d1 * d2.transpose();
        s3 += d2 * d2.transpose();
    }
    let s3_inv = s3.try_inverse().ok_or(FitError::Collinear)?;
    let t = -(s3_inv * s2.transpose());
    let m = s1 + s2 * t;
    // C1^-1 M with C1 = [[0, 0, 2], [0, -1, 0], [2, 0, 0]].
    let mr = Matrix3::from_rows(&[m.row(2) * 0.5, -m.row(1), m.row(0) * 0.5]);
    let trace = mr.trace();
    let minors = mr.m11 * mr.m22 - mr.m12 * mr.m21 + mr.m11 * mr.m33 - mr.m13 * mr.m31
        + mr.m22 * mr.m33
        - mr.m23 * mr.m32;
    let det = mr.determinant();
    // det(M - lambda I) = -(lambda^3 - trace lambda^2 + minors lambda - det)
    let (roots, count) = cubic_real_roots(-trace, minors, -det);
    let mut best: Option<(f64, Vector3<f64>)> = None;
    for lambda in roots.iter().take(count) {
        let shifted = mr - Matrix3::identity() * *lambda;
        let Some(v) = null_vector_3(&shifted) else {
            continue;
        };
        let cond = 4.0 * v.x * v.z - v.y * v.y;
        if cond > 0.0 && best.is_none_or(|(c, _)| cond > c) {
            best = Some((cond, v));
        }
    }
    let (_, a1) = best.ok_or(FitError::NotEllipse)?;
    let a2 = t * a1;
    let e = conic_to_ellipse([a1.x, a1.y, a1.z, a2.x, a2.y, a2.z])?;
    Ok(Ellipse {
        centre: norm.undo(e.centre),
        semi_major_m: e.semi_major_m * norm.scale,
        semi_minor_m: e.semi_minor_m * norm.scale,
        major_axis_angle_rad: e.major_axis_angle_rad,
    })
}

/// Root of Eberly's `G(s) = (n0/(s + r0))^2 + (z1/(s + 1))^2 - 1` on his
/// bracket `[z1 - 1, 0]` (inside, `g < 0`) or `[z1 - 1, hypot(n0, z1) - 1]`
/// (outside). Newton's method runs on `F = 1 - (G + 1)^(-1/2)`, which has
/// the same root and sign and is exactly linear for a circle (so it takes
/// one or two steps where Newton on `G` crawls away from the pole at
/// `s = -1`), started from the circle-like estimate `hypot(n0, z1) - 1`.
/// Safeguarded: the bracket is kept by sign at every new point;
/// a Newton step leaving it is replaced by bisection, and so is the next
/// step after one that halved neither `|F|` nor the bracket (Eberly's own
/// method is the bisection). Stops when `|F|` is at rounding level, the
/// step or the bracket is at rounding level, or at
/// [`FOOT_MAX_ITERATIONS`].
fn foot_root(r0: f64, n0: f64, z1: f64, g: f64) -> f64 {
    let eval = |s: f64| {
        let a = n0 / (s + r0);
        let b = z1 / (s + 1.0);
        let q = a * a + b * b; // G + 1
        let dq = -2.0 * (a * a / (s + r0) + b * b / (s + 1.0));
        let inv_sqrt = 1.0 / libm::sqrt(q);
        (1.0 - inv_sqrt, 0.5 * inv_sqrt / q * dq)
    };
    let mut lo = z1 - 1.0;
    let mut hi = if g < 0.0 {
        0.0
    } else {
        libm::hypot(n0, z1) - 1.0
    };
    // Start from the circle-like estimate hypot(n0, z1) - 1 (the root when
    // r0 = 1), inside the bracket.
    let mut s = (libm::hypot(n0, z1) - 1.0).clamp(lo, hi);
    let (mut f, mut df) = eval(s);
    if libm::fabs(f) <= 4.0 * f64::EPSILON {
        return s;
    }
    if f > 0.0 {
        lo = s;
    } else {
        hi = s;
    }
    let mut bisect = false;
    for _ in 0..FOOT_MAX_ITERATIONS {
        let width = hi - lo;
        if width <= 4.0 * f64::EPSILON * (1.0 + libm::fabs(lo)) {
            break;
        }
        let newton = s - f / df;
        let next = if !bisect && df != 0.0 && newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        let (fn_, dfn) = eval(next);
        // F is of order one: at rounding level it is at the root.
        if libm::fabs(fn_) <= 4.0 * f64::EPSILON {
            return next;
        }
        if fn_ > 0.0 {
            lo = next;
        } else {
            hi = next;
        }
        let step = libm::fabs(next - s);
        // Bisect next time only when neither |F| nor the bracket halved.
        bisect = libm::fabs(fn_) >= 0.5 * libm::fabs(f) && hi - lo > 0.5 * width;
        s = next;
        f = fn_;
        df = dfn;
        if step <= 4.0 * f64::EPSILON * (1.0 + libm::fabs(s)) {
            break;
        }
    }
    s
}

/// Foot point on `x^2/e0^2 + y^2/e1^2 = 1` (e0 >= e1 > 0) of a point in
/// the first quadrant, by Eberly's method ("Distance from a point to an
/// ellipse", Geometric Tools, 2011) with the root found by
/// [`foot_root`].
fn foot_first_quadrant(e0: f64, e1: f64, y0: f64, y1: f64) -> (f64, f64) {
    if y1 > 0.0 {
        if y0 > 0.0 {
            let z0 = y0 / e0;
            let z1 = y1 / e1;
            let g = z0 * z0 + z1 * z1 - 1.0;
            if g != 0.0 {
                let r0 = sq(e0 / e1);
                let n0 = r0 * z0;
                let s = foot_root(r0, n0, z1, g);
                (r0 * y0 / (s + r0), y1 / (s + 1.0))
            } else {
                (y0, y1)
            }
        } else {
            (0.0, e1)
        }
    } else {
        let numer0 = e0 * y0;
        let denom0 = e0 * e0 - e1 * e1;
        if numer0 < denom0 {
            let xde0 = numer0 / denom0;
            (e0 * xde0, e1 * libm::sqrt((1.0 - xde0 * xde0).max(0.0)))
        } else {
            (e0, 0.0)
        }
    }
}

/// Foot point of `(u, v)` (ellipse-aligned coordinates) on the ellipse
/// with semi-axes `a` along u and `b` along v.
fn foot_point(a: f64, b: f64, u: f64, v: f64) -> (f64, f64) {
    let (fu, fv) = if a >= b {
        foot_first_quadrant(a, b, libm::fabs(u), libm::fabs(v))
    } else {
        let (x1, x0) = foot_first_quadrant(b, a, libm::fabs(v), libm::fabs(u));
        (x0, x1)
    };
    (
        if u < 0.0 { -fu } else { fu },
        if v < 0.0 { -fv } else { fv },
    )
}

/// Signed orthogonal distance (positive outside) from `p` to `e` and its
/// gradient with respect to `(cx, cy, a, b, angle)`.
fn distance_and_gradient(e: &SVector<f64, 5>, p: &Point2) -> (f64, SVector<f64, 5>) {
    distance_and_gradient_sc(e, libm::sin(e.a), libm::cos(e.a), p)
}

/// [`distance_and_gradient`] with the angle's sine and cosine given.
fn distance_and_gradient_sc(
    e: &SVector<f64, 5>,
    sp: f64,
    cp: f64,
    p: &Point2,
) -> (f64, SVector<f64, 5>) {
    let (cx, cy, a, b) = (e.x, e.y, e.z, e.w);
    let dx = p[0] - cx;
    let dy = p[1] - cy;
    let u = cp * dx + sp * dy;
    let v = -sp * dx + cp * dy;
    let (x0, x1) = foot_point(a, b, u, v);
    let dist = libm::hypot(u - x0, v - x1);
    let inside = sq(u / a) + sq(v / b) < 1.0;
    let d = if inside { -dist } else { dist };
    // Outward unit normal at the foot point, ellipse frame.
    let gx = x0 / (a * a);
    let gy = x1 / (b * b);
    let gn = libm::hypot(gx, gy);
    let (nx, ny) = if gn > 0.0 {
        (gx / gn, gy / gn)
    } else {
        (1.0, 0.0)
    };
    // Map-frame normal: R(phi) (nx, ny).
    let mx = cp * nx - sp * ny;
    let my = sp * nx + cp * ny;
    let cos_t = x0 / a;
    let sin_t = x1 / b;
    let grad = SVector::<f64, 5>::new(-mx, -my, -nx * cos_t, -ny * sin_t, -(-nx * x1 + ny * x0));
    (d, grad)
}

fn ellipse_normal_equations(
    points: &[Point2],
    norm: &Normaliser,
    e: &SVector<f64, 5>,
) -> (f64, SMatrix<f64, 5, 5>, SVector<f64, 5>) {
    let mut cost = 0.0;
    let mut jtj = SMatrix::<f64, 5, 5>::zeros();
    let mut jtd = SVector::<f64, 5>::zeros();
    let (sp, cp) = (libm::sin(e.a), libm::cos(e.a));
    for q in points {
        let p = norm.apply(q);
        let (d, g) = distance_and_gradient_sc(e, sp, cp, &p);
        cost += d * d;
        jtj += g * g.transpose();
        jtd += g * d;
    }
    (cost, jtj, jtd)
}

/// Geometric (orthogonal-distance) ellipse fit by Levenberg–Marquardt
/// from `initial`.
///
/// # Errors
/// [`FitError`] for fewer than 5 points, bad or degenerate points, or a
/// degenerate start.
pub fn geometric_ellipse(
    points: &[Point2],
    initial: &Ellipse,
    settings: &LmSettings,
) -> Result<GeometricEllipse, FitError> {
    let norm = Normaliser::new(points, 5)?;
    let c0 = norm.apply(&initial.centre);
    let mut p = SVector::<f64, 5>::new(
        c0[0],
        c0[1],
        initial.semi_major_m / norm.scale,
        initial.semi_minor_m / norm.scale,
        initial.major_axis_angle_rad,
    );
    if !(p.iter().all(|v| v.is_finite()) && p.z > 0.0 && p.w > 0.0) {
        return Err(FitError::NoSolution);
    }
    let (mut cost, mut jtj, mut jtd) = ellipse_normal_equations(points, &norm, &p);
    let mut lambda = 1e-3;
    let mut convergence = Convergence::IterationCap {
        iterations: settings.max_iterations,
    };
    for it in 1..=settings.max_iterations {
        // Marquardt scaling with a floor, so a direction the data do not
        // determine (the angle of a near-circle) is damped, not free.
        let diag = jtj.diagonal();
        let floor = 1e-6 * diag.max().max(1e-300);
        let damped =
            jtj + SMatrix::<f64, 5, 5>::from_diagonal(&diag.map(|d| d.max(floor) * lambda));
        let Some(chol) = damped.cholesky() else {
            lambda *= 10.0;
            continue;
        };
        let delta = -chol.solve(&jtd);
        let small = delta.norm() <= settings.step_tolerance * (p.norm() + settings.step_tolerance);
        let mut cand = p + delta;
        cand.a = wrap_half_pi(cand.a);
        let ok_shape = cand.z > 0.0 && cand.w > 0.0;
        let (c_cost, c_jtj, c_jtd) = if ok_shape {
            ellipse_normal_equations(points, &norm, &cand)
        } else {
            (f64::INFINITY, jtj, jtd)
        };
        if lm_offer(
            (&mut p, &mut cost, &mut jtj, &mut jtd, &mut lambda),
            cand,
            (c_cost, c_jtj, c_jtd),
            small,
            settings.cost_tolerance,
        ) {
            convergence = Convergence::Converged { iterations: it };
            break;
        }
    }
    // Normalise: a >= b, angle in (-pi/2, pi/2]; then the covariance at
    // the normalised parameters.
    if p.w > p.z {
        let (a, b) = (p.z, p.w);
        p.z = b;
        p.w = a;
        p.a = wrap_half_pi(p.a + core::f64::consts::FRAC_PI_2);
        (cost, jtj, _) = ellipse_normal_equations(points, &norm, &p);
    }
    let n = points.len();
    let s = norm.scale;
    let covariance = if n > 5 {
        jtj.try_inverse().map(|inv| {
            let scale =
                SMatrix::<f64, 5, 5>::from_diagonal(&SVector::<f64, 5>::new(s, s, s, s, 1.0));
            scale * inv * scale * (cost / count_f64(n - 5))
        })
    } else {
        None
    };
    Ok(GeometricEllipse {
        ellipse: Ellipse {
            centre: norm.undo([p.x, p.y]),
            semi_major_m: p.z * s,
            semi_minor_m: p.w * s,
            major_axis_angle_rad: p.a,
        },
        rms_residual_m: libm::sqrt(cost / count_f64(n)) * s,
        covariance,
        convergence,
    })
}

/// Signed orthogonal distance from `p` to the ellipse `e`, m (positive
/// outside).
#[must_use]
pub fn signed_distance_m(e: &Ellipse, p: &Point2) -> f64 {
    let v = SVector::<f64, 5>::new(
        e.centre[0],
        e.centre[1],
        e.semi_major_m,
        e.semi_minor_m,
        e.major_axis_angle_rad,
    );
    distance_and_gradient(&v, p).0
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ellipse_points(e: &Ellipse, n: usize, from: f64, to: f64) -> [[f64; 2]; 40] {
        let mut out = [[0.0; 2]; 40];
        let (sp, cp) = (e.major_axis_angle_rad.sin(), e.major_axis_angle_rad.cos());
        for (i, o) in out.iter_mut().take(n).enumerate() {
            let t = from + (to - from) * i as f64 / n as f64;
            let (u, v) = (e.semi_major_m * t.cos(), e.semi_minor_m * t.sin());
            *o = [e.centre[0] + cp * u - sp * v, e.centre[1] + sp * u + cp * v];
        }
        out
    }

    const TRUE: Ellipse = Ellipse {
        centre: [0.2, -0.1],
        semi_major_m: 0.6,
        semi_minor_m: 0.35,
        major_axis_angle_rad: 0.4,
    };

    #[test]
    fn direct_fit_recovers_exact_ellipse() {
        let pts = ellipse_points(&TRUE, 30, 0.0, core::f64::consts::TAU);
        let e = direct_ellipse(&pts[..30]).unwrap();
        assert!((e.semi_major_m - 0.6).abs() < 1e-9, "{e:?}");
        assert!((e.semi_minor_m - 0.35).abs() < 1e-9);
        assert!((e.major_axis_angle_rad - 0.4).abs() < 1e-9);
        assert!((e.centre[0] - 0.2).abs() < 1e-9 && (e.centre[1] + 0.1).abs() < 1e-9);
    }

    #[test]
    fn geometric_refinement_converges_from_a_rough_start() {
        let pts = ellipse_points(&TRUE, 30, 0.0, core::f64::consts::TAU);
        let start = Ellipse {
            centre: [0.25, -0.05],
            semi_major_m: 0.5,
            semi_minor_m: 0.4,
            major_axis_angle_rad: 0.2,
        };
        let g = geometric_ellipse(&pts[..30], &start, &LmSettings::default()).unwrap();
        assert!(g.convergence.converged(), "{g:?}");
        assert!((g.ellipse.semi_major_m - 0.6).abs() < 1e-8, "{g:?}");
        assert!((g.ellipse.semi_minor_m - 0.35).abs() < 1e-8);
        assert!((g.ellipse.major_axis_angle_rad - 0.4).abs() < 1e-8);
        assert!(g.rms_residual_m < 1e-9);
    }

    /// Distance to a circle (a = b) is |rho - r|: checks the foot point and
    /// the sign convention against the closed form.
    #[test]
    fn distance_to_a_circle_is_closed_form() {
        let c = Ellipse {
            centre: [1.0, 1.0],
            semi_major_m: 0.5,
            semi_minor_m: 0.5,
            major_axis_angle_rad: 0.0,
        };
        for p in [[1.0, 2.0], [1.2, 1.1], [0.0, 0.0], [1.0, 1.0]] {
            let rho = ((p[0] - 1.0f64).powi(2) + (p[1] - 1.0f64).powi(2)).sqrt();
            assert!(
                (signed_distance_m(&c, &p) - (rho - 0.5)).abs() < 1e-12,
                "{p:?}"
            );
        }
    }

    /// Distance against brute force: the nearest of 200 000 points sampled
    /// along the ellipse, for points inside, outside, near the axes.
    #[test]
    fn distance_matches_dense_sampling() {
        let e = Ellipse {
            centre: [0.3, -0.2],
            semi_major_m: 0.7,
            semi_minor_m: 0.25,
            major_axis_angle_rad: -0.6,
        };
        let (sp, cp) = (e.major_axis_angle_rad.sin(), e.major_axis_angle_rad.cos());
        for p in [
            [0.3, -0.2],
            [1.2, -0.5],
            [0.35, -0.15],
            [-0.5, 0.4],
            [0.31, -0.21],
            [0.9, -0.6],
        ] {
            let mut best = f64::INFINITY;
            for k in 0..200_000 {
                let t = core::f64::consts::TAU * k as f64 / 200_000.0;
                let (u, v) = (e.semi_major_m * t.cos(), e.semi_minor_m * t.sin());
                let q = [e.centre[0] + cp * u - sp * v, e.centre[1] + sp * u + cp * v];
                best = best.min(((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2)).sqrt());
            }
            let d = signed_distance_m(&e, &p);
            assert!((d.abs() - best).abs() < 1e-6, "{p:?}: {d} vs {best}");
        }
    }

    /// Finite-difference check of the analytic gradient.
    #[test]
    fn gradient_matches_finite_differences() {
        let e = SVector::<f64, 5>::new(0.1, 0.2, 0.7, 0.4, 0.3);
        for p in [[0.9, 0.5], [0.1, 0.3], [-0.8, -0.6]] {
            let (_, g) = distance_and_gradient(&e, &p);
            for k in 0..5 {
                let h = 1e-6;
                let mut ep = e;
                ep[k] += h;
                let mut em = e;
                em[k] -= h;
                let fd = (distance_and_gradient(&ep, &p).0 - distance_and_gradient(&em, &p).0)
                    / (2.0 * h);
                assert!((fd - g[k]).abs() < 1e-6, "k={k} fd={fd} g={}", g[k]);
            }
        }
    }
}
